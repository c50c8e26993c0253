"""Rule tier throughput against a naive loop, in one run. Prints figures; asserts nothing.

Rules: the 52 groups of RDKit's shipped Functional_Group_Hierarchy.txt, each a defining rule
with the group's SMARTS. Molecules: RDKit's shipped NCI and PAINS sets (tests/fgbench.py),
filed under their most specific groups. Naive loop: for every molecule, RDKit's
MolFromSmiles, then HasSubstructMatch with every SMARTS (compiled once). Rule tier:
`RuleSet.verdicts` over the same molecules (screens, bounded search in a worker process,
matched atoms kept as evidence), once with one worker process and once with the default
(one per CPU for big jobs; the naive loop uses one). Both start from the SMILES text; a second
pair of figures starts from molecules already parsed. Times are wall clock on whatever else
the machine runs, so the ratio within one run is the figure to read.

Run: /tmp/venv/bin/python tests/benchmarks/bench_rules.py [--quick]
"""
from __future__ import annotations

import argparse
import os
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))
import fgbench
from rdkit import Chem

from parentage.chem.smarts import default_workers
from parentage.snapshot import Ontology, Snapshot, Term
from parentage.tiers.rules import load_rules


def main() -> None:
    p = argparse.ArgumentParser()
    p.add_argument("--quick", action="store_true", help="the first 3,000 molecules")
    args = p.parse_args()
    mols = list(fgbench.molecules())[: 3000 if args.quick else None]
    groups = fgbench.groups()
    terms = [Term(fgbench.ROOT, "molecule")] + [Term(g.id, g.label, (g.parent,)) for g in groups]
    terms += [Term(m.id, m.source, (fgbench.ROOT,), properties=(("smiles", m.smiles),)) for m in mols]
    onto = Ontology("bench", [Snapshot("fgb.obo", None, terms)])
    text = "".join(f"- class: {g.id}\n  kind: defining\n  any_of: ['{g.smarts}']\n" for g in groups)
    patterns = [Chem.MolFromSmarts(g.smarts) for g in groups]
    print(f"{len(mols)} molecules x {len(groups)} defining rules")

    # Naive: parse, then every SMARTS against every molecule.
    start = time.perf_counter()
    parsed = [Chem.MolFromSmiles(m.smiles) for m in mols]
    parse_time = time.perf_counter() - start
    start = time.perf_counter()
    naive_hits = sum(mol.HasSubstructMatch(q) for mol in parsed for q in patterns)
    match_time = time.perf_counter() - start
    naive = parse_time + match_time

    smiles = {m.id: m.smiles for m in mols}
    molecules = {m.id: mol for m, mol in zip(mols, parsed)}
    n = len(mols)
    print(f"naive loop: parse {parse_time:.2f} s, match {match_time:.2f} s, {naive_hits} matches")
    print(f"worker processes by default: {default_workers(n)} (CPUs: {os.cpu_count()})")
    for workers in (1, None):
        label = f"{workers} worker" if workers else f"{default_workers(n)} workers"
        # A fresh RuleSet each time: nothing cached.
        ruleset, _ = load_rules([("rules/fgb.yaml", text)], onto)
        ruleset.workers = workers
        start = time.perf_counter()
        verdicts = ruleset.verdicts(onto, list(smiles), smiles)
        tier = time.perf_counter() - start
        hits = sum(1 for vs in verdicts.values() for v in vs if v.opinion == "supports" and v.cls != fgbench.ROOT)
        start = time.perf_counter()
        ruleset.verdicts(onto, list(smiles), smiles)
        again = time.perf_counter() - start
        fresh, _ = load_rules([("rules/fgb.yaml", text)], onto)
        fresh.workers = workers
        start = time.perf_counter()
        fresh.verdicts(onto, list(molecules), molecules)
        tier_parsed = time.perf_counter() - start
        print(f"rule tier, {label}: {hits} matches ({'equal' if hits == naive_hits else 'DIFFERENT'})")
        print(f"  from SMILES: naive {naive:6.2f} s ({n / naive:6.0f}/s)  tier {tier:6.2f} s "
              f"({n / tier:6.0f}/s)  ratio {naive / tier:.2f}x")
        print(f"  from parsed: naive {match_time:6.2f} s ({n / match_time:6.0f}/s)  tier {tier_parsed:6.2f} s "
              f"({n / tier_parsed:6.0f}/s)  ratio {match_time / tier_parsed:.2f}x")
        print(f"  the same SMILES again (structure cache): {again:.2f} s ({n / again:.0f}/s)")
    print("target: rule tier at least 2x the naive loop")


if __name__ == "__main__":
    main()
