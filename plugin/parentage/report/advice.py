"""A short next step for each kind of finding, shared by the markdown and SARIF outputs."""
from __future__ import annotations

from collections.abc import Sequence

ADVICE: dict[str, str] = {
    "structure-unreadable": "Fix the SMILES so that it parses and sanitises, or remove it.",
    "annotation-mismatch": "Recompute the annotation from the structure, or correct the structure.",
    "duplicate-structure": "Merge the two terms, or correct one of the structures.",
    "hierarchy-cycle": "Remove one is_a link so that the hierarchy has no cycle.",
    "parent-dangling": "Define the missing term or point the link at an existing one.",
    "parent-obsolete": "Move the term under the obsolete parent's replacement.",
    "parent-redundant": "Drop the redundant parent{classes}; another asserted parent implies it.",
    "rule-violated": "Check the parent{classes}: either the structure or the rule is wrong.",
    "disjoint-violated": "Keep the term under only one of the disjoint classes{classes}, or revisit the axiom.",
    "parent-unsupported": "Confirm the parent{classes} by hand; no tier supports it.",
    "tiers-disagree": "Compare both tiers' evidence for the class{classes}; a rule may need an update.",
    "parent-suggested": "Consider adding the suggested parent{classes} if the chemistry agrees.",
}
_FALLBACK = "Review this finding by hand."


def advice(kind: str, classes: Sequence[str] = ()) -> str:
    """Plain text (not yet escaped) naming the classes a finding is about, if any."""
    named = " " + ", ".join(classes) if classes else ""
    return ADVICE.get(kind, _FALLBACK).replace("{classes}", named)
