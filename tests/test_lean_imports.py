"""The commit path starts lean: heavy libraries are imported only where they are used.

Each command runs in a fresh interpreter (a wrapper that calls `parentage.cli.main` and then
writes `sorted(sys.modules)` to a file), inside a real git repository with a real store.
RDKit costs about a second to import and scikit-learn about as much (DESIGN.md, measured
facts); `diff` never needs either, and `check` needs RDKit only when a structure changed.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import GitRepo  # the shared fixtures: real git repositories

HEAVY = ("rdkit", "sklearn", "scipy", "pronto", "git")  # git: gitpython (the CLI is used)

WRAPPER = """
import json, sys
from parentage.cli import main
code = main(sys.argv[2:])
with open(sys.argv[1], "w") as handle:
    json.dump({"code": code, "modules": sorted(sys.modules)}, handle)
"""

BASE = """format-version: 1.2
ontology: lean

[Term]
id: LEAN:0000001
name: chemical entity

[Term]
id: LEAN:0000002
name: carboxylic acid
is_a: LEAN:0000001

[Term]
id: LEAN:0000003
name: acetic acid
is_a: LEAN:0000002
property_value: smiles "CC(=O)O" xsd:string
property_value: inchikey "QTBSBXVTEAMEQO-UHFFFAOYSA-N" xsd:string

[Term]
id: LEAN:0000004
name: benzoic acid
is_a: LEAN:0000002
property_value: smiles "OC(=O)c1ccccc1" xsd:string
property_value: inchikey "WPYMKLBDIGXBTP-UHFFFAOYSA-N" xsd:string
"""


def run(repo: GitRepo, tmp_path: Path, *args: str) -> tuple[int, set[str]]:
    out = tmp_path / f"modules-{len(list(tmp_path.iterdir()))}.json"
    done = subprocess.run([sys.executable, "-c", WRAPPER, str(out), *args], cwd=repo.path,
                          env=os.environ.copy(), capture_output=True, text=True, check=False)
    assert out.exists(), done.stderr
    data = json.loads(out.read_text())
    return data["code"], {m.split(".")[0] for m in data["modules"]}


@pytest.fixture
def repo(git_repo: GitRepo) -> GitRepo:
    git_repo.write("src/lean.obo", BASE)
    git_repo.commit("base")
    # A change without structure edits: a renamed term and a new synonym.
    git_repo.write("src/lean.obo", BASE.replace("name: acetic acid",
                                                'name: ethanoic acid\nsynonym: "vinegar acid" RELATED []'))
    git_repo.commit("rename")
    return git_repo


def heavy(modules: set[str]) -> list[str]:
    return sorted(m for m in HEAVY if m in modules)


@pytest.mark.parametrize("warm", [False, True], ids=["cold store", "warm store"])
def test_diff_imports_nothing_heavy(repo: GitRepo, tmp_path: Path, warm: bool) -> None:
    if warm:
        run(repo, tmp_path, "diff", "HEAD~1..HEAD")
    code, modules = run(repo, tmp_path, "diff", "HEAD~1..HEAD")
    assert code == 0
    assert heavy(modules) == []
    assert "fastobo" in modules or warm  # the test sees real imports: a cold store parses


@pytest.mark.parametrize("warm", [False, True], ids=["cold store", "warm store"])
def test_check_without_structure_edits_imports_no_rdkit(repo: GitRepo, tmp_path: Path,
                                                        warm: bool) -> None:
    if warm:
        run(repo, tmp_path, "check", "HEAD~1..HEAD")
    code, modules = run(repo, tmp_path, "check", "HEAD~1..HEAD")
    assert code == 0
    assert heavy(modules) == []


def test_check_with_a_structure_edit_does_use_rdkit(git_repo: GitRepo, tmp_path: Path) -> None:
    # The other side of the coin: the wrapper does see RDKit when a structure changed.
    git_repo.write("src/lean.obo", BASE)
    git_repo.commit("base")
    git_repo.write("src/lean.obo", BASE.replace('"CC(=O)O"', '"CCC(=O)O"'))
    git_repo.commit("new structure")
    _code, modules = run(git_repo, tmp_path, "check", "HEAD~1..HEAD")
    assert "rdkit" in modules
    assert "sklearn" not in modules


PROGRESS = """
import json, sys
from parentage.progress import progress
items = list(progress(range(5000), desc="work", enabled={enabled}))
print(json.dumps({{"same": items == list(range(5000)), "tqdm": "tqdm" in sys.modules}}))
"""


@pytest.mark.parametrize(("enabled", "bar"), [("None", False), ("True", True), ("False", False)],
                         ids=["piped stderr", "forced on", "forced off"])
def test_progress_bar_only_when_wanted(enabled: str, bar: bool) -> None:
    env = {k: v for k, v in os.environ.items() if k not in ("CI", "PARENTAGE_NO_PROGRESS")}
    done = subprocess.run([sys.executable, "-c", PROGRESS.format(enabled=enabled)], env=env,
                          capture_output=True, text=True, check=True)
    result = json.loads(done.stdout)
    assert result == {"same": True, "tqdm": bar}
    assert ("work" in done.stderr) is bar  # a bar draws on stderr, and only then


def test_progress_bar_on_a_terminal() -> None:
    import pty

    env = {k: v for k, v in os.environ.items() if k not in ("CI", "PARENTAGE_NO_PROGRESS")}
    leader, follower = pty.openpty()
    try:
        done = subprocess.run([sys.executable, "-c", PROGRESS.format(enabled="None")], env=env,
                              stdout=subprocess.PIPE, stderr=follower, text=True, check=True)
    finally:
        os.close(follower)
        os.close(leader)
    assert json.loads(done.stdout) == {"same": True, "tqdm": True}
