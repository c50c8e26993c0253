"""Release notes (`release_notes.Notes`) as markdown and as JSON."""
from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

from parentage.release_notes import Notes, Rule
from parentage.report import escape

MAX_ROWS = 200  # rows per section in markdown; the JSON always has everything
MAX_IDS = 10  # ids listed in one cell before "and N more"


def _cells(values: Sequence[str]) -> str:
    return "| " + " | ".join(values) + " |"


def _table(columns: Sequence[str], rows: Sequence[str]) -> list[str]:
    return ["| " + " | ".join(columns) + " |", "|" + "|".join("---" for _ in columns) + "|", *rows]


def _ids(ids: Sequence[str], limit: int = MAX_IDS) -> str:
    shown = ", ".join(escape.code(i, 80) for i in ids[:limit])
    more = len(ids) - limit
    return shown + (f" and {more} more" if more > 0 else "") if ids else "none"


def _term(notes: Notes, tid: str) -> str:
    name = notes.names.get(tid)
    return escape.code(tid, 80) + (f" {escape.text(name, 80)}" if name else "")


def _rule(rule: Rule) -> str:
    shown = {k: v for k, v in rule.items() if k != "class"}
    return escape.code(json.dumps(shown, sort_keys=True, separators=(",", ":"), default=str), 200)


def _section(columns: Sequence[str], rows: Sequence[str], max_rows: int) -> list[str]:
    if not rows:
        return ["None.", ""]
    out = [*_table(columns, rows[:max_rows]), ""]
    if len(rows) > max_rows:
        out += [f"and {len(rows) - max_rows} more (see the JSON notes)", ""]
    return out


def render_markdown(notes: Notes, max_rows: int = MAX_ROWS) -> str:
    span = f"{escape.code(notes.base, 80, table=False)} to {escape.code(notes.head, 80, table=False)}"
    out = [f"## Classification changes from {span}", ""]
    out += _table(("count", "base", "head"),
                  [_cells([escape.text(c.what, 60), str(c.base), str(c.head)]) for c in notes.counts])
    c = notes.changes
    summary = (f"Terms: {c.get('added', 0)} added, {c.get('removed', 0)} removed, "
               f"{c.get('obsoleted', 0)} made obsolete, {c.get('edited', 0)} edited, "
               f"{c.get('moved', 0)} moved; rules changed for {c.get('rules', 0)} classes.")
    out += ["", summary, ""]

    out += ["### New structured terms", ""]
    if not notes.new_terms:
        out += ["None.", ""]
    for group in notes.new_terms[:max_rows]:
        title = _term(notes, group.top) if group.top else "Directly under a root class"
        out += [f"#### {title} ({len(group.terms)})", ""]
        out += [f"- {_term(notes, t)}" for t in group.terms[:max_rows]]
        if len(group.terms) > max_rows:
            out.append(f"- and {len(group.terms) - max_rows} more")
        out.append("")

    out += ["### Terms whose parents changed", ""]
    rows = [_cells([_term(notes, m.term), _ids(m.before), _ids(m.after)]) for m in notes.moved]
    out += _section(("term", "parents before", "parents after"), rows, max_rows)

    out += ["### Classes that gained or lost members", ""]
    rows = [_cells([_term(notes, m.cls), str(m.before), str(m.after), _ids(m.gained), _ids(m.lost)])
            for m in notes.members]
    out += _section(("class", "members before", "members after", "gained", "lost"), rows, max_rows)

    out += ["### Rule changes", ""]
    rows = []
    for change in notes.rules:
        parts = [f"added {_rule(r)}" for r in change.added]
        parts += [f"removed {_rule(r)}" for r in change.removed]
        parts += [f"changed {_rule(a)} to {_rule(b)}" for a, b in change.changed]
        rows.append(_cells([_term(notes, change.cls), "; ".join(parts)]))
    out += _section(("class", "what changed"), rows, max_rows)

    out += ["### Obsoleted terms", ""]
    rows = [_cells([_term(notes, o.term), _ids(o.replaced_by), _ids(o.consider)]) for o in notes.obsoleted]
    out += _section(("term", "replaced by", "consider"), rows, max_rows)
    return "\n".join(out).rstrip("\n") + "\n"


def to_json(notes: Notes) -> dict[str, Any]:
    return {
        "base": notes.base,
        "head": notes.head,
        "counts": {c.what: {"base": c.base, "head": c.head} for c in notes.counts},
        "changes": dict(notes.changes),
        "new_terms": [{"top": g.top, "terms": list(g.terms)} for g in notes.new_terms],
        "moved": [{"term": m.term, "before": list(m.before), "after": list(m.after)}
                  for m in notes.moved],
        "members": [{"class": m.cls, "before": m.before, "after": m.after,
                     "gained": list(m.gained), "lost": list(m.lost)} for m in notes.members],
        "rules": [{"class": r.cls, "added": [dict(x) for x in r.added],
                   "removed": [dict(x) for x in r.removed],
                   "changed": [{"before": dict(a), "after": dict(b)} for a, b in r.changed]}
                  for r in notes.rules],
        "obsoleted": [{"term": o.term, "replaced_by": list(o.replaced_by),
                       "consider": list(o.consider)} for o in notes.obsoleted],
        "names": dict(notes.names),
    }


def render_json(notes: Notes, indent: int | None = 2) -> str:
    return json.dumps(to_json(notes), indent=indent, default=str, ensure_ascii=False) + "\n"
