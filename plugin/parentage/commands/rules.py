"""`parentage rules test [REVISION]` and `parentage rules propose [CLASS...]`.

`test` runs every rule over every structured term at a revision (default: the work tree) and
reports, per rule, how it agrees with the asserted classification. `propose` learns
candidate rules for classes that have enough members and no rule, and writes them as a rule
file for curators to review, with the figures as comments.
"""
from __future__ import annotations

import json
from collections.abc import Sequence

import yaml

from parentage.commands.common import emit, open_workspace, parser
from parentage.errors import ParentageError
from parentage.report import escape
from parentage.revisions import INDEX, WORKTREE, Side
from parentage.snapshot import Ontology
from parentage.tiers.rules import (
    AgreementReport,
    Candidate,
    Proposal,
    load_rules,
    propose_rules,
    rule_agreement,
    structured_terms,
)
from parentage.workspace import Workspace

MAX_UNCHECKED_SHOWN = 20


def _pct(value: float) -> str:
    return f"{value:.3f}"


def agreement_markdown(report: AgreementReport, ontology: Ontology) -> str:
    def named(tid: str) -> str:
        term = ontology.terms.get(tid)
        label = escape.code(tid)
        return f"{label} {escape.text(term.name, 60)}" if term is not None and term.name else label

    lines = [f"## Rules against the classification at {escape.code(report.revision, table=False)}", "",
             f"{report.structured} structured terms checked against {len(report.rules)} rules."]
    if report.unchecked:
        lines.append(f"{len(report.unchecked)} structured terms could not be checked.")
    lines.append("")
    if report.rules:
        lines += [("| rule | class | kind | members | matches inside | matches outside | misses inside "
                  "| precision | recall | matched outside, e.g. | missed inside, e.g. |"),
                  "|---|---|---|---:|---:|---:|---:|---:|---:|---|---|"]
        for row in report.rules:
            lines.append("| " + " | ".join([
                escape.code(row.rule.where), named(row.rule.cls), row.rule.kind, str(row.members),
                str(row.matched_inside), str(row.matched_outside), str(row.missed_inside),
                _pct(row.precision), _pct(row.recall),
                ", ".join(escape.code(t) for t in row.examples_outside),
                ", ".join(escape.code(t) for t in row.examples_missed)]) + " |")
        lines.append("")
    if report.unchecked:
        lines += ["### Not checked", ""]
        lines += [f"- {escape.code(t)}: {escape.text(why, 160)}"
                  for t, why in report.unchecked[:MAX_UNCHECKED_SHOWN]]
        if len(report.unchecked) > MAX_UNCHECKED_SHOWN:
            lines.append(f"- and {len(report.unchecked) - MAX_UNCHECKED_SHOWN} more")
        lines.append("")
    if report.warnings:
        lines += ["### Warnings", ""] + [f"- {escape.text(w, 300)}" for w in report.warnings] + [""]
    return "\n".join(lines)


def agreement_json(report: AgreementReport) -> str:
    return json.dumps({"revision": report.revision, "structured": report.structured,
                       "unchecked": [{"term": t, "reason": why} for t, why in report.unchecked],
                       "warnings": list(report.warnings),
                       "rules": [row.to_json() for row in report.rules]}, indent=2)


def _figures(prefix: str, c: Candidate) -> str:
    return (f"{prefix}precision {c.precision:.3f}, recall {c.recall:.3f}, F1 {c.f1:.3f} "
            f"({c.matched_inside} of {c.members} members matched, {c.matched_outside} terms outside)")


def proposals_yaml(proposals: Sequence[Proposal], revision: str, structured: int) -> str:
    """A rule file: the best candidate of each class as a rule, the others as comments."""
    lines = ["# Candidate rules learned from the members of each class, for curators to review.",
             f"# Figures: each rule matched over the {structured} structured terms at {revision},",
             "# against the classification asserted there.", ""]
    if not proposals:
        lines.append("[]  # no class with enough members and no rule")
    for proposal in proposals:
        title = f"{proposal.cls} {escape.plain(proposal.name, 80)}".strip()
        lines.append(f"# {title}: {proposal.members} structured members")
        if not proposal.candidates:
            lines += [f"# no candidate: {proposal.note or 'nothing found'}", ""]
            continue
        best, *others = proposal.candidates
        lines.append(_figures(f"# {best.source}: ", best))
        body = yaml.safe_dump([best.rule.content()], sort_keys=False, default_flow_style=False, width=1000)
        lines += body.rstrip("\n").splitlines()
        for other in others:
            lines.append(_figures(f"# other candidate, {other.source}: ", other))
            text = yaml.safe_dump([other.rule.content()], sort_keys=False, width=1000)
            lines += ["#   " + line for line in text.rstrip("\n").splitlines()]
        lines.append("")
    return "\n".join(lines) + "\n"


def _side(ws: Workspace, revision: str | None, staged: bool) -> Side:
    if revision and staged:
        raise ParentageError("give a revision or --staged, not both")
    if staged:
        return Side(INDEX, None, "index")
    if revision:
        return ws.repo.commit(revision)
    return Side(WORKTREE, None, "work tree")


def _test(argv: Sequence[str]) -> int:
    p = parser("rules test", "Run every rule over every structured term and report how each agrees "
               "with the asserted classification.", formats=("markdown", "json"), revisions=False)
    p.add_argument("revision", nargs="?", metavar="REVISION", help="a commit (default: the work tree)")
    p.add_argument("--staged", action="store_true", help="the staged files (the index)")
    args = p.parse_args(argv)
    ws = open_workspace(args)
    try:
        side = _side(ws, args.revision, args.staged)
        ontology = ws.ontology(side)
        ruleset, warnings = load_rules(ws.rule_files(side), ontology)
        report = rule_agreement(ruleset, ontology, ws.config, warnings=warnings)
    finally:
        ws.close()
    emit(agreement_json(report) if args.format == "json" else agreement_markdown(report, ontology), args.output)
    return 0


def _propose(argv: Sequence[str]) -> int:
    p = parser("rules propose", "Propose rules for classes with enough members and no rule, learned "
               "from their members; writes a rule file to review.", formats=("yaml",), revisions=False)
    p.add_argument("classes", nargs="*", metavar="CLASS", help="only these classes (even if they have rules)")
    p.add_argument("--revision", metavar="REVISION", help="a commit (default: the work tree)")
    p.add_argument("--staged", action="store_true", help="the staged files (the index)")
    p.add_argument("--seconds-per-class", type=float, default=10.0, metavar="S",
                   help="search time for each class (default: 10)")
    args = p.parse_args(argv)
    if args.seconds_per_class <= 0:
        raise ParentageError("--seconds-per-class must be positive")
    ws = open_workspace(args)
    try:
        side = _side(ws, args.revision, args.staged)
        ontology = ws.ontology(side)
        ruleset, _warnings = load_rules(ws.rule_files(side), ontology)
        proposals = propose_rules(ontology, ws.config, ruleset, args.classes, args.seconds_per_class,
                                  ws.config.model.seed)
        structured = len(structured_terms(ontology, ws.config))
    finally:
        ws.close()
    emit(proposals_yaml(proposals, side.name, structured), args.output)
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    args = list(argv or [])
    if not args:
        raise ParentageError("rules: give an action: 'rules test' or 'rules propose' (see --help)")
    if args[0] in ("-h", "--help"):
        emit("usage: parentage rules test [REVISION] | parentage rules propose [CLASS...]\n"
             "run 'parentage rules test --help' or 'parentage rules propose --help' for options", None)
        return 0
    action, rest = args[0], args[1:]
    if action == "test":
        return _test(rest)
    if action == "propose":
        return _propose(rest)
    raise ParentageError(f"rules: unknown action {action!r}; use 'test' or 'propose'")


if __name__ == "__main__":
    raise SystemExit(main())
