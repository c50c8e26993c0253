"""Render a `ChangeSet` (the `parentage diff` output) as text or JSON."""
from __future__ import annotations

import json
from typing import Any

from parentage.changes import ChangeSet
from parentage.snapshot import Ontology


def _where(ontology: Ontology, tid: str) -> dict[str, Any]:
    term = ontology.terms.get(tid)
    return {"path": ontology.path_of.get(tid, ""), "line": term.line if term else 0,
            "name": term.name if term else None}


def as_json(base: Ontology, head: Ontology, changes: ChangeSet) -> str:
    terms: dict[str, Any] = {}
    for tid in changes.added + changes.obsoleted + changes.edited:
        entry = _where(head, tid)
        entry["fields"] = list(changes.fields.get(tid, ()))
        terms[tid] = entry
    for tid in changes.removed:
        entry = _where(base, tid)
        entry["fields"] = []
        terms[tid] = entry
    data = {"base": base.revision, "head": head.revision,
            "ontologies": sorted(set(base.paths) | set(head.paths)),
            "changes": changes.to_json(), "terms": terms,
            "moved": {k: list(v) for k, v in changes.moved.items()}}
    return json.dumps(data, indent=2)


def as_text(base: Ontology, head: Ontology, changes: ChangeSet) -> str:
    summary = (f"{base.revision} .. {head.revision}: {len(changes.added)} added, "
               f"{len(changes.removed)} removed, {len(changes.obsoleted)} obsoleted, "
               f"{len(changes.edited)} edited")
    lines = [summary]
    rows: list[tuple[str, str, Ontology, str]] = []
    rows += [("added", t, head, "") for t in changes.added]
    rows += [("removed", t, base, "") for t in changes.removed]
    for tid in changes.obsoleted:
        term = head.terms[tid]
        note = f" replaced by {', '.join(term.replaced_by)}" if term.replaced_by else ""
        rows.append(("obsoleted", tid, head, note))
    rows += [("edited", t, head, " [" + ", ".join(changes.fields[t]) + "]") for t in changes.edited]
    for what, tid, side, note in rows:
        where = _where(side, tid)
        name = f" {where['name']!r}" if where["name"] else ""
        lines.append(f"{where['path']}:{where['line']}: {tid}{name} {what}{note}")
    return "\n".join(lines)
