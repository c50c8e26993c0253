"""The rule tier against RDKit itself, on the functional-group benchmark (tests/fgbench.py).

Reference: RDKit's shipped `Functional_Group_Hierarchy.txt` (classes and SMARTS),
`FragmentDescriptors.csv` (more SMARTS) and molecule sets; RDKit's own `HasSubstructMatch` is
the reference matcher. A subset of 2,000 molecules keeps the file under a minute.
"""
from __future__ import annotations

import os
import random

import pytest
from fgbench import ROOT, ancestors_of, groups, molecules, most_specific
from rdkit import Chem, RDConfig

from parentage.chem.smarts import ScreenTable, compile_smarts, facts_of, find
from parentage.config import Config
from parentage.snapshot import Ontology, Snapshot, Term
from parentage.tiers.rules import load_rules, rule_agreement

SUBSET = 2000


@pytest.fixture(scope="module")
def subset() -> list:
    mols = list(molecules())
    random.Random(7).shuffle(mols)
    return mols[:SUBSET]


def bench_ontology(subset: list, direct: dict[str, set[str]], parents: dict[str, list[str]]) -> Ontology:
    """The groups as classes (is_a by nesting), the molecules filed under their most specific
    directly matched groups (as fgbench.obo_text files them), unless `parents` says otherwise."""
    terms = [Term(ROOT, "molecule")] + [Term(g.id, g.label, (g.parent,)) for g in groups()]
    for mol in subset:
        closed = set(direct[mol.id]) | {a for g in direct[mol.id] for a in ancestors_of(g) if a != ROOT}
        chosen = parents.get(mol.id) or most_specific(closed)
        terms.append(Term(mol.id, mol.source, tuple(chosen), properties=(("smiles", mol.smiles),)))
    return Ontology("bench", [Snapshot("fgb.obo", None, terms)])


@pytest.fixture(scope="module")
def rdkit_matches(subset: list) -> dict[str, set[str]]:
    """molecule id -> groups whose SMARTS RDKit matches directly."""
    patterns = [(g.id, Chem.MolFromSmarts(g.smarts)) for g in groups()]
    out = {}
    for mol in subset:
        rd = Chem.MolFromSmiles(mol.smiles)
        out[mol.id] = {gid for gid, patt in patterns if rd.HasSubstructMatch(patt)}
    return out


def test_defining_rules_equal_rdkit_matching(subset: list, rdkit_matches: dict[str, set[str]]) -> None:
    # Every tenth molecule is filed under a random group as well, so that asserted classes
    # the structure does not match (and so opposing verdicts) occur too.
    rng = random.Random(3)
    all_groups = [g.id for g in groups()]
    misfiled = {m.id: [rng.choice(all_groups)] for m in subset[::10]}
    onto = bench_ontology(subset, rdkit_matches, misfiled)
    text = "".join(f"- class: {g.id}\n  kind: defining\n  any_of: ['{g.smarts}']\n" for g in groups())
    ruleset, warnings = load_rules([("rules/fgb.yaml", text)], onto)
    assert warnings == [] and len(ruleset) == len(groups())
    structures = {m.id: m.smiles for m in subset}
    verdicts = ruleset.verdicts(onto, list(structures), structures)
    ruled = set(all_groups)
    opposed = 0
    for mol in subset:
        direct = rdkit_matches[mol.id]
        found = {v.cls: v.opinion for v in verdicts[mol.id] if v.cls in ruled}
        members = onto.ancestors(mol.id) | {a for g in direct for a in onto.ancestors(g)} | direct
        for gid in all_groups:
            if gid in direct:
                expected = "supports"
            elif gid in members:
                expected = "opposes"
            else:
                expected = None
            assert found.get(gid) == expected, (mol.id, mol.smiles, gid)
        opposed += list(found.values()).count("opposes")
        if direct:  # the root has no rule; any match implies it
            assert {v.cls: v.opinion for v in verdicts[mol.id]}[ROOT] == "supports"
    assert opposed > 50  # the misfiled molecules did produce opposing verdicts


def _fragment_smarts() -> list[str]:
    out = []
    with open(os.path.join(RDConfig.RDDataDir, "FragmentDescriptors.csv"), encoding="utf-8") as handle:
        for line in handle:
            parts = line.rstrip("\n").split("\t")
            if line.startswith("#") or len(parts) < 3:
                continue
            out.append(parts[2].strip())
    return out


def test_screens_never_reject_a_match(subset: list) -> None:
    # RDKit's FragmentDescriptors.csv and the hierarchy's SMARTS against 600 molecules:
    # wherever RDKit's HasSubstructMatch finds a match, the screen must let it through.
    texts = _fragment_smarts() + [g.smarts for g in groups()]
    assert len(texts) > 120
    patterns = [compile_smarts(t) for t in texts]
    table = ScreenTable(patterns)
    mols = [(m.smiles, Chem.MolFromSmiles(m.smiles)) for m in subset[:600]]
    # Facts from the formula and the SMILES text, from the molecule alone, and the quick form
    # (the screened elements counted in the text).
    for smiles, quick in ((True, False), (False, False), (True, True)):
        passing = table.passing([facts_of(rd, text if smiles else None, table.bond_types,
                                          table.elements_of if quick else None)
                                 for text, rd in mols])
        for row, (text, rd) in enumerate(mols):
            for col, pattern in enumerate(patterns):
                if not passing[row, col]:
                    assert not rd.HasSubstructMatch(Chem.MolFromSmarts(pattern.text)), (pattern.text, text)
        # The screens do work: most pairs never reach a search.
        assert passing.mean() < 0.75
    hits = [bool(find(p, rd)) == rd.HasSubstructMatch(p.query) for _, rd in mols[:50] for p in patterns]
    assert all(hits)


def test_screen_facts_bound_the_true_counts(subset: list) -> None:
    # True counts walked atom by atom and bond by bond with RDKit.
    everything = range(119)
    for mol in subset:
        rd = Chem.MolFromSmiles(mol.smiles)
        true_atoms: dict[int, int] = {}
        for atom in rd.GetAtoms():
            key = 2 * atom.GetAtomicNum() + atom.GetIsAromatic()
            true_atoms[key] = true_atoms.get(key, 0) + 1
        elements = {a.GetSymbol() for a in rd.GetAtoms()} | (
            {"H"} if any(a.GetTotalNumHs() for a in rd.GetAtoms()) else set())
        # Formula and text, molecule alone, and the quick form (every element from the text).
        for smiles, quick in ((mol.smiles, None), (None, None), (mol.smiles, everything)):
            facts = facts_of(rd, smiles, elements_of=quick)
            for key, count in true_atoms.items():
                assert facts.atom_counts.get(key, 0) >= count, (mol.smiles, key, quick is None)
            for kind in (2, 3):
                true = sum(1 for b in rd.GetBonds() if int(b.GetBondType()) == kind)
                assert facts.bond_counts.get(kind, facts.bonds) >= true, (mol.smiles, kind)
            assert facts.charge == Chem.GetFormalCharge(rd)
            assert facts.elements == (elements if quick is None else frozenset())


def test_rules_test_counts_equal_rdkit_matching(subset: list, rdkit_matches: dict[str, set[str]]) -> None:
    # `rules test` searches for one match per pattern (no atoms): each defining rule's matches
    # inside plus outside must be the molecules RDKit's HasSubstructMatch finds, and its members
    # the molecules filed under the group or below it.
    onto = bench_ontology(subset, rdkit_matches, {})
    text = "".join(f"- class: {g.id}\n  kind: defining\n  any_of: ['{g.smarts}']\n" for g in groups())
    ruleset, _ = load_rules([("rules/fgb.yaml", text)], onto)
    report = rule_agreement(ruleset, onto, Config())
    assert report.structured == len(subset) and not report.unchecked
    for row in report.rules:
        matched = {m.id for m in subset if row.rule.cls in rdkit_matches[m.id]}
        members = {m.id for m in subset if row.rule.cls in onto.ancestors(m.id)}
        assert row.matched_inside + row.matched_outside == len(matched), row.rule.cls
        assert row.matched_inside == len(matched & members), row.rule.cls
        assert row.members == len(members), row.rule.cls
        assert set(row.examples_outside) <= matched - members
    assert sum(r.matched_inside for r in report.rules) > 1000
