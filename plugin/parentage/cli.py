"""`parentage SUBCOMMAND ...`: dispatch, and the one place that maps failures to exit codes.

Exit codes: 0 nothing blocking; 1 a new blocking finding; 2 bad input or usage (one line on
stderr); 3 unexpected error (a short hint and a log file for the bug report); 130 interrupted.
"""
from __future__ import annotations

import gc
import importlib
import os
import sys
from collections.abc import Sequence

from parentage import __version__
from parentage.errors import ParentageError

COMMANDS = {
    "review": ("review", "review a change: both tiers on every term it touched"),
    "diff": ("diff", "list added, removed, obsoleted and edited terms"),
    "check": ("check", "fast structure and hierarchy check of staged ontology files"),
    "notes": ("notes", "release notes on classification changes between two revisions"),
    "model": ("model", "train or evaluate the model tier"),
    "rules": ("rules", "test rules against the curation, or propose new ones"),
    "demo": ("demo", "build the demo repository and review its proposed change"),
    "install-hooks": ("install_hooks", "install plain git hooks into a repository"),
}


def _usage() -> str:
    width = max(len(c) for c in COMMANDS)
    lines = [f"usage: parentage SUBCOMMAND [options]   (parentage {__version__})", "", "subcommands:"]
    lines += [f"  {name:<{width}}  {text}" for name, (_, text) in COMMANDS.items()]
    lines += ["", "run 'parentage SUBCOMMAND --help' for its options"]
    return "\n".join(lines)


def run(argv: Sequence[str]) -> int:
    if not argv or argv[0] in ("-h", "--help", "help"):
        print(_usage())
        return 0
    if argv[0] == "--version":
        print(f"parentage {__version__}")
        return 0
    entry = COMMANDS.get(argv[0])
    if entry is None:
        raise ParentageError(f"unknown subcommand {argv[0]!r}; known: {', '.join(COMMANDS)}")
    # A run builds a few large tables of small objects (a 50,000-term snapshot holds 100,000
    # tuples); at the default threshold of 700 the cyclic collector walks them over and over.
    gc.set_threshold(50_000, 20, 20)
    module = importlib.import_module(f"parentage.commands.{entry[0]}")
    try:
        return int(module.main(list(argv[1:])))
    except SystemExit as done:  # argparse's --help
        return done.code if isinstance(done.code, int) else 0


def main(argv: Sequence[str] | None = None) -> int:
    args = list(sys.argv[1:] if argv is None else argv)
    try:
        return run(args)
    except ParentageError as exc:
        print(f"parentage: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("parentage: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # noqa: BLE001 - the last resort: no traceback on the terminal, a log instead
        import tempfile  # only here: every run would otherwise pay for importing them
        import traceback

        fd, log = tempfile.mkstemp(prefix="parentage-error-", suffix=".log")
        with os.fdopen(fd, "w") as handle:
            handle.write(f"parentage {__version__}\nargs: {args!r}\n\n")
            handle.write(traceback.format_exc())
        print(f"parentage: unexpected error: {type(exc).__name__}: {exc}", file=sys.stderr)
        print(f"parentage: this is a bug; please report it with the log at {log}", file=sys.stderr)
        return 3
