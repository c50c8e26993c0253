"""Bounded work: a hostile SMARTS on a 2,000-atom molecule stops at the configured time.

The molecule is a ladder of 59 fused cyclobutane rings with a long carbon tail, 2,000 carbons
in all (built with RDKit). Every ring in a ladder has an even size (the graph is bipartite;
common practice in graph theory), so a SMARTS for a 25-membered ring of any atoms can never
match, and a search walks an exponential number of paths before it gives up.
"""
from __future__ import annotations

import time

import pytest
from rdkit import Chem

from parentage.chem.molecules import parse_smiles
from parentage.chem.smarts import compile_smarts, match_many
from parentage.config import Limits
from parentage.snapshot import Ontology, Snapshot, Term
from parentage.tiers.rules import load_rules

ATOMS = 2000
RUNGS = 60
BOUND = 2.0
LIMITS = Limits(max_atoms=5000, max_structure_chars=200_000, rule_seconds=BOUND, max_matches=1000)
ODD_RING = "*1" + "~*" * 24 + "1"


def ladder_smiles(rungs: int = RUNGS, atoms: int = ATOMS) -> str:
    """Two chains of `rungs` carbons joined at every position, then a tail up to `atoms`."""
    mol = Chem.RWMol()
    top = [mol.AddAtom(Chem.Atom(6)) for _ in range(rungs)]
    bottom = [mol.AddAtom(Chem.Atom(6)) for _ in range(rungs)]
    for i in range(rungs):
        mol.AddBond(top[i], bottom[i], Chem.BondType.SINGLE)
        if i:
            mol.AddBond(top[i - 1], top[i], Chem.BondType.SINGLE)
            mol.AddBond(bottom[i - 1], bottom[i], Chem.BondType.SINGLE)
    last = top[-1]
    for _ in range(atoms - 2 * rungs):
        atom = mol.AddAtom(Chem.Atom(6))
        mol.AddBond(last, atom, Chem.BondType.SINGLE)
        last = atom
    Chem.SanitizeMol(mol)
    return Chem.MolToSmiles(mol, canonical=False)  # canonical ranking of a ladder is slow


def test_ladder_is_the_molecule_described() -> None:
    mol = Chem.MolFromSmiles(ladder_smiles())
    assert mol.GetNumAtoms() == ATOMS
    assert {len(r) for r in mol.GetRingInfo().AtomRings()} == {4}


@pytest.mark.parametrize("smarts", [
    pytest.param(ODD_RING, id="odd-ring"),
    pytest.param(f"[$({ODD_RING})]", id="odd-ring-in-recursion"),
])
def test_hostile_smarts_stops_at_the_bound(smarts: str) -> None:
    big = ladder_smiles()
    patterns = [compile_smarts(smarts), compile_smarts("C")]
    start = time.perf_counter()
    # A plain molecule on each side of the hostile one still gets its answer.
    outcomes = match_many(patterns, ["CCO", big, "c1ccccc1"], [[0, 1], [0], [0, 1]], LIMITS)
    took = time.perf_counter() - start
    assert outcomes[1].error is not None and outcomes[1].error.startswith("time limit")
    assert outcomes[1].error.endswith("stopped while searching it")
    assert outcomes[0].error is None and 1 in outcomes[0].matches and 0 not in outcomes[0].matches
    assert outcomes[2].error is None and not outcomes[2].matches  # benzene: aromatic c, no C
    assert took < BOUND + 3.0  # the bound plus starting the worker twice on a busy machine


def test_rule_verdicts_abstain_past_the_bound() -> None:
    big = ladder_smiles()
    terms = [Term("X:1", "class"), Term("X:2", "ladder", ("X:1",), properties=(("smiles", big),)),
             Term("X:3", "ethanol", ("X:1",), properties=(("smiles", "CCO"),))]
    onto = Ontology("test", [Snapshot("x.obo", None, terms)])
    text = f"- class: X:1\n  kind: necessary\n  none_of: ['{ODD_RING}']\n"
    ruleset, _ = load_rules([("rules/x.yaml", text)], onto)
    start = time.perf_counter()
    verdicts = ruleset.verdicts(onto, ["X:2", "X:3"], {"X:2": big, "X:3": "CCO"}, LIMITS)
    assert time.perf_counter() - start < BOUND + 3.0
    [late] = verdicts["X:2"]
    assert (late.cls, late.opinion) == ("", "abstains")
    assert "limits.rule_seconds" in late.evidence["reason"]
    assert [(v.cls, v.opinion) for v in verdicts["X:3"]] == [("X:1", "supports")]


def test_match_count_is_bounded() -> None:
    # Benzene has 12 matches of a six-atom ring walk; maxMatches caps what is kept.
    patterns = [compile_smarts("c1ccccc1")]
    [capped] = match_many(patterns, ["c1ccccc1"], [[0]], Limits(max_matches=1))
    assert len(capped.matches[0]) == 1
    [default] = match_many(patterns, ["c1ccc2ccccc2c1"], [[0]], Limits())
    assert len(default.matches[0]) == 2  # naphthalene: two rings, matches unique by atom set


@pytest.mark.parametrize("smiles", [
    pytest.param("C(", id="syntax-error"),
    pytest.param("c1cccc1", id="cannot-kekulise"),
    pytest.param("   ", id="blank"),
    pytest.param("C" * 30, id="over-the-atom-limit"),
    pytest.param("C" * 10 + "." + "O" * 3, id="near-the-limit-read-quickly"),
])
def test_worker_reads_as_the_careful_parse(smiles: str) -> None:
    # The worker reads a short text with one RDKit call; whatever it makes of a structure
    # (a molecule, or why not) must be what the careful parse makes of it.
    limits = Limits(max_atoms=20)
    [outcome] = match_many([compile_smarts("[#6]")], [smiles], [[0]], limits)
    mol, error, _log = parse_smiles(smiles, limits)
    assert outcome.error == error
    assert (0 in outcome.hits) == (mol is not None)


@pytest.mark.parametrize("smiles", [
    pytest.param("[H]OC", id="hydroxyl-hydrogen-written"),
    pytest.param("C([H])([H])([H])O", id="methyl-hydrogens-written"),
    pytest.param("[2H]OC", id="deuterium-kept-as-an-atom"),
    pytest.param("[OH]C", id="hydrogen-count-not-an-atom"),
])
def test_hydrogen_atoms_are_read_as_rdkit_reads_them(smiles: str) -> None:
    # RDKit's MolFromSmiles (the reading of the reference matcher) removes hydrogens written as
    # atoms, bar isotopes, and so changes degrees; both ways a worker reads a text (one call
    # for a short text, the careful parse for one longer than limits.max_atoms characters)
    # must match as it does.
    patterns = [compile_smarts("[O;D1]"), compile_smarts("[C;D1]"), compile_smarts("[O;D2]")]
    reference = Chem.MolFromSmiles(smiles)
    expected = {i for i, p in enumerate(patterns) if reference.HasSubstructMatch(p.query)}
    [quick] = match_many(patterns, [smiles], [[0, 1, 2]], Limits())
    [careful] = match_many(patterns, [smiles], [[0, 1, 2]], Limits(max_atoms=len(smiles) - 1))
    assert quick.error is None and careful.error is None
    assert quick.hits == careful.hits == expected


def test_many_structures_stay_bounded() -> None:
    # Hundreds of plain structures around the hostile one, over two worker processes: only
    # the hostile one runs into the bound; every other one gets its answer.
    big = ladder_smiles()
    items = ["CCO", "c1ccccc1"] * 200
    items.insert(150, big)
    patterns = [compile_smarts(ODD_RING), compile_smarts("[OX2H]")]
    start = time.perf_counter()
    outcomes = match_many(patterns, items, [[0, 1]] * len(items), LIMITS, workers=2, evidence=False)
    assert time.perf_counter() - start < BOUND + 6.0
    assert outcomes[150].error is not None and outcomes[150].error.startswith("time limit")
    rest = outcomes[:150] + outcomes[151:]
    assert all(o.error is None for o in rest)
    assert [1 in o.hits for o in rest] == [s == "CCO" for s in items[:150] + items[151:]]
