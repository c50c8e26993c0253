"""`parentage check [FILES...]`: the commit-time structure and hierarchy check.

Checks the staged content of the ontology files against HEAD. Only changed stanzas (and the
terms a change can break: members of a moved class, terms pointing at a removed one) are
checked, and only *new* findings of a `fail_on` kind block (exit 1), so a legacy problem never
blocks an unrelated commit. `--all` checks every term and blocks on any `fail_on` finding.
"""
from __future__ import annotations

import sys
from collections.abc import Mapping, Sequence

from parentage.changes import affected_terms, diff_ontologies
from parentage.commands.common import emit, files_not_ranges, open_workspace, parser
from parentage.findings import compare, with_severity
from parentage.report import text as text_report
from parentage.review import (
    IndexWithout,
    is_structured,
    key_index,
    read_both_ends,
    structure_changed,
    structure_side,
)


def main(argv: Sequence[str] | None = None) -> int:
    p = parser("check", "Check staged ontology files: structures, annotations, duplicates and "
               "the hierarchy.", formats=("text", "json"))
    p.add_argument("files", nargs="*", metavar="FILE", help="ontology files (default: all configured)")
    p.add_argument("--all", action="store_true", help="check every term, not only the changed ones")
    args = p.parse_args(argv)
    files_not_ranges(args)
    if not (args.range or args.worktree):
        args.staged = True
    ws = open_workspace(args)
    try:
        base_side, head_side = ws.repo.resolve(args.range, staged=args.staged, worktree=args.worktree)
        files = [f for f in args.files if ws.is_ontology_path(head_side, f)]
        if args.files and not files:
            return 0  # nothing we read was passed (e.g. an unrelated .json file)
        base, head = ws.pair(base_side, head_side, files)
        changes = diff_ontologies(base, head, ws.config.structure)
        if args.all:
            ids = [t for t in head.terms if not head.terms[t].obsolete]
            read = ids
        else:
            ids = list(affected_terms(base, head, changes, (), is_structured(ws.config)))
            read = structure_changed(changes)
        changed = set(changes.touched) | set(changes.removed)
        others: Mapping[str, tuple[str, ...]] = {}
        if base.snapshots and read:
            others = IndexWithout(key_index(ws, base), changed | set(ids))
        facts = read_both_ends(ws, [(head, read), (base, read)])
        head_findings = structure_side(ws, head, ids, others, read, facts)
        base_ids = [t for t in ids if t in base.terms and not base.terms[t].obsolete]
        base_findings = structure_side(ws, base, base_ids, others, read, facts) if base.snapshots else []
        findings = [f for f in with_severity(compare(base_findings, head_findings), ws.config.severity)
                    if f.status != "resolved"]
    finally:
        ws.close()
    findings.sort(key=lambda f: (f.path, f.line, f.kind, f.term))
    fail_on = set(ws.config.fail_on)
    blocking = [f for f in findings if f.kind in fail_on and (args.all or f.status == "new")]
    if args.format == "json":
        import json

        text = json.dumps({"base": base_side.name, "head": head_side.name,
                           "checked": len(ids), "blocking": len(blocking),
                           "findings": [f.to_json() for f in findings]}, indent=2)
    else:
        color = args.output is None and sys.stdout.isatty()
        text = "\n".join(text_report.line(f, color, f in blocking) for f in findings)
        summary = (f"parentage check: {len(ids)} term(s) checked, {len(findings)} finding(s), "
                   f"{len(blocking)} blocking")
        text = f"{text}\n{summary}" if text else summary
    emit(text, args.output)
    return 1 if blocking else 0


if __name__ == "__main__":
    raise SystemExit(main())
