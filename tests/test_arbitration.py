"""Arbitration of model verdicts into findings: an ancestor the model is against.

The verdicts are built by hand here (the model tier's own output is tested in test_model.py);
the rule under test is the ontology's: a member of a class is a member of its ancestors.
"""
from __future__ import annotations

import pytest

from parentage.arbitration import arbitrate
from parentage.snapshot import Ontology, Snapshot, Term
from parentage.tiers import Verdict

ONTOLOGY = Ontology("base", [Snapshot("t.obo", None, [
    Term("T:0", "root"),
    Term("T:1", "amine", ("T:0",)),
    Term("T:2", "primary amine", ("T:1",)),
    Term("T:3", "halide", ("T:0",)),
    Term("X:1", "a compound", ("T:2", "T:3"), properties=(("smiles", "NCCCl"),)),
])])


def model(cls: str, opinion: str, p: float) -> Verdict:
    return Verdict("X:1", cls, "model", opinion, {"probability": p})


def rule(cls: str, opinion: str) -> Verdict:
    return Verdict("X:1", cls, "rule", opinion, {"kind": "sufficient"})


@pytest.mark.parametrize("rules, verdicts, trusted, expected", [
    pytest.param([], [model("T:1", "opposes", 0.001), model("T:3", "supports", 0.9)], {"T:1", "T:3"},
                 {("T:2", 0.001)}, id="against the parent's ancestor: the parent is unsupported"),
    pytest.param([], [model("T:2", "opposes", 0.002), model("T:1", "opposes", 0.001)], {"T:1", "T:2"},
                 {("T:2", 0.002)}, id="against the parent itself: its own verdict is the evidence"),
    pytest.param([rule("T:1", "supports")], [model("T:1", "opposes", 0.001)], {"T:1"},
                 set(), id="a rule supports the ancestor: the rule decides"),
    pytest.param([rule("T:2", "supports")], [model("T:1", "opposes", 0.001)], {"T:1"},
                 set(), id="a rule supports the parent"),
    pytest.param([], [model("T:1", "opposes", 0.001)], set(),
                 set(), id="the ancestor's model is not trusted"),
    pytest.param([], [model("T:1", "supports", 0.95), model("T:2", "supports", 0.9)], {"T:1", "T:2"},
                 set(), id="no opposition: nothing to report"),
])
def test_parent_unsupported_through_ancestors(rules: list[Verdict], verdicts: list[Verdict],
                                              trusted: set[str], expected: set[tuple[str, float]]) -> None:
    f1 = {c: (0.95 if c in trusted else 0.5) for c in ("T:1", "T:2", "T:3")}
    found = arbitrate(ONTOLOGY, "X:1", rules, verdicts, f1, 0.8, 3)
    # (the parent reported, the probability of the verdict given as evidence)
    got = {(f.classes[0], f.evidence["model"]["probability"]) for f in found if f.kind == "parent-unsupported"}
    assert got == expected
