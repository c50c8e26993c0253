"""`parentage model train|evaluate [REVISION]`: train the model tier, or show its k-fold figures."""
from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

from parentage.commands.common import emit, open_workspace, parser
from parentage.errors import ParentageError
from parentage.snapshot import Ontology
from parentage.tiers.model import Model, load_or_train, stored_model, trust_core


def figures_json(model: Model, ontology: Ontology) -> dict[str, Any]:
    return {"revision": model.revision, "estimator": model.meta.get("estimator"),
            "settings": model.meta["settings"], "summary": model.summary,
            "classes": [{"class": c, "name": ontology.terms[c].name if c in ontology.terms else None,
                         **model.figures[c]._asdict()} for c in model.classes]}


def _cell(text: object) -> str:
    # Names come from the ontology under review: no table breaks, no HTML, no mentions.
    return (str(text).replace("\\", "\\\\").replace("|", "\\|").replace("<", "&lt;")
            .replace("@", "@\u200b").replace("\n", " ")[:120])


def figures_markdown(model: Model, ontology: Ontology, min_f1: float) -> str:
    s = model.summary
    lines = [f"## Model tier: {s.get('folds')}-fold cross-validation at {_cell(model.revision)}", "",
             (f"{s.get('members')} members, {len(model.classes)} classes; micro-F1 {s.get('micro_f1')}, "
              f"macro-F1 {s.get('macro_f1')}, abstention {s.get('abstention', 0):.1%}. "
              f"Verdicts count only for classes whose trust F1 (F1 with the members the model "
              f"confidently contradicts set aside, while at least {trust_core(model.settings)} "
              f"members are left) is "
              f">= {min_f1} (model.min_f1)."), "",
             "| class | name | precision | recall | F1 | trust F1 | support | abstention | trusted |",
             "|---|---|---:|---:|---:|---:|---:|---:|---|"]
    for c in sorted(model.classes, key=lambda c: (-model.figures[c].f1, c)):
        f = model.figures[c]
        name = ontology.terms[c].name if c in ontology.terms else ""
        lines.append(f"| {_cell(c)} | {_cell(name or '')} | {f.precision:.3f} | {f.recall:.3f} | "
                     f"{f.f1:.3f} | {f.trust_f1:.3f} | {f.support} | {f.abstention:.1%} | "
                     f"{'yes' if f.trust_f1 >= min_f1 else 'no'} |")
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    p = parser("model", "Train the model tier on a revision, or show its cross-validated figures "
               "per class.", formats=("markdown", "json"), revisions=False)
    p.add_argument("action", choices=["train", "evaluate"])
    p.add_argument("revision", nargs="?", default="HEAD", help="revision to learn from (default HEAD)")
    args = p.parse_intermixed_args(argv)
    ws = open_workspace(args)
    try:
        side = ws.repo.commit(args.revision)
        ontology = ws.ontology(side)
        if not ontology.snapshots:
            raise ParentageError(f"no ontology files at {args.revision}: nothing to learn from")
        config = ws.config
        model = stored_model(ontology, config, ws.store) if args.action == "evaluate" else None
        if model is None:
            # A terminal shows a progress bar; logs and pipes do not (parentage.progress).
            model = load_or_train(ontology, config, ws.store, (), side.commit or args.revision,
                                  progress=None)
        if model is None:
            raise ParentageError(f"no class has {config.model.min_members} structured members at "
                                 f"{args.revision} (model.min_members): nothing to learn")
    finally:
        ws.close()
    if args.format == "json":
        emit(json.dumps(figures_json(model, ontology), indent=2), args.output)
    else:
        emit(figures_markdown(model, ontology, config.model.min_f1), args.output)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
