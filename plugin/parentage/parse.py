"""Build a `Snapshot` from file bytes: OBO (fastobo) or OBO Graphs JSON; full or incremental."""
from __future__ import annotations

import hashlib
from collections.abc import Sequence
from itertools import compress
from typing import Any

from parentage import _obo
from parentage.errors import ParentageError
from parentage.snapshot import Layout, Segment, Snapshot, Term, TermTable, carried_axioms, derived

# Counts full and incremental parser runs; tests use it to show the store spares a parse.
PARSE_CALLS = {"full": 0, "incremental": 0, "compared": 0}

# Stanzas per stored block digest: an unchanged run of this many stanzas costs one hash of
# its text; a changed one costs splitting up to this many stanzas.
BLOCK = 32


def decode(data: bytes, path: str) -> str:
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ParentageError(f"{path}: not UTF-8 text (byte {exc.start}); OBO files must be "
                             "UTF-8") from None


def parse_ontology_text(text: str, path: str, blob: str | None = None,
                        base: Snapshot | None = None, by_digest: bool = False,
                        data: bytes | None = None) -> Snapshot:
    """Parse `text`. With `base`, reuse every term whose stanza text is unchanged: found by
    comparing runs of stanzas with the base's block digests, or (`by_digest`, or a base that
    cannot be compared) by the digest of every head stanza. `data`, the bytes `text` was
    decoded from, lets block digests be taken from the bytes in place."""
    if path.endswith(".json"):
        from parentage._obojson import parse_json

        PARSE_CALLS["full"] += 1
        return Snapshot(path, blob, parse_json(text, path))
    text = _obo.normalise(text)
    source = _Source(text, data)
    if base is not None and not by_digest and base.reusable and _has_blocks(base):
        PARSE_CALLS["compared"] += 1
        return _compared(source, path, blob, base)
    header, stanzas = _obo.split(text, path)
    header_text = text[: stanzas[0].offset] if stanzas else text
    if base is None:
        PARSE_CALLS["full"] += 1
        terms = _obo.parse_stanzas(stanzas, path)
        return Snapshot(path, blob, terms, _obo.header_pairs(header, path),
                        _layout(source, header_text, stanzas))
    PARSE_CALLS["incremental"] += 1
    old = base.terms
    known = {old.digests[n]: n for n in old.index.values()}
    fresh = [s for s in stanzas if s.kind != "Term" or s.digest not in known]
    parsed_terms = _obo.parse_stanzas(fresh, path)
    parsed = iter(parsed_terms)
    ids: list[str] = []
    parents: list[tuple[str, ...]] = []
    obsolete: list[bool] = []
    lines: list[tuple[int, int]] = []
    digests: list[str] = []
    rows: list[Any] = []
    for stanza in stanzas:
        if stanza.kind != "Term":
            continue
        n = known.get(stanza.digest)
        if n is None:
            term = next(parsed)
            ids.append(term.id)
            parents.append(term.parents)
            obsolete.append(term.obsolete)
            rows.append(term)
        else:
            # Same stanza text: reuse the stored row undecoded; only its place moved.
            row = old.rows[n]
            ids.append(old.ids[n])
            parents.append(old.parents[n])
            obsolete.append(old.obsolete[n])
            rows.append(row._replace(line=stanza.line, end_line=stanza.end_line)
                        if isinstance(row, Term) else row)
        lines.append((stanza.line, stanza.end_line))
        digests.append(stanza.digest)
    table = TermTable(ids, parents, obsolete, lines, digests, rows)
    # Headers are short: parsing them again is cheaper than proving them unchanged.
    snap = Snapshot(path, blob, table, _obo.header_pairs(header, path),
                    _layout(source, header_text, stanzas))
    before = base.known_disjoint
    if before is not None:
        snap.known_disjoint = carried_axioms(table, before, [t.id for t in parsed_terms])
    return snap


def _digest(data: bytes | memoryview) -> str:
    # A cryptographic hash, since a block whose digest matches is copied unread and a pull
    # request's text is untrusted; SHA-256 because current cores hash it in hardware (about
    # twice blake2b's speed on this project's benchmark machine: 30 MB in 0.02 s).
    return hashlib.sha256(data).hexdigest()[:32]


class _Source:
    """Normalised text and, where it is ASCII and was not changed by normalising, the bytes it
    was decoded from: a span's digest is then taken from those bytes in place (hashing every
    block of a 30 MB head otherwise spends as long encoding the text as hashing it). The
    digest of a span is the same either way: ASCII text is its own UTF-8."""

    def __init__(self, text: str, data: bytes | None = None) -> None:
        self.text = text
        # Equal lengths mean every character is one byte and no "\r" or BOM was dropped.
        self.view = memoryview(data) if data is not None and len(data) == len(text) else None

    def digest(self, start: int, stop: int) -> str:
        if self.view is not None:
            return _digest(self.view[start:stop])
        return _digest(self.text[start:stop].encode("utf-8", "surrogatepass"))


def _blocks(source: _Source, starts: Sequence[int], known: dict[int, str] | None = None) -> list[str]:
    """Digest of each run of BLOCK stanzas (from a stanza's start to the next run's start, or
    the end of the text): what a later revision compares its text with. `known` gives the
    digests of runs already hashed (block number -> digest)."""
    known = known or {}
    total = -(-len(starts) // BLOCK)
    out = []
    for j in range(total):
        digest = known.get(j)
        if digest is None:
            stop = starts[(j + 1) * BLOCK] if (j + 1) * BLOCK < len(starts) else len(source.text)
            digest = source.digest(starts[j * BLOCK], stop)
        out.append(digest)
    return out


def _has_blocks(base: Snapshot) -> bool:
    """The base has one stored digest per run of BLOCK stanzas (as this version cuts them)."""
    layout = base.layout
    return layout is not None and len(layout.blocks) == -(-len(layout.starts) // BLOCK)


def _layout(source: _Source, header: str, stanzas: list[_obo.Stanza]) -> Layout:
    starts = [s.offset for s in stanzas]
    return Layout(starts, [s.line for s in stanzas], [s.kind == "Term" for s in stanzas],
                  _blocks(source, starts), len(source.text), source.digest(0, len(header)))


def _compared(source: _Source, path: str, blob: str | None, base: Snapshot) -> Snapshot:
    """The head as runs of base stanzas it repeats, plus the stanzas that differ.

    `text` is normalised. At each run of BLOCK base stanzas the head's text at the same
    length is hashed and compared with the run's stored digest; a run is copied only when
    the digests agree and a stanza starts (or the text ends) right after it, so it is what a
    full split would have found there. Elsewhere the head is split stanza by stanza: a stanza
    with a base stanza's digest is copied, any other is parsed. Equal to a full parse by
    construction (and by the property test); the base's own text is never read.
    """
    text = source.text
    layout = base.layout
    assert layout is not None
    starts, count, blocks = layout.starts, len(layout.starts), layout.blocks
    first_term = layout.first_terms()
    digests = base.terms.digests
    head_starts = _obo.stanza_starts_from(text, 0, 1)
    first = head_starts[0] if head_starts else len(text)
    header_text = text[:first]
    stanza_of_term: list[int] = []  # filled when a stanza is found out of place
    segments: list[Segment] = []
    fresh: list[tuple[int, _obo.Stanza]] = []
    at, k, line = first, 0, header_text.count("\n") + 1
    size = len(text)
    head_k = 0  # stanzas of the head so far
    same_blocks: dict[int, str] = {}  # head block number -> digest, where a whole base block lands
    while at < size:
        if k < count and k % BLOCK == 0:
            after = min(k + BLOCK, count)
            stop = at + (starts[after] if after < count else layout.size) - starts[k]
            if stop <= size and (stop == size or _obo.is_stanza_line(text, stop)) and \
                    source.digest(at, stop) == blocks[k // BLOCK]:
                segments.append(("copy", k, after - k, at - starts[k], line - layout.lines[k]))
                if head_k % BLOCK == 0 and (after - k == BLOCK or stop == size):
                    same_blocks[head_k // BLOCK] = blocks[k // BLOCK]  # the same text, hashed
                # The run is the base's text, so its lines are the base's.
                line += layout.lines[after] - layout.lines[k] if after < count else text.count("\n", at, stop)
                head_k += after - k
                at, k = stop, after
                continue
        # Split the next head stanza on its own.
        nxt = _obo.stanza_starts_from(text, at + 1, 1)
        stop = nxt[0] if nxt else size
        stanza = _obo.stanza_at(text, at, stop, line, path)
        same = None
        if stanza.kind == "Term":
            if k < count and layout.terms[k] and digests[first_term[k]] == stanza.digest:
                same = k  # the base's next stanza, unchanged
            else:
                # A base stanza met out of place (moved, or after a removal) has its id and
                # its digest; a different id means different text, so it is new.
                n = base.terms.index.get(stanza.id) if stanza.id else None
                if n is not None and digests[n] == stanza.digest:
                    if not stanza_of_term:
                        stanza_of_term = list(compress(range(count), layout.terms))
                    same = stanza_of_term[n]
        if same is not None:
            segments.append(("copy", same, 1, at - starts[same], line - layout.lines[same]))
            k = same + 1
        else:
            fresh.append((len(segments), stanza))
            segments.append(("new", at, line, None))
        line += text.count("\n", at, stop)
        head_k += 1
        at = stop
    parsed = _obo.parse_stanzas([s for _, s in fresh], path)
    # After the stanzas, as a full parse does, so the same error is reported first.
    header_digest = source.digest(0, first)
    header = base.header if header_digest == layout.header else \
        _obo.header_pairs(header_text.removesuffix("\n"), path)
    terms = iter(parsed)
    for place, stanza in fresh:
        term = next(terms) if stanza.kind == "Term" else None
        segments[place] = ("new", stanza.offset, stanza.line, term)
    snap = derived(path, blob, header, base, segments)
    assert snap.layout is not None
    snap.layout = snap.layout._replace(blocks=_blocks(source, snap.layout.starts, same_blocks), size=size,
                                       header=header_digest)
    return snap
