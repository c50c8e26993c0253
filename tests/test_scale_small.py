"""The benchmark generator at a tiny size: a real repository that `check` and `diff` read.

The large sizes (10k, 50k, 200k terms) are built and measured by tests/benchmarks/report.py;
only this small one runs with the tests.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).parent
sys.path.insert(0, str(HERE / "benchmarks"))

import generate  # (tests/benchmarks is not a package, hence the path above)

from parentage.cli import main


@pytest.fixture(scope="module")
def bench_repo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, object]]:
    root = tmp_path_factory.mktemp("bench")
    out = root / "repo"
    summary = generate.build(300, 10, str(out), cache=str(root / "cache"), jobs=1)
    return out, summary


def test_shape(bench_repo: tuple[Path, dict[str, object]]) -> None:
    out, summary = bench_repo
    text = (out / "src" / "compounds.obo").read_text(encoding="utf-8")
    smiles = [line for line in text.splitlines() if line.startswith("property_value: smiles ")]
    assert len(smiles) == 300
    assert len(set(smiles)) == 300  # distinct structures
    assert summary["tally"] and sum(summary["tally"].values()) == 10  # type: ignore[attr-defined]
    branches = subprocess.run(["git", "branch", "--format=%(refname:short)"], cwd=out,
                              capture_output=True, text=True, check=True).stdout.split()
    assert sorted(branches) == ["change", "main"]


def test_diff_lists_the_change(bench_repo: tuple[Path, dict[str, object]],
                               capsys: pytest.CaptureFixture[str]) -> None:
    out, summary = bench_repo
    assert main(["diff", "-C", str(out), "--format", "json", "main..change"]) == 0
    changes = json.loads(capsys.readouterr().out)
    tally = summary["tally"]
    assert isinstance(tally, dict)
    listed = {k: len(v) for k, v in changes["changes"].items()}
    assert listed.get("added", 0) == tally.get("add", 0)
    assert listed.get("added", 0) + listed.get("edited", 0) == 10


def test_check_finds_nothing_in_correct_annotations(bench_repo: tuple[Path, dict[str, object]],
                                                    capsys: pytest.CaptureFixture[str]) -> None:
    # Every annotation was written from RDKit's own values, and every structure is distinct.
    out, _ = bench_repo
    os.environ.pop("PARENTAGE_CACHE", None)
    assert main(["check", "-C", str(out), "--format", "json", "--all", "main..change"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["findings"] == []
    assert report["checked"] > 300
