"""Build a `Snapshot` from file bytes: OBO (fastobo) or OBO Graphs JSON; full or incremental."""
from __future__ import annotations

from typing import Any

from parentage import _obo
from parentage.errors import ParentageError
from parentage.snapshot import Layout, Segment, Snapshot, Term, TermTable, derived

# Counts full and incremental parser runs; tests use it to show the store spares a parse.
PARSE_CALLS = {"full": 0, "incremental": 0, "compared": 0}

# Stanzas compared at once when the head is matched against the base text; doubled after each
# match, so a long unchanged run costs a few string comparisons, not one per stanza.
_FIRST_BLOCK = 64


def decode(data: bytes, path: str) -> str:
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ParentageError(f"{path}: not UTF-8 text (byte {exc.start}); OBO files must be "
                             "UTF-8") from None


def _layout(stanzas: list[_obo.Stanza]) -> Layout:
    return Layout([s.offset for s in stanzas], [s.line for s in stanzas],
                  [s.kind == "Term" for s in stanzas])


def parse_ontology_text(text: str, path: str, blob: str | None = None,
                        base: Snapshot | None = None, base_text: str | None = None) -> Snapshot:
    """Parse `text`. With `base`, reuse every term whose stanza text is unchanged; with the
    base's own text as well, unchanged runs of stanzas are found without splitting them."""
    if path.endswith(".json"):
        from parentage._obojson import parse_json

        PARSE_CALLS["full"] += 1
        return Snapshot(path, blob, parse_json(text, path))
    if base is not None and base_text is not None and base.reusable:
        PARSE_CALLS["compared"] += 1
        return _compared(_obo.normalise(text), path, blob, base, _obo.normalise(base_text))
    header, stanzas = _obo.split(text, path)
    if base is None:
        PARSE_CALLS["full"] += 1
        terms = _obo.parse_stanzas(stanzas, path)
        return Snapshot(path, blob, terms, _obo.header_pairs(header, path), _layout(stanzas))
    PARSE_CALLS["incremental"] += 1
    old = base.terms
    known = {old.digests[n]: n for n in old.index.values()}
    fresh = [s for s in stanzas if s.kind != "Term" or s.digest not in known]
    parsed = iter(_obo.parse_stanzas(fresh, path))
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
    return Snapshot(path, blob, table, _obo.header_pairs(header, path), _layout(stanzas))


def _compared(text: str, path: str, blob: str | None, base: Snapshot, old: str) -> Snapshot:
    """The head as runs of base stanzas whose text it repeats, plus the stanzas that differ.

    Both texts are normalised. A run is accepted only when the head has the same characters
    and a stanza starts (or the text ends) right after it, so a copied run is exactly what a
    full split would have found there; everything else is split and, where its digest is new,
    parsed. Equal to a full parse by construction (and by the property test).
    """
    layout = base.layout
    assert layout is not None
    starts, count = layout.starts, len(layout.starts)
    old_first = starts[0] if starts else len(old)
    head_starts = _obo.stanza_starts_from(text, 0, 1)
    first = head_starts[0] if head_starts else len(text)
    header_text = text[:first]
    known = _digest_to_stanza(base)
    segments: list[Segment] = []
    fresh: list[tuple[int, _obo.Stanza]] = []
    at, k, line = first, 0, header_text.count("\n") + 1
    block = _FIRST_BLOCK
    size = len(text)
    while at < size:
        if k < count:
            block = min(block, count - k)
            while block:
                after = k + block
                length = (starts[after] if after < count else len(old)) - starts[k]
                stop = at + length
                if text[at:stop] == old[starts[k]:starts[k] + length] and \
                        (stop == size or _obo.is_stanza_line(text, stop)):
                    break
                block //= 2
            if block:
                segments.append(("copy", k, block, at - starts[k], line - layout.lines[k]))
                line += old.count("\n", starts[k], starts[k] + length)
                at, k = stop, k + block
                block *= 2
                continue
        # This head stanza differs from the base's next one: split it on its own.
        nxt = _obo.stanza_starts_from(text, at + 1, 1)
        stop = nxt[0] if nxt else size
        stanza = _obo.stanza_at(text, at, stop, line, path)
        same = known.get(stanza.digest) if stanza.kind == "Term" else None
        if same is not None:
            # A base stanza met again (moved or after an edit): copy it, resume after it.
            segments.append(("copy", same, 1, at - starts[same], line - layout.lines[same]))
            k = same + 1
        else:
            fresh.append((len(segments), stanza))
            segments.append(("new", at, line, None))
        line += text.count("\n", at, stop)
        at = stop
        block = 1
    parsed = _obo.parse_stanzas([s for _, s in fresh], path)
    # After the stanzas, as a full parse does, so the same error is reported first.
    header = base.header if header_text == old[:old_first] else \
        _obo.header_pairs(header_text.removesuffix("\n"), path)
    terms = iter(parsed)
    for place, stanza in fresh:
        term = next(terms) if stanza.kind == "Term" else None
        segments[place] = ("new", stanza.offset, stanza.line, term)
    return derived(path, blob, header, base, segments)


def _digest_to_stanza(base: Snapshot) -> dict[str, int]:
    """Digest of each base Term stanza -> its stanza index (the first, if texts repeat)."""
    layout = base.layout
    assert layout is not None
    out: dict[str, int] = {}
    digests = base.terms.digests
    position = 0
    for k, is_term in enumerate(layout.terms):
        if is_term:
            out.setdefault(digests[position], k)
            position += 1
    return out
