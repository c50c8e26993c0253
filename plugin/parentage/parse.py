"""Build a `Snapshot` from file bytes: OBO (fastobo) or OBO Graphs JSON; full or incremental."""
from __future__ import annotations

from typing import Any

from parentage import _obo
from parentage.errors import ParentageError
from parentage.snapshot import Snapshot, Term, TermTable

# Counts full and incremental parser runs; tests use it to show the store spares a parse.
PARSE_CALLS = {"full": 0, "incremental": 0}


def decode(data: bytes, path: str) -> str:
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ParentageError(f"{path}: not UTF-8 text (byte {exc.start}); OBO files must be "
                             "UTF-8") from None


def parse_ontology_text(text: str, path: str, blob: str | None = None,
                        base: Snapshot | None = None) -> Snapshot:
    """Parse `text`. With `base`, reuse every term whose stanza text is unchanged."""
    if path.endswith(".json"):
        from parentage._obojson import parse_json

        PARSE_CALLS["full"] += 1
        return Snapshot(path, blob, parse_json(text, path))
    header, stanzas = _obo.split(text, path)
    if base is None:
        PARSE_CALLS["full"] += 1
        terms = _obo.parse_stanzas(stanzas, path)
        return Snapshot(path, blob, terms, _obo.header_pairs(header, path))
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
    return Snapshot(path, blob, table, _obo.header_pairs(header, path))
