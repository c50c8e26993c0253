"""Revision selectors: ranges, merge bases, the index, the work tree, first commits, shallow clones."""
from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

from parentage.cli import main
from parentage.revisions import EMPTY, INDEX, WORKTREE, Repository

if TYPE_CHECKING:
    from conftest import GitRepo


def obo(*terms: tuple[str, str]) -> str:
    """An OBO document of (id, name) terms, each after the first filed under the first."""
    out = ["format-version: 1.4", ""]
    for n, (tid, name) in enumerate(terms):
        out += ["[Term]", f"id: {tid}", f"name: {name}"]
        if n:
            out.append(f"is_a: {terms[0][0]}")
        out.append("")
    return "\n".join(out)


ROOT = ("QQX:0000001", "chemical entity")
ACID = ("QQX:0000002", "carboxylic acid")
AMINE = ("QQX:0000003", "amine")
ESTER = ("QQX:0000004", "ester")


def diff_json(repo: GitRepo, capsys: pytest.CaptureFixture[str], *args: str) -> dict[str, Any]:
    assert main(["diff", "-C", str(repo.path), "--format", "json", *args]) == 0
    return dict(json.loads(capsys.readouterr().out))


def changes(data: dict[str, Any]) -> dict[str, list[str]]:
    return {k: v for k, v in data["changes"].items() if v}


@pytest.fixture
def history(git_repo: GitRepo) -> GitRepo:
    git_repo.write("qqx.obo", obo(ROOT, ACID))
    git_repo.commit("first")
    git_repo.write("qqx.obo", obo(ROOT, ACID, AMINE))
    git_repo.commit("add amine")
    git_repo.write("qqx.obo", obo(ROOT, ("QQX:0000002", "carboxylic acids"), AMINE))
    git_repo.commit("rename acid")
    return git_repo


def test_two_dot_range(history: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    data = diff_json(history, capsys, "HEAD~2..HEAD")
    assert changes(data) == {"added": ["QQX:0000003"], "edited": ["QQX:0000002"]}
    assert (data["base"], data["head"]) == ("HEAD~2", "HEAD")
    assert changes(diff_json(history, capsys, "HEAD~1..HEAD")) == {"edited": ["QQX:0000002"]}
    # An empty right side means HEAD, as in git.
    assert changes(diff_json(history, capsys, "HEAD~2..")) == changes(
        diff_json(history, capsys, "HEAD~2..HEAD"))


@pytest.fixture
def branched(git_repo: GitRepo) -> GitRepo:
    git_repo.write("qqx.obo", obo(ROOT, ACID))
    git_repo.commit("first")
    git_repo.git("checkout", "-q", "-b", "feature")
    git_repo.write("qqx.obo", obo(ROOT, ACID, ESTER))
    git_repo.commit("add ester on the branch")
    git_repo.git("checkout", "-q", "main")
    git_repo.write("qqx.obo", obo(ROOT, ACID, AMINE))
    git_repo.commit("add amine on main after the branch point")
    return git_repo


def test_three_dot_range_starts_at_the_merge_base(branched: GitRepo,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    data = diff_json(branched, capsys, "main...feature")
    # The amine was added on main after the branch point: not part of the branch's change.
    assert changes(data) == {"added": ["QQX:0000004"]}
    # Two dots compare the tips, so main's amine shows as removed.
    assert changes(diff_json(branched, capsys, "main..feature")) == {
        "added": ["QQX:0000004"], "removed": ["QQX:0000003"]}


def test_merge_base_is_the_one_git_computes(branched: GitRepo) -> None:
    base, head = Repository(str(branched.path)).resolve("main...feature")
    # Reference: git merge-base itself.
    assert base.commit == branched.git("merge-base", "main", "feature").strip()
    assert head.commit == branched.rev("feature")


def test_single_revision_compares_with_the_work_tree(history: GitRepo,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    history.write("qqx.obo", obo(ROOT, ("QQX:0000002", "carboxylic acids"), AMINE, ESTER))
    data = diff_json(history, capsys, "HEAD~1")
    assert changes(data) == {"added": ["QQX:0000004"], "edited": ["QQX:0000002"]}
    assert (data["base"], data["head"]) == ("HEAD~1", "work tree")


def test_worktree_option_and_default(history: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    history.write("qqx.obo", obo(ROOT, ("QQX:0000002", "carboxylic acids"), AMINE, ESTER))
    assert changes(diff_json(history, capsys, "--worktree")) == {"added": ["QQX:0000004"]}
    assert changes(diff_json(history, capsys)) == {"added": ["QQX:0000004"]}
    assert changes(diff_json(history, capsys, "--staged")) == {}


def test_staged_reads_the_index_named_by_git_index_file(history: GitRepo, tmp_path: Path,
                                                        monkeypatch: pytest.MonkeyPatch,
                                                        capsys: pytest.CaptureFixture[str]) -> None:
    # What `git commit -a` does: a temporary index built from HEAD plus the work tree edits,
    # exported to hooks as GIT_INDEX_FILE; the repository's own index stays untouched.
    current = obo(ROOT, ("QQX:0000002", "carboxylic acids"), AMINE)
    history.write("qqx.obo", current + "[Term]\nid: QQX:0000004\nname: ester\nis_a: QQX:0000001\n")
    index = str(tmp_path / "commit-all.index")
    history.git("read-tree", "HEAD", env={"GIT_INDEX_FILE": index})
    history.git("add", "qqx.obo", env={"GIT_INDEX_FILE": index})
    # A later work tree edit that is in neither index.
    history.write("qqx.obo", obo(ROOT, ("QQX:0000002", "carboxylic acids"), AMINE, ESTER,
                                 ("QQX:0000005", "ketone")))
    assert changes(diff_json(history, capsys, "--staged")) == {}
    monkeypatch.setenv("GIT_INDEX_FILE", index)
    assert changes(diff_json(history, capsys, "--staged")) == {"added": ["QQX:0000004"]}


def test_blobs_agree_with_git(history: GitRepo, tmp_path: Path) -> None:
    history.write("qqx.obo", obo(ROOT, ESTER))
    history.git("add", "qqx.obo")
    history.write("qqx.obo", obo(ROOT, AMINE))
    repo = Repository(str(history.path))
    base, head = repo.resolve("HEAD~1..HEAD")
    # References: git rev-parse REV:PATH, git ls-files -s, git hash-object.
    assert repo.read(base, "qqx.obo").blob == history.rev("HEAD~1:qqx.obo")
    assert repo.read(head, "qqx.obo").blob == history.rev("HEAD:qqx.obo")
    staged = repo.read(repo.resolve(None, staged=True)[1], "qqx.obo")
    assert staged.blob == history.git("ls-files", "-s", "qqx.obo").split()[1]
    worktree = repo.read(repo.resolve(None, worktree=True)[1], "qqx.obo")
    assert worktree.blob == history.git("hash-object", "qqx.obo").strip()
    assert worktree.data == (history.path / "qqx.obo").read_bytes()
    assert len({staged.blob, worktree.blob, repo.read(head, "qqx.obo").blob}) == 3


def test_first_commit_staged_is_all_added(git_repo: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("qqx.obo", obo(ROOT, ACID))
    git_repo.git("add", "qqx.obo")
    assert git_repo.git("rev-parse", "--verify", "--quiet", "HEAD", check=False) == ""
    data = diff_json(git_repo, capsys, "--staged")
    assert changes(data) == {"added": ["QQX:0000001", "QQX:0000002"]}
    base, head = Repository(str(git_repo.path)).resolve(None, staged=True)
    assert (base.kind, head.kind) == (EMPTY, INDEX)


def test_first_commit_worktree(git_repo: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("qqx.obo", obo(ROOT))
    git_repo.git("add", "qqx.obo")
    assert changes(diff_json(git_repo, capsys)) == {"added": ["QQX:0000001"]}
    assert Repository(str(git_repo.path)).resolve(None)[1].kind == WORKTREE


@pytest.fixture
def shallow(history: GitRepo, tmp_path: Path) -> GitRepo:
    clone = history.clone(tmp_path / "clone", "--depth", "1")
    assert clone.git("rev-parse", "--is-shallow-repository").strip() == "true"
    return clone


def _one_line_usage_error(args: list[str], capsys: pytest.CaptureFixture[str]) -> str:
    assert main(args) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.splitlines()
    assert len(lines) == 1, captured.err
    assert "Traceback" not in captured.err
    return lines[0]


def test_shallow_clone_without_the_base(shallow: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    line = _one_line_usage_error(["diff", "-C", str(shallow.path), "HEAD~1..HEAD"], capsys)
    assert "HEAD~1" in line
    assert "shallow" in line and "fetch" in line


def test_shallow_clone_without_a_merge_base(history: GitRepo, tmp_path: Path,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    history.git("checkout", "-q", "-b", "feature", "HEAD~1")
    history.write("qqx.obo", obo(ROOT, ACID, AMINE, ESTER))
    history.commit("add ester")
    clone = history.clone(tmp_path / "clone", "--depth", "1", "--no-single-branch")
    # Reference: git itself finds no merge base in this clone.
    assert clone.git("merge-base", "origin/main", "origin/feature", check=False) == ""
    line = _one_line_usage_error(["diff", "-C", str(clone.path), "origin/main...origin/feature"], capsys)
    assert "merge base" in line and "shallow" in line and "fetch" in line


def test_shallow_clone_still_diffs_the_work_tree(shallow: GitRepo,
                                                 capsys: pytest.CaptureFixture[str]) -> None:
    shallow.write("qqx.obo", obo(ROOT, ("QQX:0000002", "carboxylic acids"), AMINE, ESTER))
    assert changes(diff_json(shallow, capsys)) == {"added": ["QQX:0000004"]}


def test_renamed_file_is_not_added_plus_removed(history: GitRepo,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    (history.path / "src").mkdir()
    history.git("mv", "qqx.obo", "src/compounds.obo")
    history.commit("move the ontology")
    # Reference: git itself sees a pure rename.
    assert history.git("diff", "--name-status", "-M", "HEAD~1", "HEAD").split() == [
        "R100", "qqx.obo", "src/compounds.obo"]
    data = diff_json(history, capsys, "HEAD~1..HEAD")
    assert changes(data) == {}
    assert data["moved"]["QQX:0000003"] == ["qqx.obo", "src/compounds.obo"]
    assert data["ontologies"] == ["qqx.obo", "src/compounds.obo"]


def test_renamed_and_edited_file(history: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    history.git("mv", "qqx.obo", "compounds.obo")
    history.write("compounds.obo", obo(ROOT, ("QQX:0000002", "carboxylic acids"), AMINE, ESTER))
    history.commit("move and extend")
    assert changes(diff_json(history, capsys, "HEAD~1..HEAD")) == {"added": ["QQX:0000004"]}


def test_file_absent_at_one_side(history: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    history.write("extra.obo", obo(("QQX:0000010", "polymer"), ("QQX:0000011", "polyester")))
    history.commit("a second ontology")
    assert changes(diff_json(history, capsys, "HEAD~1..HEAD")) == {
        "added": ["QQX:0000010", "QQX:0000011"]}
    assert changes(diff_json(history, capsys, "HEAD~1..HEAD", "extra.obo")) == {
        "added": ["QQX:0000010", "QQX:0000011"]}
    history.git("rm", "-q", "extra.obo")
    history.commit("drop it again")
    assert changes(diff_json(history, capsys, "HEAD~1..HEAD")) == {
        "removed": ["QQX:0000010", "QQX:0000011"]}
    assert changes(diff_json(history, capsys, "HEAD~1..HEAD", "extra.obo")) == {
        "removed": ["QQX:0000010", "QQX:0000011"]}
