"""`parentage demo [DIR]`: build the demo repository from the shipped fixtures and review it."""
from __future__ import annotations

import os
import sys
import tempfile
from collections.abc import Sequence
from importlib import resources
from pathlib import Path
from typing import Any

from parentage.commands.common import Parser
from parentage.errors import ParentageError
from parentage.revisions import build_repository

BRANCH = "proposed-change"


def fixture_files(scenario: str, side: str) -> dict[str, bytes]:
    """The files of a shipped scenario side (`base` or `head`), by repository path."""
    try:
        # One step at a time: a namespace package's path takes one part per joinpath.
        root: Any = resources.files("parentage._fixtures").joinpath(scenario).joinpath(side)
    except ModuleNotFoundError:
        # An editable install maps the package but not always a data folder beside it: read
        # the fixtures from the checkout itself.
        root = Path(__file__).resolve().parents[3] / "fixtures" / scenario / side
    out: dict[str, bytes] = {}

    def walk(node, prefix: str) -> None:  # type: ignore[no-untyped-def]
        for child in node.iterdir():
            rel = f"{prefix}{child.name}"
            if child.is_dir():
                walk(child, rel + "/")
            elif child.name != "__init__.py" and not child.name.endswith(".pyc"):
                out[rel] = child.read_bytes()

    if not root.is_dir():
        raise ParentageError(f"the demo fixtures ({scenario}/{side}) are not installed with "
                             "this copy of parentage; reinstall it")
    walk(root, "")
    return out


def build(dest: str, scenario: str = "demo") -> str:
    """Commit `base/` on main, then `head/` (full copies of the changed files) on a branch."""
    base = fixture_files(scenario, "base")
    changed = {p: d for p, d in fixture_files(scenario, "head").items() if base.get(p) != d}
    return build_repository(dest, [
        ("main", "Curated base of the compound ontology", base),
        (BRANCH, "Proposed change: new compounds, edits and a new disjointness axiom", changed),
    ])


def main(argv: Sequence[str] | None = None) -> int:
    p = Parser(prog="parentage demo", description="Build the demo repository (base on main, the "
               "proposed change on a branch), review the change and print the review.")
    p.add_argument("dir", nargs="?", help="where to build it (default: a new temporary folder)")
    p.add_argument("--format", choices=["markdown", "text", "json"], default="markdown")
    p.add_argument("--scenario", default="demo", choices=["demo", "second"],
                   help="which shipped scenario to build")
    args = p.parse_args(argv)
    dest = args.dir or tempfile.mkdtemp(prefix="parentage-demo-")
    path = build(os.path.abspath(dest), args.scenario)
    from parentage.cli import run

    print(f"demo repository: {path} (base on main, the change on branch {BRANCH})", file=sys.stderr)
    code = run(["review", "-C", path, f"main..{BRANCH}", "--format", args.format])
    print(f"\ndemo repository: {path}\n  explore it: cd {path} && git log --oneline --all && "
          f"parentage diff main..{BRANCH}")
    # The demo shows blocking findings on purpose; its own success is building and reviewing.
    return 0 if code in (0, 1) else code
