"""The tiers: structure checks, curator rules and the learned model. Each returns records."""
from __future__ import annotations

from collections.abc import Mapping
from typing import Any, NamedTuple

OPINIONS = ("supports", "opposes", "abstains")


class Verdict(NamedTuple):
    """One tier's opinion of one term for one class, with its evidence.

    rule evidence: {"rule": "file:line", "kind": ..., "smarts": [...], "atoms": [[...]]}
    model evidence: {"probability": p, "threshold": t, "nearest": id, "similarity": s,
                     "bits": [...], "atoms": [...]}; an abstention carries {"reason": ...}.
    """

    term: str
    cls: str  # "" for a term-wide abstention of the model
    tier: str  # "rule" | "model"
    opinion: str  # one of OPINIONS
    evidence: Mapping[str, Any] = {}
