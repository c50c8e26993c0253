"""The review as a markdown pull-request comment (CommonMark with GFM tables).

Every piece of ontology text goes through `escape`; the only HTML is our own marker and the
`<details>` wrappers. The comment stays within GitHub's 65,536 characters by dropping the
least urgent rows first and saying what was dropped.
"""
from __future__ import annotations

import json
from collections.abc import Iterable, Mapping, Sequence
from typing import Any, NamedTuple
from urllib.parse import quote

from parentage.findings import KINDS, Finding, Review, blocking
from parentage.report import escape
from parentage.report.advice import advice

MARKER = "<!-- parentage-review -->"  # lets the CI action find and update its own comment
MAX_CHARS = 65_536  # GitHub's limit on one comment body
DETAILS_OVER = 10  # sections with more rows than this are folded
MAX_NOTES = 20
MAX_LISTED = 20  # ontology paths named in the header

_SEVERITY_RANK = {"note": 0, "warning": 1, "error": 2}
_COLUMNS = ("term", "name", "what changed", "finding", "evidence", "what to do", "status")
_RESOLVED_COLUMNS = ("term", "name", "kind", "finding")


class _Row(NamedTuple):
    section: str  # a finding kind, or "" for the resolved section
    position: int  # place in the document, so kept rows keep their order
    priority: int  # higher survives longer when the comment must be cut
    status: str
    markdown: str


def severity_of(finding: Finding) -> str:
    return finding.severity or KINDS.get(finding.kind, ("warning", ""))[0]


def file_url(repo_url: str, ref: str, path: str, line: int) -> str:
    """`{repo_url}/blob/{ref}/{path}#L{line}`, with ref and path percent-encoded."""
    return (f"{repo_url.rstrip('/')}/blob/{quote(ref, safe='/')}/{quote(path, safe='/')}"
            f"#L{line}")


def _table(columns: Sequence[str], rows: Iterable[str]) -> list[str]:
    head = "| " + " | ".join(columns) + " |"
    rule = "|" + "|".join("---" for _ in columns) + "|"
    return [head, rule, *rows]


def _cells(values: Sequence[str]) -> str:
    return "| " + " | ".join(values) + " |"


def _brief(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.3g}"
    if isinstance(value, str):
        return value
    try:
        return json.dumps(value, separators=(",", ":"), default=str)
    except (TypeError, ValueError):
        return str(value)


def _evidence(finding: Finding) -> str:
    parts = [f"tiers={','.join(finding.tiers)}"] if finding.tiers else []
    parts += [f"{key}={_brief(value)}" for key, value in finding.evidence.items()]
    return escape.code("; ".join(parts), limit=160)


def _what_changed(review: Review, term: str) -> str:
    for key, label in (("added", "added"), ("removed", "removed"), ("obsoleted", "made obsolete")):
        if term in review.changes.get(key, ()):
            return label
    if term in review.changes.get("edited", ()):
        fields = review.edited_fields.get(term, ())
        return escape.text("edited: " + ", ".join(fields), limit=80) if fields else "edited"
    return "re-checked, not edited" if term in review.affected else "not edited"


def _named(review: Review, ids: Sequence[str]) -> list[str]:
    return [f"{i} ({review.names[i]})" if review.names.get(i) else i for i in ids]


class _Links(NamedTuple):
    repo_url: str | None
    head_ref: str | None
    base_ref: str | None

    def term_cell(self, finding: Finding) -> str:
        # Resolved findings carry their base location, so they link to the base revision.
        ref = self.base_ref if finding.status == "resolved" else self.head_ref
        label = escape.code(finding.term, limit=80)
        if self.repo_url and ref and finding.path and finding.line > 0:
            return escape.link(label, file_url(self.repo_url, ref, finding.path, finding.line))
        if finding.path:
            where = f"{finding.path}:{finding.line}" if finding.line > 0 else finding.path
            return f"{label} at {escape.code(where, limit=120)}"
        return label


def _finding_row(review: Review, finding: Finding, links: _Links, blocks: bool) -> str:
    status = "new, blocks" if blocks else finding.status
    return _cells([
        links.term_cell(finding),
        escape.text(review.names.get(finding.term, ""), limit=80),
        _what_changed(review, finding.term),
        escape.text(finding.message, limit=300),
        _evidence(finding),
        escape.text(advice(finding.kind, _named(review, finding.classes)), limit=240),
        status,
    ])


def _resolved_row(review: Review, finding: Finding, links: _Links) -> str:
    return _cells([
        links.term_cell(finding),
        escape.text(review.names.get(finding.term, ""), limit=80),
        escape.code(finding.kind, limit=60),
        escape.text(finding.message, limit=300),
    ])


def _kind_order(findings: Sequence[Finding]) -> list[str]:
    known = list(KINDS)
    kinds = {f.kind: severity_of(f) for f in findings}
    return sorted(kinds, key=lambda k: (-_SEVERITY_RANK.get(kinds[k], 0),
                                        known.index(k) if k in known else len(known), k))


def _blocks(finding: Finding, fail_on: Sequence[str]) -> bool:
    return bool(blocking([finding], fail_on))


def _rows(review: Review, links: _Links) -> list[_Row]:
    open_findings = [f for f in review.findings if f.status != "resolved"]
    rows: list[_Row] = []
    for kind in _kind_order(open_findings):
        of_kind = [f for f in open_findings if f.kind == kind]
        of_kind.sort(key=lambda f: (not _blocks(f, review.fail_on), f.status != "new", f.term, f.line))
        for finding in of_kind:
            blocks = _blocks(finding, review.fail_on)
            rank = _SEVERITY_RANK.get(severity_of(finding), 0)
            # Cut order: resolved, then persisting, then new notes, warnings, errors; a new
            # blocking finding goes last of all.
            priority = 7 if blocks else (4 + rank if finding.status == "new" else 1 + rank)
            rows.append(_Row(kind, len(rows), priority, finding.status,
                             _finding_row(review, finding, links, blocks)))
    resolved = sorted((f for f in review.findings if f.status == "resolved"),
                      key=lambda f: (f.kind, f.term, f.line))
    for finding in resolved:
        rows.append(_Row("", len(rows), 0, "resolved", _resolved_row(review, finding, links)))
    return rows


def _counts_table(findings: Sequence[Finding]) -> list[str]:
    lines = []
    for kind in _kind_order(findings):
        of_kind = [f for f in findings if f.kind == kind]
        counts = [sum(1 for f in of_kind if f.status == s) for s in ("new", "persisting", "resolved")]
        lines.append(_cells([escape.code(kind, limit=60), escape.text(severity_of(of_kind[0]), 20),
                             *map(str, counts)]))
    return _table(("kind", "severity", "new", "persisting", "resolved"), lines)


def _header(review: Review) -> list[str]:
    span = f"{escape.code(review.base, 80, table=False)}..{escape.code(review.head, 80, table=False)}"
    out = [MARKER, f"## parentage review of {span}", ""]
    paths = [escape.code(p, 120, table=False) for p in review.ontologies[:MAX_LISTED]]
    more = len(review.ontologies) - MAX_LISTED
    if paths:
        out.append("Ontologies: " + ", ".join(paths) + (f" and {more} more." if more > 0 else "."))
    counts = {key: len(review.changes.get(key, ())) for key in ("added", "removed", "obsoleted", "edited")}
    out.append(f"Changed terms: {counts['added']} added, {counts['removed']} removed, "
               f"{counts['obsoleted']} made obsolete, {counts['edited']} edited; "
               f"{len(review.affected)} terms re-checked.")
    if review.model_revision:
        out.append(f"Model verdicts come from the model trained at "
                   f"{escape.code(review.model_revision, 80, table=False)}.")
    out.append("")
    count = len(blocking(review.findings, review.fail_on))
    if count:
        out.append(f"**{count} new finding{'s' if count != 1 else ''} "
                   f"block{'s' if count == 1 else ''} this change.**")
    else:
        out.append("No new finding blocks this change.")
    out.append("")
    if review.findings:
        out += [*_counts_table(review.findings), ""]
    else:
        out += ["No findings.", ""]
    if review.notes:
        out.append("Notes:")
        out += [f"- {escape.text(note, limit=300)}" for note in review.notes[:MAX_NOTES]]
        if len(review.notes) > MAX_NOTES:
            out.append(f"- and {len(review.notes) - MAX_NOTES} more notes")
        out.append("")
    return out


def _section(title: str, columns: Sequence[str], rows: Sequence[str], total: int) -> list[str]:
    out = [title, ""]
    table = _table(columns, rows)
    if len(rows) > DETAILS_OVER:
        shown = f"{len(rows)} of {total}" if len(rows) < total else f"{total}"
        out += [f"<details><summary>{shown} findings</summary>", "", *table, "", "</details>", ""]
    else:
        out += [*table, ""]
    return out


def _cut_note(cut: Mapping[str, int], max_chars: int) -> list[str]:
    parts = [f"{cut[s]} {s}" for s in ("resolved", "persisting", "new") if cut.get(s)]
    note = (f"_Not shown, to fit one comment ({max_chars:,} characters): "
            f"{', '.join(parts)} findings. `parentage review --format json` lists them all._")
    return [note, ""]


def _assemble(review: Review, rows: Sequence[_Row], kept: set[int], max_chars: int) -> str:
    out = _header(review)
    kinds_done: list[str] = []
    for row in rows:
        if row.section and row.section not in kinds_done:
            kinds_done.append(row.section)
    for kind in kinds_done:
        of_kind = [r for r in rows if r.section == kind]
        shown = [r.markdown for r in of_kind if r.position in kept]
        if not shown:
            continue
        meaning = KINDS.get(kind, ("", ""))[1]
        title = f"### {escape.code(kind, 60, table=False)}" + (f": {meaning}" if meaning else "")
        out += _section(title, _COLUMNS, shown, len(of_kind))
    resolved = [r for r in rows if not r.section]
    shown = [r.markdown for r in resolved if r.position in kept]
    if shown:
        out += _section("### Resolved by this change", _RESOLVED_COLUMNS, shown, len(resolved))
    cut: dict[str, int] = {}
    for row in rows:
        if row.position not in kept:
            cut[row.status] = cut.get(row.status, 0) + 1
    if cut:
        out += _cut_note(cut, max_chars)
    out.append("_parentage is a curation aid; class membership is not safety data._")
    return "\n".join(out) + "\n"


def render(review: Review, repo_url: str | None = None, ref: str | None = None,
           base_ref: str | None = None, max_chars: int = MAX_CHARS) -> str:
    """The comment body. File links need `repo_url` and `ref` (resolved rows: `base_ref`)."""
    links = _Links(repo_url, ref, base_ref)
    rows = _rows(review, links)
    order = [r.position for r in sorted(rows, key=lambda r: (-r.priority, r.position))]
    doc = _assemble(review, rows, set(order), max_chars)
    if len(doc) <= max_chars:
        return doc
    # Keep the k most urgent rows for the largest k that fits; lengths grow with k.
    low, high = 0, len(order)
    while low < high:
        mid = (low + high + 1) // 2
        if len(_assemble(review, rows, set(order[:mid]), max_chars)) <= max_chars:
            low = mid
        else:
            high = mid - 1
    doc = _assemble(review, rows, set(order[:low]), max_chars)
    if len(doc) > max_chars:  # only when max_chars is smaller than the header itself
        doc = doc[: max_chars - 2] + escape.ELLIPSIS + "\n"
    return doc
