"""`parentage review`: both tiers on every term a change touched; markdown, JSON, SARIF or text."""
from __future__ import annotations

import os
import sys
from collections.abc import Sequence

from parentage.commands.common import emit, files_not_ranges, open_workspace, parser, sides
from parentage.findings import blocking
from parentage.review import run_review


def main(argv: Sequence[str] | None = None) -> int:
    p = parser("review", "Review a change: structure, rule and model tiers at base and head; "
               "new, persisting and resolved findings.",
               formats=("text", "markdown", "json", "sarif"))
    p.add_argument("files", nargs="*", metavar="FILE", help="only these ontology files")
    p.add_argument("--fail-on", metavar="KINDS",
                   help="comma-separated finding kinds that block (overrides the config's fail_on)")
    p.add_argument("--no-model", action="store_true", help="skip the model tier")
    args = p.parse_args(argv)
    files_not_ranges(args)
    ws = open_workspace(args)
    try:
        if args.fail_on is not None:
            ws.override_fail_on(args.fail_on)
        base_side, head_side = sides(ws, args)
        review = run_review(ws, base_side, head_side, args.files, use_model=not args.no_model)
    finally:
        ws.close()
    if args.format == "markdown":
        from parentage.report import markdown

        server, name = os.environ.get("GITHUB_SERVER_URL"), os.environ.get("GITHUB_REPOSITORY")
        url = f"{server}/{name}" if server and name else None
        ref = head_side.commit or os.environ.get("GITHUB_SHA")
        text = markdown.render(review, repo_url=url, ref=ref, base_ref=base_side.commit)
    elif args.format == "json":
        from parentage.report import json as json_report

        text = json_report.render(review)
    elif args.format == "sarif":
        from parentage.report import sarif

        text = sarif.render(review)
    else:
        from parentage.report import text as text_report

        text = text_report.render(review, color=args.output is None and sys.stdout.isatty())
    emit(text, args.output)
    return 1 if blocking(review.findings, review.fail_on) else 0


if __name__ == "__main__":
    raise SystemExit(main())
