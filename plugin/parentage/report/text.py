"""The review for a terminal: one line per finding, `path:line: TERM kind message [status]`.

Lines are grouped new, persisting, resolved, then by file and line. Ontology text loses its
control characters, so a term name cannot send escape sequences to the terminal.
"""
from __future__ import annotations

from collections.abc import Sequence

from parentage.findings import KINDS, Finding, Review, blocking
from parentage.report import escape

_RESET = "\x1b[0m"
_SEVERITY_COLOUR = {"error": "\x1b[31m", "warning": "\x1b[33m", "note": "\x1b[36m"}
_BOLD = "\x1b[1m"
_DIM = "\x1b[2m"
_STATUS_ORDER = {"new": 0, "persisting": 1, "resolved": 2}


def _paint(text: str, style: str, color: bool) -> str:
    return f"{style}{text}{_RESET}" if color and style else text


def line(finding: Finding, color: bool = False, blocks: bool = False) -> str:
    severity = finding.severity or KINDS.get(finding.kind, ("warning", ""))[0]
    where = f"{escape.plain(finding.path) or '?'}:{finding.line}:"
    status = f"[{finding.status}, blocks]" if blocks else f"[{finding.status}]"
    return " ".join([
        _paint(where, _BOLD, color),
        escape.plain(finding.term, 120),
        _paint(escape.plain(finding.kind, 60), _SEVERITY_COLOUR.get(severity, ""), color),
        escape.plain(finding.message, 500),
        _paint(status, _BOLD if blocks else (_DIM if finding.status != "new" else ""), color),
    ])


def _summary(findings: Sequence[Finding], fail_on: Sequence[str]) -> str:
    counts = {s: sum(1 for f in findings if f.status == s) for s in _STATUS_ORDER}
    blocks = len(blocking(findings, fail_on))
    return (f"{counts['new']} new ({blocks} blocking), {counts['persisting']} persisting, "
            f"{counts['resolved']} resolved")


def render(review: Review, color: bool = False) -> str:
    """Every finding, then one summary line; `color` adds ANSI colours (pass `isatty()`)."""
    ordered = sorted(review.findings, key=lambda f: (_STATUS_ORDER.get(f.status, 3), f.path,
                                                     f.line, f.term, f.kind))
    lines = [line(f, color, bool(blocking([f], review.fail_on))) for f in ordered]
    lines.append(_summary(review.findings, review.fail_on))
    return "\n".join(lines) + "\n"
