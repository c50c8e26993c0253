"""The shipped scenarios end to end: build each repository, review its change, and compare
every finding with the scenario's own list of planted problems (`expected.yaml`).

The list was written beside the fixtures before these checks: each planted problem must be
found exactly once, with its kind, term, classes and status; nothing outside the planted and
tolerated findings may appear; the clean edits produce no finding at all.
"""
from __future__ import annotations

import json
import subprocess
from pathlib import Path
from typing import Any

import pytest
import yaml

from parentage.cli import main
from parentage.commands.demo import BRANCH, build
from parentage.config import load_config

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures"
SCENARIOS = [p.name for p in sorted(FIXTURES.iterdir()) if (p / "expected.yaml").exists()]


def expected(scenario: str) -> dict[str, Any]:
    return yaml.safe_load((FIXTURES / scenario / "expected.yaml").read_text())


@pytest.fixture(scope="module", params=SCENARIOS)
def scenario(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> tuple[str, Path]:
    path = Path(build(str(tmp_path_factory.mktemp(request.param) / "repo"), request.param))
    return request.param, path


def run_json(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, dict[str, Any]]:
    code = main(list(argv))
    return code, json.loads(capsys.readouterr().out)


@pytest.fixture(scope="module")
def reviewed(scenario: tuple[str, Path]) -> tuple[str, Path, int, dict[str, Any]]:
    name, path = scenario
    out = path.parent / "review.json"
    code = main(["review", "-C", str(path), f"main..{BRANCH}", "--format", "json", "--output", str(out)])
    return name, path, code, json.loads(out.read_text())


def test_every_planted_problem_is_found_once(reviewed: tuple[str, Path, int, dict[str, Any]]) -> None:
    name, _, code, review = reviewed
    want = expected(name)
    by_key: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for finding in review["findings"]:
        by_key.setdefault((finding["term"], finding["kind"]), []).append(finding)
    for problem in want["problems"]:
        found = by_key.get((problem["term"], problem["kind"]), [])
        matching = [f for f in found if f["status"] == problem["status"]
                    and (not problem.get("classes")
                         or set(f["classes"]) <= set(problem["classes"]) | {problem["term"]})]
        assert len(matching) == 1, (problem, found)
    assert code == 1  # planted blocking problems are new


def test_nothing_else_is_reported(reviewed: tuple[str, Path, int, dict[str, Any]]) -> None:
    name, _, _, review = reviewed
    want = expected(name)
    allowed = {(p["term"], p["kind"]) for p in want["problems"]}
    tolerated = {(p["term"], p["kind"]): set(p.get("classes", ())) for p in want.get("tolerated", ())}
    planted_classes = {(p["term"], p["kind"]): set(p.get("classes", ())) for p in want["problems"]}
    for finding in review["findings"]:
        key = (finding["term"], finding["kind"])
        if key in tolerated and set(finding["classes"]) <= tolerated[key]:
            continue
        assert key in allowed, finding
        if planted_classes[key]:
            assert set(finding["classes"]) <= planted_classes[key] | {finding["term"]}, finding


def test_clean_edits_give_no_finding(reviewed: tuple[str, Path, int, dict[str, Any]]) -> None:
    name, _, _, review = reviewed
    clean = set(expected(name).get("clean_edits", ()))
    assert clean, "the scenario lists its clean edits"
    assert [f for f in review["findings"] if f["term"] in clean] == []


def test_only_new_findings_block(reviewed: tuple[str, Path, int, dict[str, Any]]) -> None:
    name, path, _, review = reviewed
    fail_on = set(load_config(None, str(path)).fail_on)
    legacy = {(p["term"], p["kind"]) for p in expected(name)["problems"] if p["status"] == "persisting"}
    assert all(k in fail_on for _, k in legacy)  # it would block, were it new
    new_blocking = [f for f in review["findings"] if f["status"] == "new" and f["kind"] in fail_on]
    assert review["blocking"] == len(new_blocking)


def test_diff_lists_every_planted_edit(scenario: tuple[str, Path], capsys: pytest.CaptureFixture[str]) -> None:
    name, path = scenario
    want = expected(name)
    code, diff = run_json(capsys, "diff", "-C", str(path), f"main..{BRANCH}", "--format", "json")
    assert code == 0
    for kind in ("added", "removed", "obsoleted"):
        assert sorted(diff["changes"][kind]) == sorted(want.get(kind, ())), kind
    edited = {tid for tid in diff["terms"] if diff["terms"][tid]["fields"]}
    assert edited == set(want["edits"])
    for tid, fields in want["edits"].items():
        assert sorted(diff["terms"][tid]["fields"]) == sorted(fields), tid


def test_check_on_the_staged_change(scenario: tuple[str, Path], capsys: pytest.CaptureFixture[str]) -> None:
    """`parentage check` on the change, staged: each structure and hierarchy problem once."""
    name, path = scenario
    want = expected(name)
    structural = {"structure-unreadable", "annotation-mismatch", "duplicate-structure",
                  "hierarchy-cycle", "parent-dangling", "parent-obsolete", "parent-redundant",
                  "disjoint-violated"}
    work = path.parent / "staged"
    subprocess.run(["git", "clone", "-q", str(path), str(work)], check=True)
    subprocess.run(["git", "checkout", "-q", "main"], cwd=work, check=True)
    subprocess.run(["git", "checkout", "-q", f"origin/{BRANCH}", "--", "."], cwd=work, check=True)
    code = main(["check", "-C", str(work), "--format", "json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 1
    found = [(f["term"], f["kind"]) for f in out["findings"] if f["status"] == "new"]
    planted = [(p["term"], p["kind"]) for p in want["problems"]
               if p["kind"] in structural and p["status"] == "new"]
    for key in planted:
        assert found.count(key) == 1, key
    for finding in out["findings"]:
        assert finding["line"] > 0 and finding["path"], finding
    # On the base alone nothing is new.
    subprocess.run(["git", "checkout", "-q", "main", "--", "."], cwd=work, check=True)
    assert main(["check", "-C", str(work)]) == 0
    capsys.readouterr()


def test_fixing_a_problem_shows_it_resolved(scenario: tuple[str, Path],
                                            capsys: pytest.CaptureFixture[str]) -> None:
    name, path = scenario
    want = expected(name)
    # A planted structure problem on a term the change edited: restoring its base stanza fixes it.
    fixable = [p for p in want["problems"] if p["status"] == "new" and p["term"] in want["edits"]
               and p["kind"] in ("structure-unreadable", "annotation-mismatch")]
    if not fixable:
        pytest.skip(f"{name} plants no structure problem on an edited term")
    problem = fixable[0]
    work = path.parent / "follow-up"
    subprocess.run(["git", "clone", "-q", "-b", BRANCH, str(path), str(work)], check=True)
    # The follow-up commit restores the base version of the broken term's stanza.
    ontology = want["ontology"]
    base_text = subprocess.run(["git", "show", f"origin/main:{ontology}"], cwd=work, check=True,
                               capture_output=True, text=True).stdout
    head_text = (work / ontology).read_text()

    def stanza(text: str, tid: str) -> str:
        for chunk in text.split("\n\n"):
            if f"\nid: {tid}\n" in f"\n{chunk}\n":
                return chunk
        raise AssertionError(tid)

    (work / ontology).write_text(head_text.replace(stanza(head_text, problem["term"]),
                                                   stanza(base_text, problem["term"])))
    subprocess.run(["git", "-c", "user.name=t", "-c", "user.email=t@example.invalid", "commit",
                    "-qam", "restore the structure"], cwd=work, check=True)
    main(["review", "-C", str(work), "HEAD~1..HEAD", "--format", "json", "--no-model"])
    review = json.loads(capsys.readouterr().out)
    statuses = [f["status"] for f in review["findings"]
                if f["term"] == problem["term"] and f["kind"] == problem["kind"]]
    assert statuses == ["resolved"]
