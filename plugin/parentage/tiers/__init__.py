"""The tiers: structure checks, curator rules and the learned model. Each returns records."""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any, NamedTuple

from parentage.findings import Finding
from parentage.snapshot import Ontology, Term

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


def live_terms(ontology: Ontology, term_ids: Iterable[str]) -> list[Term]:
    """The listed terms that exist and are not obsolete, once each, in order."""
    terms = (ontology.terms.get(t) for t in dict.fromkeys(term_ids))
    return [t for t in terms if t is not None and not t.obsolete]


def term_finding(ontology: Ontology, term: Term, kind: str, message: str,
                 classes: tuple[str, ...] = (), **evidence: object) -> Finding:
    """A structure-tier finding located at the term's stanza."""
    return Finding(kind, term.id, message, classes, ("structure",), evidence,
                   ontology.path_of.get(term.id, ""), term.line)
