"""`parentage model train|evaluate` in a real git repository of functional-group members.

Members are RDKit's shipped molecules filed by RDKit's shipped functional-group SMARTS
(tests/fgbench.py); markdown is checked with markdown-it-py (CommonMark + GFM tables).
"""
from __future__ import annotations

import json
import os
import sys

import pytest
from markdown_it import MarkdownIt

sys.path.insert(0, os.path.dirname(__file__))
import fgbench

from parentage.commands import model as command
from parentage.errors import ParentageError
from parentage.revisions import build_repository

CONFIG = b"model: {size: 4096, folds: 3, min_members: 20}\n"


@pytest.fixture(scope="module")
def repo(tmp_path_factory: pytest.TempPathFactory) -> str:
    dest = str(tmp_path_factory.mktemp("repo"))
    mols = fgbench.split(seed=0)[0][:500]
    files = {"fgb.obo": fgbench.obo_text(mols).encode(), ".parentage.yaml": CONFIG}
    build_repository(dest, [("main", "functional groups", files)])
    return dest


def test_train_then_evaluate_json(repo: str, tmp_path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("PARENTAGE_CACHE", str(tmp_path / "cache"))
    out = tmp_path / "train.md"
    assert command.main(["train", "-C", repo, "--output", str(out)]) == 0
    tokens = MarkdownIt("commonmark").enable("table").parse(out.read_text())
    assert any(t.type == "table_open" for t in tokens)
    rows = [t for t in tokens if t.type == "tr_open"]
    result = tmp_path / "eval.json"
    assert command.main(["evaluate", "-C", repo, "--format", "json", "--output", str(result)]) == 0
    data = json.loads(result.read_text())
    assert len(rows) == len(data["classes"]) + 1  # a header row, one row per class
    amine = {g.key: g.id for g in fgbench.groups()}["Amine"]
    figures = {c["class"]: c for c in data["classes"]}
    # The nesting root of RDKit's hierarchy groups with hundreds of members among these 500.
    assert figures[amine]["support"] >= 20 and 0.0 <= figures[amine]["f1"] <= 1.0
    assert all(0.0 <= c["abstention"] <= 1.0 for c in data["classes"])
    assert data["summary"]["folds"] == 3
    assert len(data["revision"]) == 40  # the commit it was trained on


def test_unknown_revision_is_one_line_error(repo: str, tmp_path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("PARENTAGE_CACHE", str(tmp_path / "cache"))
    with pytest.raises(ParentageError, match="unknown revision"):
        command.main(["train", "-C", repo, "no-such-rev"])
