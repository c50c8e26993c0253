"""Proposed rules on the functional-group benchmark: learned on 80%, scored on 20%. Prints figures.

Truth: RDKit's shipped Functional_Group_Hierarchy.txt SMARTS matched by RDKit (tests/fgbench.py),
which the proposer never sees; members: RDKit's shipped NCI and PAINS molecules, each filed
under its most specific true groups; split: fgbench.split(seed=0). `rules propose` runs on the
training ontology for every class with at least 20 training members; the rule file it writes
is loaded against the test ontology, and a test molecule counts as predicted for a class when
that class's rule holds for it (any kind).

Run: /tmp/venv/bin/python tests/benchmarks/propose_rules.py [--quick] [--seconds-per-class S]
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))
import fgbench

from parentage.commands.rules import proposals_yaml
from parentage.config import Config
from parentage.snapshot import Ontology, Snapshot, Term
from parentage.tiers.rules import load_rules, propose_rules


def ontology_of(mols: list[fgbench.Molecule], revision: str) -> Ontology:
    terms = [Term(fgbench.ROOT, "molecule")] + [Term(g.id, g.label, (g.parent,)) for g in fgbench.groups()]
    for mol in mols:
        parents = tuple(fgbench.most_specific(fgbench.true_classes(mol.id)))
        terms.append(Term(mol.id, mol.source, parents, properties=(("smiles", mol.smiles),)))
    return Ontology(revision, [Snapshot("fgb.obo", None, terms)])


def main() -> None:
    p = argparse.ArgumentParser()
    p.add_argument("--quick", action="store_true", help="a quarter of the molecules")
    p.add_argument("--seconds-per-class", type=float, default=10.0)
    args = p.parse_args()
    train, test = fgbench.split(seed=0)
    if args.quick:
        train, test = train[: len(train) // 4], test[: len(test) // 4]
    start = time.perf_counter()
    fgbench.direct_matches()
    print(f"truth by RDKit for {len(fgbench.molecules())} molecules: {time.perf_counter() - start:.1f} s")
    train_onto, test_onto = ontology_of(train, "train"), ontology_of(test, "test")
    config = Config()
    start = time.perf_counter()
    proposals = propose_rules(train_onto, config, None, (), args.seconds_per_class, seed=0)
    took = time.perf_counter() - start
    text = proposals_yaml(proposals, "train", len(train))
    print(f"rules propose on {len(train)} training molecules: {len(proposals)} classes with >= "
          f"{config.model.min_members} members, {took:.1f} s")
    ruleset, warnings = load_rules([("proposed.yaml", text)], test_onto)
    assert not warnings, warnings
    outcomes = ruleset.outcomes([m.smiles for m in test], [range(len(ruleset))] * len(test), config.limits)
    print()
    print(f"{'class':<11} {'name':<34} {'train':>5} {'test':>5} {'kind':<10} {'any':>3} {'none':>4} "
          f"{'P':>6} {'R':>6} {'F1':>6}  train F1")
    f1s = []
    for proposal in proposals:
        if not proposal.candidates:
            print(f"{proposal.cls:<11} {proposal.name[:34]:<34} {proposal.members:>5}  no candidate")
            f1s.append(0.0)
            continue
        best = proposal.candidates[0]
        index = next(i for i, r in enumerate(ruleset.rules) if r.cls == proposal.cls)
        # Every molecule is filed under the root, directly or through a group.
        truth = [proposal.cls == fgbench.ROOT or proposal.cls in fgbench.true_classes(m.id) for m in test]
        predicted = [o.error is None and ruleset.holds_quickly(index, o) for o in outcomes]
        tp = sum(t and q for t, q in zip(truth, predicted))
        found, members = sum(predicted), sum(truth)
        precision = tp / found if found else 0.0
        recall = tp / members if members else 0.0
        f1 = 2 * tp / (found + members) if found + members else 0.0
        f1s.append(f1)
        rule = ruleset.rules[index]
        print(f"{proposal.cls:<11} {proposal.name[:34]:<34} {proposal.members:>5} {members:>5} {rule.kind:<10} "
              f"{len(rule.any_of):>3} {len(rule.none_of):>4} {precision:6.3f} {recall:6.3f} {f1:6.3f}  {best.f1:.3f}")
    print()
    print(f"median F1 over {len(f1s)} classes on the held-out 20%: {statistics.median(f1s):.3f} "
          f"(mean {statistics.mean(f1s):.3f}, min {min(f1s):.3f}); target >= 0.85")


if __name__ == "__main__":
    main()
