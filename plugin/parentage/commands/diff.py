"""`parentage diff`: added, removed, obsoleted and edited terms, with the fields that changed."""
from __future__ import annotations

from collections.abc import Sequence

from parentage.changes import diff_ontologies
from parentage.commands.common import emit, files_not_ranges, open_workspace, parser, sides
from parentage.report import changes as render


def main(argv: Sequence[str] | None = None) -> int:
    p = parser("diff", "List the terms a change added, removed, obsoleted or edited.")
    p.add_argument("files", nargs="*", metavar="FILE", help="only these ontology files")
    args = p.parse_args(argv)
    files_not_ranges(args)
    ws = open_workspace(args)
    try:
        base_side, head_side = sides(ws, args)
        base, head = ws.pair(base_side, head_side, args.files)
        changes = diff_ontologies(base, head, ws.config.structure)
        text = (render.as_json if args.format == "json" else render.as_text)(base, head, changes)
    finally:
        ws.close()
    emit(text, args.output)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
