"""Shared fixtures: real git repositories in temporary folders."""
from __future__ import annotations

import os
import subprocess
from collections.abc import Callable, Iterator, Mapping
from pathlib import Path

import pytest

# Variables that git sets for hooks (or a user sets) and that would make a test repository
# read someone else's index or object store.
_GIT_LEAKS = ("GIT_DIR", "GIT_WORK_TREE", "GIT_INDEX_FILE", "GIT_OBJECT_DIRECTORY",
              "GIT_ALTERNATE_OBJECT_DIRECTORIES", "GIT_CEILING_DIRECTORIES", "GIT_PREFIX")


class GitRepo:
    """A work tree made with `git init`; every command runs in it."""

    def __init__(self, path: Path) -> None:
        self.path = path

    def git(self, *args: str, env: Mapping[str, str] | None = None, check: bool = True) -> str:
        full_env = {**os.environ, **(env or {})}
        done = subprocess.run(["git", *args], cwd=self.path, env=full_env, check=False,
                              capture_output=True, text=True)
        if check and done.returncode != 0:
            raise AssertionError(f"git {' '.join(args)} failed ({done.returncode}): {done.stderr}")
        return done.stdout

    def write(self, rel: str, text: str | bytes) -> Path:
        target = self.path / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(text, bytes):
            target.write_bytes(text)
        else:
            # newline="" keeps the text's own line endings on every platform.
            with open(target, "w", encoding="utf-8", newline="") as handle:
                handle.write(text)
        return target

    def commit(self, message: str = "change", *paths: str) -> str:
        """Stage `paths` (everything when none is given), commit, return the new sha."""
        if paths:
            self.git("add", "--", *paths)
        else:
            self.git("add", "-A")
        self.git("commit", "-q", "--allow-empty", "-m", message)
        return self.rev("HEAD")

    def rev(self, name: str = "HEAD") -> str:
        return self.git("rev-parse", "--verify", name).strip()

    def clone(self, dest: Path, *options: str) -> GitRepo:
        """`git clone OPTIONS file://self dest` (a file:// URL, so `--depth` is honoured)."""
        self.git("clone", "-q", *options, f"file://{self.path}", str(dest))
        return _configure(GitRepo(dest))


def _configure(repo: GitRepo) -> GitRepo:
    repo.git("config", "user.name", "Test Curator")
    repo.git("config", "user.email", "curator@example.org")
    repo.git("config", "commit.gpgsign", "false")
    return repo


def init_repo(path: Path, branch: str = "main") -> GitRepo:
    path.mkdir(parents=True, exist_ok=True)
    repo = GitRepo(path)
    repo.git("init", "-q", "-b", branch)
    return _configure(repo)


@pytest.fixture(autouse=True)
def _isolated_git(monkeypatch: pytest.MonkeyPatch, tmp_path_factory: pytest.TempPathFactory) -> None:
    """No global or system git config, no inherited repository variables, no cache override."""
    empty = tmp_path_factory.getbasetemp() / "empty.gitconfig"
    empty.touch()
    monkeypatch.setenv("GIT_CONFIG_GLOBAL", str(empty))
    monkeypatch.setenv("GIT_CONFIG_NOSYSTEM", "1")
    for name in _GIT_LEAKS + ("PARENTAGE_CACHE",):
        monkeypatch.delenv(name, raising=False)


@pytest.fixture
def make_git_repo(tmp_path: Path) -> Callable[[str], GitRepo]:
    """`make_git_repo("name")`: a fresh repository in `tmp_path/name`."""
    def make(name: str = "repo") -> GitRepo:
        return init_repo(tmp_path / name)

    return make


@pytest.fixture
def git_repo(make_git_repo: Callable[[str], GitRepo]) -> Iterator[GitRepo]:
    yield make_git_repo("repo")
