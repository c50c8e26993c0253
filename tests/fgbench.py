"""The functional-group benchmark (DESIGN.md), built only from data RDKit ships.

Source: RDKit's `RDConfig.RDDataDir/Functional_Group_Hierarchy.txt` (a nested functional-group
taxonomy with one SMARTS per group; nesting is given by dotted names) and the molecule sets
`NCI/first_5K.smi` and `Pains/test_data/wehi_mols.csv` shipped in the same folder.

Classes are the hierarchy's groups (is_a by nesting) under one root; members are the shipped
molecules; a molecule's true classes are the groups whose SMARTS match it, closed upward. The
SMARTS are the hidden truth: a model under test must never see them.
"""
from __future__ import annotations

import csv
import os
import random
from collections.abc import Iterable
from functools import lru_cache
from typing import NamedTuple

from rdkit import Chem, RDConfig, RDLogger

ROOT = "FGB:0000000"
PREFIX = "FGB"


class Group(NamedTuple):
    id: str
    key: str  # dotted name in the hierarchy file, e.g. Amine.Primary.Aromatic
    label: str
    smarts: str
    parent: str  # id of the enclosing group, or ROOT


class Molecule(NamedTuple):
    id: str
    smiles: str  # canonical SMILES from RDKit
    source: str  # the data set's own identifier


@lru_cache(maxsize=1)
def groups() -> tuple[Group, ...]:
    path = os.path.join(RDConfig.RDDataDir, "Functional_Group_Hierarchy.txt")
    out: list[Group] = []
    by_key: dict[str, str] = {}
    with open(path, encoding="utf-8") as handle:
        for raw in handle:
            if raw.startswith("//") or not raw.strip():
                continue
            cols = [c.strip() for c in raw.strip().split("\t") if c.strip()]
            key, smarts, label = cols[0], cols[1], cols[2] if len(cols) > 2 else cols[0]
            gid = f"{PREFIX}:{len(out) + 1:07d}"
            parent_key = key.rsplit(".", 1)[0] if "." in key else None
            parent = by_key[parent_key] if parent_key else ROOT
            by_key[key] = gid
            full_label = key.replace(".", " ").lower() if parent_key else label.lower()
            out.append(Group(gid, key, full_label, smarts, parent))
    return tuple(out)


@lru_cache(maxsize=1)
def molecules() -> tuple[Molecule, ...]:
    """The shipped molecules, canonicalised and de-duplicated, in file order."""
    data = RDConfig.RDDataDir
    rows: list[tuple[str, str]] = []
    with open(os.path.join(data, "NCI", "first_5K.smi"), encoding="utf-8") as handle:
        for line in handle:
            parts = line.split()
            if len(parts) >= 2:
                rows.append((parts[0], "NCI-" + parts[1]))
    with open(os.path.join(data, "Pains", "test_data", "wehi_mols.csv"), encoding="utf-8") as handle:
        for smi, ident in csv.reader(handle):
            rows.append((smi, ident))
    RDLogger.DisableLog("rdApp.*")
    try:
        seen: set[str] = set()
        out: list[Molecule] = []
        for smi, ident in rows:
            mol = Chem.MolFromSmiles(smi)
            if mol is None:
                continue
            can = Chem.MolToSmiles(mol)
            if can in seen:
                continue
            seen.add(can)
            out.append(Molecule(f"{PREFIX}:{9000000 + len(out) + 1:07d}", can, ident))
        return tuple(out)
    finally:
        RDLogger.EnableLog("rdApp.*")


def ancestors_of(group_id: str) -> list[str]:
    parent_of = {g.id: g.parent for g in groups()}
    out = []
    while group_id in parent_of:
        group_id = parent_of[group_id]
        out.append(group_id)
    return out


@lru_cache(maxsize=1)
def direct_matches() -> dict[str, frozenset[str]]:
    """molecule id -> ids of the groups whose SMARTS match it directly (RDKit's own matching)."""
    patterns = [(g.id, Chem.MolFromSmarts(g.smarts)) for g in groups()]
    out: dict[str, frozenset[str]] = {}
    for mol in molecules():
        rd = Chem.MolFromSmiles(mol.smiles)
        out[mol.id] = frozenset(gid for gid, patt in patterns if rd.HasSubstructMatch(patt))
    return out


def true_classes(mol_id: str) -> frozenset[str]:
    """Direct matches closed upward (root excluded)."""
    found = set(direct_matches()[mol_id])
    for gid in list(found):
        found.update(a for a in ancestors_of(gid) if a != ROOT)
    return frozenset(found)


def most_specific(classes: Iterable[str]) -> list[str]:
    chosen = set(classes)
    implied = {a for c in chosen for a in ancestors_of(c)}
    return sorted(c for c in chosen if c not in implied) or [ROOT]


def split(seed: int = 0, test_fraction: float = 0.2) -> tuple[list[Molecule], list[Molecule]]:
    """A fixed-seed 80/20 split of the molecules."""
    mols = list(molecules())
    random.Random(seed).shuffle(mols)
    cut = int(len(mols) * (1 - test_fraction))
    return mols[:cut], mols[cut:]


def inject(mols: list[Molecule], seed: int = 1) -> tuple[dict[str, tuple[str, ...]], dict[str, str], dict[str, str]]:
    """Curation errors for the injected-error benchmark: (is_a lists to use, missing, wrong).

    5% of the members lose one of their most specific true classes (filed under its parent
    instead: `missing[term]` is the class lost), another 5% gain a wrong class, drawn from
    every group of the hierarchy that is neither a true class nor an ancestor of one
    (`wrong[term]`).
    """
    rng = random.Random(seed)
    parent_of = {g.id: g.parent for g in groups()}
    parents: dict[str, tuple[str, ...]] = {}
    missing: dict[str, str] = {}
    wrong: dict[str, str] = {}
    order = list(mols)
    rng.shuffle(order)
    cut = len(mols) // 20
    filed = [m for m in order if true_classes(m.id)]
    for m in filed[:cut]:
        own = most_specific(true_classes(m.id))
        lost = rng.choice(own)
        parents[m.id] = tuple(sorted({*(p for p in own if p != lost), parent_of[lost]}))
        missing[m.id] = lost
    for m in [m for m in order if m.id not in parents][:cut]:
        truth = true_classes(m.id)
        choices = [g.id for g in groups() if g.id not in truth
                   and not any(g.id in ancestors_of(t) for t in truth)]
        bad = rng.choice(choices)
        parents[m.id] = tuple(sorted({*most_specific(truth), bad} - {ROOT}))
        wrong[m.id] = bad
    return parents, missing, wrong


class FlagFigures(NamedTuple):
    recall: float  # of the injected errors on learned classes, the share flagged
    precision: float  # of the flags, the share that name an injected error (any class)
    recall_missing: float
    recall_wrong: float
    errors: int  # injected errors on learned classes
    flags: int
    right_elsewhere: int  # right flags naming an error on a class the model did not learn


def flag_figures(found: set[tuple[str, str]], missing: dict[str, str], wrong: dict[str, str],
                 learned: set[str]) -> FlagFigures:
    """Recall over the injected errors on `learned` classes; precision over every flag.

    A flag is right when it names an injected error, whatever its class: a review also flags a
    wrong parent the model never learned, through an ancestor it did learn.
    """
    every = {*missing.items(), *wrong.items()}
    injected = {(t, c) for t, c in every if c in learned}
    right = found & every

    def recall(group: dict[str, str]) -> float:
        part = {(t, c) for t, c in group.items() if c in learned}
        return len(part & found) / max(len(part), 1)

    return FlagFigures(len(found & injected) / max(len(injected), 1), len(right) / max(len(found), 1),
                       recall(missing), recall(wrong), len(injected), len(found), len(right - injected))


def obo_text(mols: Iterable[Molecule], parents: dict[str, list[str]] | None = None,
             smiles_property: str = "smiles") -> str:
    """An OBO document: the groups as classes and `mols` as members.

    `parents` overrides a molecule's is_a list (used to inject curation errors); by default a
    molecule is filed under its most specific true classes.
    """
    lines = ["format-version: 1.2", "ontology: fgb", "",
             "[Term]", f"id: {ROOT}", "name: molecule", ""]
    for g in groups():
        lines += ["[Term]", f"id: {g.id}", f"name: {g.label}", f"is_a: {g.parent}", ""]
    for mol in mols:
        chosen = (parents or {}).get(mol.id) or most_specific(true_classes(mol.id))
        lines += ["[Term]", f"id: {mol.id}", f"name: {mol.source}"]
        lines += [f"is_a: {p}" for p in chosen]
        smiles = mol.smiles.replace("\\", "\\\\").replace('"', '\\"')
        lines += [f'property_value: {smiles_property} "{smiles}" xsd:string', ""]
    return "\n".join(lines)
