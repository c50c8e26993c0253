"""The review as one JSON object: the DESIGN.md contract plus a few fields for tooling."""
from __future__ import annotations

import json
from typing import Any

from parentage.findings import Review, blocking

CHANGE_KEYS = ("added", "removed", "obsoleted", "edited")


def _plain(value: Any) -> Any:
    # Evidence comes from the tiers; a numpy scalar or similar still becomes plain JSON.
    item = getattr(value, "item", None)
    if callable(item):
        return item()
    if isinstance(value, (set, frozenset)):
        return sorted(value, key=str)
    return str(value)


def to_json(review: Review) -> dict[str, Any]:
    """The object `parentage review --format json` prints."""
    return {
        "base": review.base,
        "head": review.head,
        "ontologies": list(review.ontologies),
        "changes": {key: list(review.changes.get(key, ())) for key in CHANGE_KEYS},
        "affected": list(review.affected),
        "findings": [f.to_json() for f in review.findings],
        "edited_fields": {term: list(fields) for term, fields in review.edited_fields.items()},
        "blocking": len(blocking(review.findings, review.fail_on)),
        "model_revision": review.model_revision,
        "notes": list(review.notes),
    }


def render(review: Review, indent: int | None = 2) -> str:
    return json.dumps(to_json(review), indent=indent, default=_plain, ensure_ascii=False) + "\n"
