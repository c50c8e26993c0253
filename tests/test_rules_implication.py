"""Which pattern implies which: the rule tier skips a search when a pattern that the searched
one implies has already failed, so a wrong proof would be a wrong verdict.

Sources: RDKit's shipped `Functional_Group_Hierarchy.txt` (nested groups, each with a SMARTS)
and `FragmentDescriptors.csv` (more SMARTS), with the molecules of tests/fgbench.py; RDKit's own
`HasSubstructMatch` is the reference matcher. The small cases are SMARTS whose meaning is
common practice (an aromatic carbon is a carbon; a chain that must be single is a chain).
"""
from __future__ import annotations

import random

import numpy as np
import pytest
from fgbench import groups, molecules
from rdkit import Chem
from test_rules_fgbench import _fragment_smarts

from parentage.chem.smarts import compile_smarts, implies, search_order

CASES = [
    pytest.param("c", "[#6]", True, id="aromatic-carbon-is-a-carbon"),
    pytest.param("[#6]", "c", False, id="a-carbon-need-not-be-aromatic"),
    pytest.param("[CH3]", "C", True, id="more-conditions-on-the-same-atom"),
    pytest.param("C-O", "C~O", True, id="single-bond-is-a-bond"),
    pytest.param("C~O", "C-O", False, id="any-bond-need-not-be-single"),
    pytest.param("C=O", "CO", False, id="double-is-not-single-or-aromatic"),
    pytest.param("OCC", "OC", True, id="longer-chain-holds-the-shorter"),
    pytest.param("OC", "OCC", False, id="shorter-chain-lacks-an-atom"),
    pytest.param("CO", "OC", False, id="atoms-in-another-order-are-not-proved"),
    pytest.param("[O;H1,-]", "[O;H1]", False, id="one-alternative-is-not-the-other"),
    pytest.param("[O;H1]", "[O;H1,-]", False, id="alternatives-are-left-to-equality"),
    pytest.param("[N;$(N-c)]", "[N;$(N-[#6])]", True, id="recursion-implies-a-looser-one"),
    pytest.param("[N;$(N-[#6])]", "[N;$(N-c)]", False, id="looser-recursion-does-not"),
    pytest.param("[N;!$(N-C=[O,S])]", "[N;!$(N-C=O)]", True, id="negation-of-a-looser-recursion"),
    pytest.param("[N;!$(N-C=O)]", "[N;!$(N-C=[O,S])]", False, id="negation-of-a-stricter-one-does-not"),
    pytest.param("[O;$(O-c)]", "[O;!$(C=O)]", True, id="negated-recursion-rooted-elsewhere"),
    pytest.param("[$(C-!@[a])](=O)[O;H,-]", "C(=O)[O;H,-]", True, id="recursion-fixes-the-root-type"),
    pytest.param("C.C", "C", False, id="disconnected-patterns-are-left-alone"),
    pytest.param("[C;R]", "[C;R]", True, id="same-text"),
]


@pytest.mark.parametrize(("pattern", "other", "expected"), CASES)
def test_implication_cases(pattern: str, other: str, expected: bool) -> None:
    assert implies(compile_smarts(pattern), compile_smarts(other)) is expected


def test_proofs_hold_on_shipped_smarts_and_molecules() -> None:
    # Every proved implication among RDKit's shipped SMARTS must hold on real molecules:
    # wherever RDKit matches the first pattern, it matches the second too.
    texts = list(dict.fromkeys(_fragment_smarts() + [g.smarts for g in groups()]))
    patterns = [compile_smarts(t) for t in texts]
    mols = list(molecules())
    random.Random(11).shuffle(mols)
    rdkit_mols = [Chem.MolFromSmiles(m.smiles) for m in mols[:600]]
    truth = np.array([[rd.HasSubstructMatch(p.query) for p in patterns] for rd in rdkit_mols])
    proved = [(i, j) for i, p in enumerate(patterns) for j, q in enumerate(patterns) if i != j and implies(p, q)]
    for i, j in proved:
        assert not (truth[:, i] & ~truth[:, j]).any(), (texts[i], texts[j])
    # The proofs do find the nesting of the hierarchy: a child group's SMARTS implies its
    # parent's for most groups written as a refinement of the parent (e.g. Amine.Aromatic).
    by_key = {g.key: g.smarts for g in groups()}
    nested = [(by_key[k], by_key[k.rsplit(".", 1)[0]]) for k in by_key if "." in k]
    found = sum(implies(compile_smarts(child), compile_smarts(parent)) for child, parent in nested)
    assert found >= len(nested) // 2, (found, len(nested))
    assert len(proved) >= 30


def test_search_order_puts_implied_patterns_first() -> None:
    # Functional_Group_Hierarchy.txt: Amine.Aromatic implies Amine; Amine comes first and is
    # listed among what Amine.Aromatic implies.
    by_key = {g.key: g.smarts for g in groups()}
    keys = ["Amine.Aromatic", "Halogen", "Amine"]
    order, before = search_order([compile_smarts(by_key[k]) for k in keys])
    assert sorted(order) == [0, 1, 2]
    assert order.index(2) < order.index(0)
    assert before == [(2,), (), ()]
