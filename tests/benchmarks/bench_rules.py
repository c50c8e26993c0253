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
RDKit matches. Beside the load average, a calibration says how much of a second core was free:
two CPU-bound processes at once against one alone (wall-clock ratio 1.0: two free cores; 2.0:
one), before the first round and after the last; two worker processes can only gain wall-clock
time from a core that is free.

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


def _spin(rounds: int) -> None:
    total = 0
    for i in range(rounds):
        total += i


def second_core() -> float:
    """Wall time of two CPU-bound processes at once over that of one alone (best of three)."""
    import multiprocessing

    def run(count: int) -> float:
        start = time.perf_counter()
        procs = [multiprocessing.Process(target=_spin, args=(3_000_000,)) for _ in range(count)]
        for proc in procs:
            proc.start()
        for proc in procs:
            proc.join()
        return time.perf_counter() - start

    return min(run(2) for _ in range(3)) / min(run(1) for _ in range(3))


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
    load = ", ".join(f"{x:.2f}" for x in os.getloadavg())
    print(f"before: load average {load}; two CPU-bound processes took {second_core():.2f}x the wall "
          f"time of one (1.00: a second core free, 2.00: none)")

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
        f"tier, {workers} worker processes, from SMILES": tier(smiles, None),
        "naive, from parsed": naive_from_parsed,
        "tier, 1 worker, from parsed": tier(parsed, 1),
        f"tier, {workers} worker processes, from parsed": tier(parsed, None),
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
    load = ", ".join(f"{x:.2f}" for x in os.getloadavg())
    print(f"after: load average {load}; two CPU-bound processes took {second_core():.2f}x the wall "
          f"time of one")
    print("target: rule tier at least 2x the naive loop (wall clock, from SMILES):")
    base = best["naive, from SMILES"]
    for name in sides:
        if name.startswith("tier") and name.endswith("SMILES"):
            ratio = base / best[name]
            cpu_ratio = best_cpu["naive, from SMILES"] / best_cpu[name]
            print(f"  {name.removesuffix(', from SMILES')}: {'met' if ratio >= 2 else 'missed'} "
                  f"({ratio:.2f}x wall clock; {cpu_ratio:.2f}x in CPU seconds)")


if __name__ == "__main__":
    main()
