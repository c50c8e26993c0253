"""`parentage notes OLD..NEW`: release notes on how the classification changed."""
from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import yaml

from parentage.commands.common import emit, open_workspace, parser, sides
from parentage.errors import ParentageError
from parentage.release_notes import compute
from parentage.report.notes import render_json, render_markdown
from parentage.revisions import Side
from parentage.workspace import Workspace


def plain_rules(ws: Workspace, side: Side) -> list[dict[str, Any]]:
    """The rules at `side` as plain dicts (rule files are data: safe_load, never executed)."""
    out: list[dict[str, Any]] = []
    for path, text in ws.rule_files(side):
        try:
            data = yaml.safe_load(text)
        except yaml.YAMLError as exc:
            raise ParentageError(f"{path} at {side.name}: not valid YAML: {exc}") from None
        out += [r for r in (data or []) if isinstance(r, dict) and "class" in r]
    return out


def main(argv: Sequence[str] | None = None) -> int:
    p = parser("notes", "Release notes on classification changes between two revisions "
               "(usually two tags: OLD..NEW).", formats=("markdown", "json"))
    args = p.parse_args(argv)
    if not (args.range or args.staged or args.worktree):
        raise ParentageError("parentage notes: give the two releases as OLD..NEW (e.g. v1.0..v1.1)")
    ws = open_workspace(args)
    try:
        base_side, head_side = sides(ws, args)
        base, head = ws.pair(base_side, head_side)
        notes = compute(base, head, plain_rules(ws, base_side), plain_rules(ws, head_side),
                        ws.config.structure)
    finally:
        ws.close()
    emit(render_json(notes) if args.format == "json" else render_markdown(notes), args.output)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
