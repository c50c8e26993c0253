"""Entry points for the pre-commit framework and the plain git hooks (thin: parse, call commands).

`review_push`: the pre-push review. pre-commit gives the pushed range in PRE_COMMIT_FROM_REF /
PRE_COMMIT_TO_REF (PRE_COMMIT_ORIGIN / PRE_COMMIT_SOURCE before pre-commit 2.13), so the
range comes from the environment rather than from the command line.

`commit_summary`: the prepare-commit-msg helper of the plain git hooks. It appends what the
staged change did to the ontology (from `parentage diff --staged`) and how many findings
`parentage check` has, as comment lines (dropped by git when the message is edited) or, with
`git config parentage.commitSummary trailer`, as trailer lines kept in the commit.
"""
from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from parentage.commands.common import Parser
from parentage.errors import ParentageError

# Message sources (git's second prepare-commit-msg argument) whose text we leave alone: a
# merge or squash message is git's own, and "commit" (-c, -C, --amend) reuses an old message
# whose staged diff against HEAD is not what the commit will contain.
UNTOUCHED_SOURCES = ("merge", "squash", "commit")
SCISSORS = " ------------------------ >8 ------------------------"
MODES = ("comment", "trailer", "off")
CHANGE_KEYS = ("added", "removed", "obsoleted", "edited")
TRAILER_CHANGES = "Ontology-Changes"
TRAILER_FINDINGS = "Ontology-Findings"


def push_range(environ: Mapping[str, str]) -> str | None:
    """`FROM..TO` of the push being checked, or None when pre-commit gave no range."""
    start = environ.get("PRE_COMMIT_FROM_REF") or environ.get("PRE_COMMIT_ORIGIN")
    end = environ.get("PRE_COMMIT_TO_REF") or environ.get("PRE_COMMIT_SOURCE")
    if start and end:
        return f"{start}..{end}"
    return None


def review_push(argv: Sequence[str] | None = None) -> int:
    """pre-push: review the pushed commits; extra arguments go to `parentage review`."""
    from parentage import cli

    args = list(sys.argv[1:] if argv is None else argv)
    span = push_range(os.environ)
    if span is None:
        # pre-commit gives no range when the push carries the root commit (nothing of it is
        # on the remote yet): there is no base to compare with, so there is no new finding.
        print("parentage: this push has no commit on the remote to compare with; nothing to "
              "review (the pull-request review will cover it)", file=sys.stderr)
        return 0
    return cli.main(["review", span, *args])


# -- prepare-commit-msg ---------------------------------------------------------------------

def _capture(command: Callable[[list[str]], int], argv: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = command(argv)
    return code, out.getvalue()


def staged_summary(repo: str = ".", config: str | None = None) -> dict[str, Any]:
    """Counts of the staged change: terms added/removed/obsoleted/edited, findings, blocking."""
    from parentage.commands import check, diff

    common = ["-C", repo, "--format", "json"] + (["--config", config] if config else [])
    _, diff_text = _capture(diff.main, ["--staged", *common])
    _, check_text = _capture(check.main, ["--staged", *common])
    changes = json.loads(diff_text)["changes"]
    checked = json.loads(check_text)
    out: dict[str, Any] = {key: len(changes.get(key, ())) for key in CHANGE_KEYS}
    out["findings"] = len(checked["findings"])
    out["blocking"] = int(checked["blocking"])
    return out


def summary_lines(counts: Mapping[str, Any]) -> tuple[str, str]:
    """(changes line, findings line) for a summary from `staged_summary`."""
    changes = ", ".join(f"{counts[key]} {key}" for key in CHANGE_KEYS)
    number = counts["findings"]
    findings = (f"{number} finding{'' if number == 1 else 's'} from parentage check, "
                f"{counts['blocking']} blocking")
    return changes, findings


def comment_char(message: str, configured: str) -> str:
    """git's comment character: core.commentChar, or for `auto` the first one git would pick."""
    if configured and configured != "auto":
        return configured
    if configured == "auto":
        starts = {line[:1] for line in message.splitlines()}
        for candidate in "#;@!$%^&|:":
            if candidate not in starts:
                return candidate
    return "#"


def with_comment(message: str, lines: Sequence[str], char: str) -> str:
    """`message` with `lines` as comment lines, above git's scissors line if there is one."""
    block = "".join(f"{char} {line}\n" for line in lines)
    scissors = f"{char}{SCISSORS}"
    head, sep, tail = message.partition(scissors)
    if sep:
        return f"{head.rstrip()}\n\n{block}{sep}{tail}" if head.strip() else f"{block}{sep}{tail}"
    if not message.strip():
        return f"\n{block}"
    return f"{message.rstrip()}\n\n{block}"


def _git(repo: str, *args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(["git", "-C", repo, *args], capture_output=True, text=True, check=False)


def commit_summary(argv: Sequence[str] | None = None) -> int:
    """prepare-commit-msg: append the summary of the staged change to the message file."""
    p = Parser(prog="parentage-commit-summary",
               description="Append a summary of the staged ontology change to a commit message.")
    p.add_argument("message_file", metavar="MESSAGE_FILE")
    p.add_argument("source", nargs="?", default="", metavar="SOURCE",
                   help="git's message source: message, template, merge, squash or commit")
    p.add_argument("sha", nargs="?", default="", metavar="SHA")
    p.add_argument("-C", "--repo", default=".", metavar="DIR")
    p.add_argument("--config", metavar="FILE")
    p.add_argument("--mode", choices=MODES,
                   help="comment lines, trailer lines or nothing (default: git config "
                        "parentage.commitSummary, else comment)")
    try:
        args = p.parse_args(sys.argv[1:] if argv is None else argv)
        mode = args.mode or _git(args.repo, "config", "parentage.commitSummary").stdout.strip() or "comment"
        if mode not in MODES:
            raise ParentageError(f"git config parentage.commitSummary is {mode!r}; use one of "
                                 f"{', '.join(MODES)}")
        if mode == "off" or args.source in UNTOUCHED_SOURCES:
            return 0
        if mode == "comment" and args.source == "message":
            # With -m/-F and no editor git keeps comment lines in the commit: say nothing.
            return 0
        counts = staged_summary(args.repo, args.config)
    except ParentageError as exc:
        # A commit message helper never blocks a commit (git aborts on a non-zero exit from
        # prepare-commit-msg): say why it is silent and carry on.
        print(f"parentage: no commit summary: {exc}", file=sys.stderr)
        return 0
    except Exception as exc:  # noqa: BLE001 - same reason; the message names the failure
        print(f"parentage: no commit summary: unexpected error {type(exc).__name__}: {exc}",
              file=sys.stderr)
        return 0
    changes, findings = summary_lines(counts)
    if not any(counts[key] for key in CHANGE_KEYS) and not counts["findings"]:
        return 0  # the commit does not touch the ontology
    if mode == "trailer":
        done = _git(args.repo, "interpret-trailers", "--in-place", "--if-exists", "replace",
                    "--trailer", f"{TRAILER_CHANGES}: {changes}",
                    "--trailer", f"{TRAILER_FINDINGS}: {findings}", os.path.abspath(args.message_file))
        if done.returncode != 0:
            print(f"parentage: no commit summary: git interpret-trailers failed: {done.stderr.strip()}",
                  file=sys.stderr)
        return 0
    with open(args.message_file, encoding="utf-8") as handle:
        message = handle.read()
    char = comment_char(message, _git(args.repo, "config", "core.commentChar").stdout.strip())
    lines = [f"parentage: ontology terms {changes}", f"parentage: {findings}"]
    with open(args.message_file, "w", encoding="utf-8") as handle:
        handle.write(with_comment(message, lines, char))
    return 0
