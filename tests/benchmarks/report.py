"""Benchmark report: snapshot builds and commands at scale, each beside baselines of the same run.

    python tests/benchmarks/report.py [--sizes 10k,50k,200k] [--repeat 3] [--root DIR]

For each size the generator's repositories are built under ROOT (default /tmp/parentage-bench)
when missing: changes of 1, 10 and 1,000 terms. Every figure comes from a fresh subprocess; its wall time and its peak resident memory
(`os.wait4` of that child) are printed as a markdown table, with pronto's and fastobo's load of
the same file measured in the same run as baselines.

- cold: an empty store (`PARENTAGE_CACHE` set to a new folder); model training included.
- warm: a copy of the store that a review of the base against itself left behind (base
  snapshot, structure facts, InChIKey index and model cached; the head is new to it).
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from typing import NamedTuple

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)

import generate  # a sibling script, found through the path above

CHANGES = (1, 10, 1000)


class Run(NamedTuple):
    wall: float  # seconds, whole process
    inner: dict[str, float]  # figures the child printed as JSON on its last stdout line
    peak_mb: float
    code: int
    error: str


def measure(argv: Sequence[str], cwd: str | None = None, env: dict[str, str] | None = None) -> Run:
    start = time.perf_counter()
    with tempfile.TemporaryFile() as out, tempfile.TemporaryFile() as err:
        child = subprocess.Popen(list(argv), cwd=cwd, env=env, stdout=out, stderr=err)
        _pid, status, usage = os.wait4(child.pid, 0)
        wall = time.perf_counter() - start
        child.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        stdout = out.read().decode("utf-8", "replace")
        stderr = err.read().decode("utf-8", "replace")
    inner: dict[str, float] = {}
    lines = stdout.strip().splitlines()
    if lines and lines[-1].startswith("{"):
        try:
            inner = json.loads(lines[-1])
        except ValueError:
            inner = {}
    error = ""
    if child.returncode not in (0, 1):
        said = [line for line in stderr.strip().splitlines() if line.startswith("parentage:")]
        error = f"exit {child.returncode}: " + (said or stderr.strip().splitlines() or ["?"])[0][:150]
    return Run(wall, inner, usage.ru_maxrss / 1024, child.returncode, error)


PY = sys.executable

PRONTO = """
import sys, time, json, warnings
warnings.simplefilter("ignore")
import pronto
t = time.perf_counter(); onto = pronto.Ontology(sys.argv[1]); n = len(onto.terms())
print(json.dumps({"load": time.perf_counter() - t, "terms": n}))
"""

FASTOBO = """
import sys, time, json
import fastobo
t = time.perf_counter(); doc = fastobo.load(sys.argv[1]); n = len(doc)
print(json.dumps({"load": time.perf_counter() - t, "frames": n}))
"""

SNAPSHOT = """
import sys, time, json
import subprocess
from parentage.parse import decode, parse_ontology_text
from parentage.snapshot import Snapshot, StoredRows
repo, path = sys.argv[1], sys.argv[2]
def show(rev):
    return subprocess.run(["git", "show", f"{rev}:{path}"], cwd=repo, capture_output=True, check=True).stdout
base_bytes, head_bytes = show("main"), show("change")
t = time.perf_counter(); base = parse_ontology_text(decode(base_bytes, path), path, "b", data=base_bytes); full = time.perf_counter() - t
t = time.perf_counter(); columns, rows = base.to_bytes(); dump = time.perf_counter() - t
t = time.perf_counter()
again = Snapshot.from_json(Snapshot.unpack(columns), rows=StoredRows(rows.__getitem__, lambda: rows))
load = time.perf_counter() - t
t = time.perf_counter(); head = parse_ontology_text(decode(head_bytes, path), path, "h", again, data=head_bytes); inc = time.perf_counter() - t
# The bytes go along, as the workspace passes them (block digests are taken from them).
print(json.dumps({"full": full, "dump": dump, "load": load, "incremental": inc, "terms": len(base),
                  "stored_mb": (len(columns) + sum(len(r) for r in rows)) / 1e6}))
"""


def parentage(*args: str) -> list[str]:
    return [PY, "-m", "parentage", *args]


def ensure_repos(root: str, size: int) -> dict[int, str]:
    repos = {}
    for change in CHANGES:
        out = os.path.join(root, "repos", f"{size}-{change}")
        if not os.path.exists(os.path.join(out, ".git", "bench.json")):
            shutil.rmtree(out, ignore_errors=True)
            print(f"generating {out}", file=sys.stderr)
            generate.build(size, change, out, cache=os.path.join(root, "cache"))
        repos[change] = out
    return repos


def env_with(cache: str) -> dict[str, str]:
    env = {**os.environ, "PARENTAGE_CACHE": cache, "PARENTAGE_NO_PROGRESS": "1"}
    # Byte-code caching on, as on an installed package (pip compiles at install time).
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


class Row(NamedTuple):
    figure: str
    seconds: float | None
    peak_mb: float | None
    baseline: str
    note: str


def fmt(x: float | None, digits: int = 2) -> str:
    return "—" if x is None else f"{x:.{digits}f}"


def best(runs: list[Run]) -> Run:
    return min(runs, key=lambda r: r.wall)


def bench_size(root: str, size: int, repeat: int) -> list[Row]:
    repos = ensure_repos(root, size)
    obo = os.path.join(repos[10], "src", "compounds.obo")
    mb = os.path.getsize(obo) / 1e6
    rows: list[Row] = []
    start_up = best([measure(parentage("--version")) for _ in range(repeat)])
    rows.append(Row("`parentage --version` (interpreter start-up)", start_up.wall, start_up.peak_mb,
                    "baseline", ""))
    pronto = measure([PY, "-c", PRONTO, obo])
    fast = measure([PY, "-c", FASTOBO, obo])
    p_load = pronto.inner.get("load")
    rows.append(Row(f"pronto load of the file ({mb:.1f} MB)", p_load, pronto.peak_mb, "baseline", ""))
    rows.append(Row("fastobo load of the file", fast.inner.get("load"), fast.peak_mb, "baseline", ""))

    def vs_pronto(seconds: float | None) -> str:
        return f"{seconds / p_load:.2f}× pronto" if seconds and p_load else "—"

    snap = best([measure([PY, "-c", SNAPSHOT, repos[10], "src/compounds.obo"]) for _ in range(repeat)])
    for key, label in (("full", "snapshot build, full parse (cold)"),
                       ("dump", "snapshot to store form (columns + one row per term)"),
                       ("load", "snapshot from store form (columns; rows read when asked)"),
                       ("incremental", "head snapshot from the cached base (10-term change)")):
        value = snap.inner.get(key)
        rows.append(Row(label, value, snap.peak_mb if key == "full" else None, vs_pronto(value),
                        snap.error))

    stores = tempfile.mkdtemp(prefix="parentage-stores-", dir=root)
    try:
        # Warm templates: the store a review of the base against itself leaves behind (base
        # snapshot, structure facts, InChIKey index and model), one per distinct base; the
        # change's head is new to it, as in CI with a cache keyed on the base commit.
        templates: dict[str, str] = {}
        warm_up = None
        for change in CHANGES:
            tree = subprocess.run(["git", "rev-parse", "main^{tree}"], cwd=repos[change],
                                  capture_output=True, text=True, check=True).stdout.strip()
            if tree not in templates:
                templates[tree] = os.path.join(stores, f"warm-{len(templates)}")
                run = measure(parentage("review", "--format", "json", "main..main"),
                              cwd=repos[change], env=env_with(templates[tree]))
                warm_up = warm_up or run
            templates[str(change)] = templates[tree]
        for command in ("diff", "check"):
            cold = measure(parentage(command, "main..change"), cwd=repos[10],
                           env=env_with(os.path.join(stores, f"cold-{command}")))
            rows.append(Row(f"`parentage {command}`, 10-term change, cold", cold.wall, cold.peak_mb,
                            vs_pronto(cold.wall), cold.error))
        cold = measure(parentage("review", "--format", "json", "main..change"), cwd=repos[10],
                       env=env_with(os.path.join(stores, "cold-review")))
        rows.append(Row("`parentage review`, 10-term change, cold (training included)", cold.wall,
                        cold.peak_mb, vs_pronto(cold.wall), cold.error))
        if warm_up is not None:
            rows.append(Row("`parentage review` of the base against itself, cold (warms the store)",
                            warm_up.wall, warm_up.peak_mb, vs_pronto(warm_up.wall), warm_up.error))
        warm_walls: dict[int, float] = {}
        for command in ("diff", "check", "review"):
            for change in CHANGES if command == "review" else (10,):
                runs = []
                for n in range(repeat):
                    copy = os.path.join(stores, f"w-{command}-{change}-{n}")
                    template = templates[str(change)]
                    if os.path.exists(template):
                        shutil.copytree(template, copy)
                        # Flush the copy: otherwise the store's first sync (SQLite's checkpoint
                        # when the command closes it) writes out the whole freshly copied
                        # file, ~0.2 s at 50k that a curator's own store never costs.
                        os.sync()
                    argv = parentage(command, *(("--format", "json") if command == "review" else ()),
                                     "main..change")
                    runs.append(measure(argv, cwd=repos[change], env=env_with(copy)))
                run = best(runs)
                walls = [r.wall for r in runs]
                spread = f"median {statistics.median(walls):.2f} s of {len(walls)}"
                note = run.error or spread
                if command == "review" and not run.error:
                    warm_walls[change] = run.wall
                rows.append(Row(f"`parentage {command}`, {change}-term change, warm", run.wall,
                                max(r.peak_mb for r in runs), vs_pronto(run.wall), note))
        if 10 in warm_walls and 1000 in warm_walls:
            rows.append(Row("warm review: 1,000-term change / 10-term change", None, None,
                            f"{warm_walls[1000] / warm_walls[10]:.1f}×", "target ≤ 20×"))
    finally:
        shutil.rmtree(stores, ignore_errors=True)
    return rows


def main(argv: Sequence[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    p.add_argument("--sizes", default="10k,50k,200k", help="comma-separated sizes (default 10k,50k,200k)")
    p.add_argument("--repeat", type=int, default=3, help="runs of each warm figure; the fastest is shown")
    p.add_argument("--root", default="/tmp/parentage-bench", help="benchmark data folder")
    args = p.parse_args(argv)
    print(f"machine: {os.cpu_count()} CPU(s); python {sys.version.split()[0]}; "
          f"load average {os.getloadavg()[0]:.1f} at start\n")
    for text in args.sizes.split(","):
        size = generate.parse_size(text)
        rows = bench_size(args.root, size, args.repeat)
        print(f"### {text.strip()} structured terms\n")
        print("| figure | seconds | peak MB | against baseline | note |")
        print("|---|---:|---:|---|---|")
        for row in rows:
            print(f"| {row.figure} | {fmt(row.seconds)} | {fmt(row.peak_mb, 0)} | {row.baseline} | "
                  f"{row.note.replace('|', '/')} |")
        print(flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
