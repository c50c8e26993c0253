"""Argument plumbing shared by the subcommands: options, the revision selector, output."""
from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Sequence
from typing import NoReturn

from parentage.errors import ParentageError
from parentage.revisions import Side
from parentage.workspace import Workspace


class Parser(argparse.ArgumentParser):
    """argparse that reports a usage error as one line (exit 2 via ParentageError)."""

    def error(self, message: str) -> NoReturn:
        raise ParentageError(f"{self.prog}: {message} (see {self.prog} --help)")


def parser(prog: str, description: str, formats: Sequence[str] = ("text", "json"),
           revisions: bool = True) -> Parser:
    p = Parser(prog=f"parentage {prog}", description=description)
    p.add_argument("--config", metavar="FILE", help="config file (default: .parentage.yaml at the repository root)")
    p.add_argument("--format", choices=list(formats), default=formats[0], help="output format")
    p.add_argument("--output", metavar="FILE", help="write the output here instead of stdout")
    p.add_argument("-C", "--repo", default=".", metavar="DIR", help="the repository (default: current folder)")
    if revisions:
        p.add_argument("range", nargs="?", metavar="RANGE",
                       help="A..B, A...B (from the merge base) or one revision (against the work tree)")
        p.add_argument("--staged", action="store_true", help="HEAD against the index")
        p.add_argument("--worktree", action="store_true", help="HEAD against the work tree (the default)")
    return p


def open_workspace(args: argparse.Namespace) -> Workspace:
    return Workspace(args.repo, args.config)


def sides(ws: Workspace, args: argparse.Namespace) -> tuple[Side, Side]:
    return ws.repo.resolve(args.range, staged=args.staged, worktree=args.worktree)


def files_not_ranges(args: argparse.Namespace) -> None:
    """`parentage check a.obo`: a first positional that names a file is a file, not a range."""
    first = getattr(args, "range", None)
    if first is None or ".." in first or not hasattr(args, "files"):
        return
    if first.endswith((".obo", ".json")) or os.path.exists(os.path.join(args.repo, first)):
        args.files.insert(0, first)
        args.range = None


def emit(text: str, output: str | None) -> None:
    """Write a command's result to --output or stdout (front ends only)."""
    if not text.endswith("\n"):
        text += "\n"
    if output:
        try:
            directory = os.path.dirname(os.path.abspath(output))
            os.makedirs(directory, exist_ok=True)
            with open(output, "w", encoding="utf-8") as handle:
                handle.write(text)
        except OSError as exc:
            raise ParentageError(f"{output}: cannot write output: {exc.strerror}") from None
    else:
        sys.stdout.write(text)
        sys.stdout.flush()
