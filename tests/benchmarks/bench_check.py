"""`parentage check` at scale: the whole-file check and a 10-term change, cold and warm.

    python tests/benchmarks/bench_check.py [--size 50k] [--root /tmp/parentage-bench]

Prints wall seconds of fresh processes beside the interpreter's start-up in the same run
(`parentage --version`), so "work beyond start-up" is the difference. The warm figure starts
from the store a whole-file check of the base left behind, with the head (and the structures
the change added or edited) new to it, as on a curator's next commit. The generator's
repositories are built under ROOT when missing (see generate.py).
"""
from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)

import generate
from report import PY, ensure_repos, measure


def main() -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--size", default="50k")
    p.add_argument("--root", default="/tmp/parentage-bench")
    args = p.parse_args()
    size = generate.parse_size(args.size)
    repo = ensure_repos(args.root, size)[10]
    store = tempfile.mkdtemp(prefix="parentage-check-store-")
    env = dict(os.environ, PARENTAGE_CACHE=store)
    # Byte-code caching on, as on an installed package (pip compiles at install time).
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    try:
        start = min(measure([PY, "-m", "parentage", "--version"]).wall for _ in range(3))
        rows = [("interpreter start-up (`parentage --version`)", start)]
        # The whole file, from an empty store: every structure read by RDKit.
        cold_all = measure([PY, "-m", "parentage", "check", "--all", "main..main"], repo, env)
        rows.append(("`check --all`, whole file, empty store", cold_all.wall))
        warm_all = measure([PY, "-m", "parentage", "check", "--all", "main..main"], repo, env)
        rows.append(("`check --all`, whole file, warm store", warm_all.wall))
        # What that left behind (the base's snapshot, structure facts and InChIKey index) is
        # the warm store of a curator's next commit: each run below gets a fresh copy, so the
        # head and its new structures are new to it, as they are on a real commit.
        template = store + "-template"
        shutil.copytree(store, template)
        shutil.rmtree(store)
        os.makedirs(store)
        cold = measure([PY, "-m", "parentage", "check", "main..change"], repo, env)
        rows.append(("`check`, 10-term change, empty store", cold.wall))
        walls = []
        for _ in range(3):
            shutil.rmtree(store)
            shutil.copytree(template, store)
            os.sync()  # see report.py: a fresh copy's first sync would write it all out
            walls.append(measure([PY, "-m", "parentage", "check", "main..change"], repo, env).wall)
        rows.append(("`check`, 10-term change, warm store, head new (best of 3)", min(walls)))
        again = min(measure([PY, "-m", "parentage", "check", "main..change"], repo, env).wall
                    for _ in range(3))
        rows.append(("`check`, 10-term change, run again (head stored too; best of 3)", again))
        shutil.rmtree(template, ignore_errors=True)
    finally:
        shutil.rmtree(store, ignore_errors=True)
    print(f"### `parentage check`, {size} structured terms\n")
    print("| figure | seconds | beyond start-up |\n|---|---:|---:|")
    for name, seconds in rows:
        print(f"| {name} | {seconds:.2f} | {seconds - start:.2f} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
