"""Rule tier throughput against a naive loop, in one run. Prints figures; asserts nothing.

Rules: the 52 groups of RDKit's shipped Functional_Group_Hierarchy.txt, each a defining rule
with the group's SMARTS. Molecules: RDKit's shipped NCI and PAINS sets (tests/fgbench.py).

Both sides start from the same SMILES texts:
- naive loop: one process, one thread: for every molecule RDKit's MolFromSmiles, then
  HasSubstructMatch with every SMARTS (each compiled once, before the clock starts);
- rule tier: `RuleSet.verdicts` over the same terms (reading, screens, bounded search in
  worker processes, matched atoms kept as evidence, verdicts assembled), a fresh RuleSet each
  time so nothing is cached; once with one worker process (the parent only collects and
  judges) and once with the default (one per CPU, at most 4).
A second pair of figures starts from molecules already parsed (naive: the matching alone).

The machine may be shared, so the sides take turns for `--rounds` rounds and the best time of
each side is the figure; every round's ratio is printed too. The verdicts are checked against
the naive loop pair by pair: a supporting verdict for exactly the (molecule, group) pairs
RDKit matches.

Run: /tmp/venv/bin/python tests/benchmarks/bench_rules.py [--quick] [--rounds N]
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from collections.abc import Callable
from typing import Any

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))
import fgbench
from rdkit import Chem

from parentage.chem.smarts import default_workers
from parentage.snapshot import Ontology, Snapshot, Term
from parentage.tiers.rules import load_rules


def clock(job: Callable[[], Any]) -> tuple[float, float, Any]:
    """(wall seconds, CPU seconds of this process and of the workers it waited for, result)."""
    start, cpu = time.perf_counter(), os.times()
    result = job()
    end = os.times()
    used = sum(getattr(end, k) - getattr(cpu, k) for k in ("user", "system", "children_user", "children_system"))
    return time.perf_counter() - start, used, result


def main() -> None:
    p = argparse.ArgumentParser()
    p.add_argument("--quick", action="store_true", help="the first 3,000 molecules")
    p.add_argument("--rounds", type=int, default=3, help="turns each side takes (default 3)")
    args = p.parse_args()
    mols = list(fgbench.molecules())[: 3000 if args.quick else None]
    groups = fgbench.groups()
    terms = [Term(fgbench.ROOT, "molecule")] + [Term(g.id, g.label, (g.parent,)) for g in groups]
    terms += [Term(m.id, m.source, (fgbench.ROOT,), properties=(("smiles", m.smiles),)) for m in mols]
    onto = Ontology("bench", [Snapshot("fgb.obo", None, terms)])
    text = "".join(f"- class: {g.id}\n  kind: defining\n  any_of: ['{g.smarts}']\n" for g in groups)
    patterns = [Chem.MolFromSmarts(g.smarts) for g in groups]
    smiles = {m.id: m.smiles for m in mols}
    parsed = {m.id: Chem.MolFromSmiles(m.smiles) for m in mols}
    n = len(mols)
    workers = default_workers(n)
    print(f"{n} molecules x {len(groups)} defining rules; CPUs: {os.cpu_count()}; "
          f"default worker processes: {workers}")

    def naive_from_smiles() -> set[tuple[str, str]]:
        out = set()
        for tid, text_ in smiles.items():
            mol = Chem.MolFromSmiles(text_)
            out.update((tid, g.id) for g, q in zip(groups, patterns) if mol.HasSubstructMatch(q))
        return out

    def naive_from_parsed() -> int:
        return sum(mol.HasSubstructMatch(q) for mol in parsed.values() for q in patterns)

    def tier(structures: dict[str, Any], count: int | None) -> Callable[[], set[tuple[str, str]]]:
        def job() -> set[tuple[str, str]]:
            ruleset, _ = load_rules([("rules/fgb.yaml", text)], onto)
            ruleset.workers = count
            verdicts = ruleset.verdicts(onto, list(structures), structures)
            return {(t, v.cls) for t, vs in verdicts.items() for v in vs
                    if v.opinion == "supports" and v.cls != fgbench.ROOT}
        return job

    sides: dict[str, Callable[[], Any]] = {
        "naive, from SMILES": naive_from_smiles,
        "tier, 1 worker, from SMILES": tier(smiles, 1),
        f"tier, {workers} workers, from SMILES": tier(smiles, None),
        "naive, from parsed": naive_from_parsed,
        "tier, 1 worker, from parsed": tier(parsed, 1),
        f"tier, {workers} workers, from parsed": tier(parsed, None),
    }
    best: dict[str, float] = {}
    best_cpu: dict[str, float] = {}
    answers: dict[str, Any] = {}
    for round_ in range(args.rounds):
        times = {}
        for name, job in sides.items():
            times[name], cpu, answers[name] = clock(job)
            best[name] = min(best.get(name, times[name]), times[name])
            best_cpu[name] = min(best_cpu.get(name, cpu), cpu)
        print(f"round {round_ + 1}: " + ", ".join(f"{k} {v:.2f} s" for k, v in times.items()))
    truth = answers["naive, from SMILES"]
    print(f"naive loop: {len(truth)} matching (molecule, group) pairs; from parsed: "
          f"{answers['naive, from parsed']}")
    for name, found in answers.items():
        if name.startswith("tier"):
            same = "the same pairs" if found == truth else f"DIFFERENT ({len(found ^ truth)} pairs differ)"
            print(f"  {name}: {len(found)} supporting verdicts, {same}")
    print("best of each side: wall clock (molecules per second; ratio = naive / tier), and CPU")
    print("seconds of every process of the side (the work done, less sensitive to a busy machine):")
    for start in ("SMILES", "parsed"):
        base, base_cpu = best[f"naive, from {start}"], best_cpu[f"naive, from {start}"]
        print(f"  from {start}: naive {base:6.2f} s ({n / base:6.0f}/s, 1 process, 1 thread), "
              f"CPU {base_cpu:6.2f} s")
        for name in sides:
            if name.startswith("tier") and name.endswith(start):
                took, cpu = best[name], best_cpu[name]
                print(f"    {name}: {took:6.2f} s ({n / took:6.0f}/s)  ratio {base / took:.2f}x; "
                      f"CPU {cpu:6.2f} s, ratio {base_cpu / cpu:.2f}x")
    print("target: rule tier at least 2x the naive loop")


if __name__ == "__main__":
    main()
