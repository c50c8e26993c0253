"""Bad input through the CLI: one line on stderr, exit 2, never a traceback."""
from __future__ import annotations

import os
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from parentage import __version__, parse
from parentage.cli import COMMANDS, main

if TYPE_CHECKING:
    from conftest import GitRepo

GOOD = "format-version: 1.4\n\n[Term]\nid: QQX:0000001\nname: entity\n"
BAD = GOOD + "\n[Term]\nid: QQX:0000002\nname: acid\nis_a QQX:0000001\n"
BAD_LINE = BAD.splitlines().index("is_a QQX:0000001") + 1


@pytest.fixture
def repo(git_repo: GitRepo) -> GitRepo:
    git_repo.write("qqx.obo", GOOD)
    git_repo.commit("first")
    return git_repo


Case = Callable[["GitRepo", Path], list[str]]


def _malformed(repo: GitRepo, tmp: Path) -> list[str]:
    repo.write("qqx.obo", BAD)
    return ["diff", "-C", str(repo.path)]


def _bad_config(repo: GitRepo, tmp: Path) -> list[str]:
    repo.write(".parentage.yaml", "ontologies: [qqx.obo]\nshape: round\n")
    return ["diff", "-C", str(repo.path)]


def _not_utf8(repo: GitRepo, tmp: Path) -> list[str]:
    repo.write("qqx.obo", GOOD.encode("utf-8") + b"comment: caf\xe9\n")
    return ["diff", "-C", str(repo.path)]


def _no_ontology(repo: GitRepo, tmp: Path) -> list[str]:
    repo.git("rm", "-q", "qqx.obo")
    repo.write("README.md", "no ontology here\n")
    repo.commit("drop the ontology")
    return ["diff", "-C", str(repo.path), "HEAD"]


def _plain_folder(repo: GitRepo, tmp: Path) -> list[str]:
    folder = tmp / "plain"
    folder.mkdir()
    return ["diff", "-C", str(folder)]


CASES = [
    pytest.param(lambda r, t: ["diff", "-C", str(r.path), "nosuch..HEAD"], "unknown revision 'nosuch'",
                 id="bad-revision"),
    pytest.param(lambda r, t: ["diff", "-C", str(r.path), "HEAD...nosuch"], "unknown revision 'nosuch'",
                 id="bad-revision-three-dots"),
    pytest.param(lambda r, t: ["diff", "-C", str(r.path), "HEAD..HEAD", "nope.obo"], "nope.obo",
                 id="missing-path"),
    pytest.param(_malformed, f"qqx.obo:{BAD_LINE}: malformed OBO", id="malformed-obo"),
    pytest.param(_bad_config, ".parentage.yaml:2: shape: unknown key", id="bad-config"),
    pytest.param(_not_utf8, "qqx.obo: not UTF-8", id="not-utf8"),
    pytest.param(_no_ontology, "no ontology files found", id="no-ontology"),
    pytest.param(_plain_folder, "not inside a git repository", id="not-a-git-repo"),
    pytest.param(lambda r, t: ["diff", "-C", str(t / "absent")], "not inside a git repository",
                 id="no-such-folder"),
    pytest.param(lambda r, t: ["frobnicate"], "unknown subcommand 'frobnicate'", id="unknown-subcommand"),
    pytest.param(lambda r, t: ["diff", "-C", str(r.path), "--bogus"], "--bogus", id="unknown-option"),
    pytest.param(lambda r, t: ["diff", "-C", str(r.path), "--format", "xml"], "xml", id="bad-format"),
    pytest.param(lambda r, t: ["diff", "-C", str(r.path), "HEAD", "--staged"], "give one of",
                 id="two-selectors"),
]


@pytest.mark.parametrize(("make", "expected"), CASES)
def test_bad_input_is_one_line_and_exit_2(repo: GitRepo, tmp_path: Path, make: Case, expected: str,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    args = make(repo, tmp_path)
    assert main(args) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("parentage: ")
    assert expected in lines[0]
    assert "Traceback" not in captured.err


def test_usage_and_version(capsys: pytest.CaptureFixture[str]) -> None:
    assert main([]) == 0
    out = capsys.readouterr().out
    assert all(name in out for name in COMMANDS)
    assert main(["--version"]) == 0
    assert capsys.readouterr().out == f"parentage {__version__}\n"


@pytest.mark.parametrize("args", [["diff", "--staged"], ["nonsense"]], ids=["not-a-repo", "unknown"])
def test_console_script_errors_without_traceback(tmp_path: Path, args: list[str]) -> None:
    script = Path(sys.executable).with_name("parentage")
    done = subprocess.run([str(script), *args], check=False, cwd=tmp_path, capture_output=True, text=True,
                          env=dict(os.environ), timeout=60)
    assert done.returncode == 2
    assert done.stdout == ""
    assert len(done.stderr.splitlines()) == 1 and done.stderr.startswith("parentage: ")
    assert "Traceback" not in done.stderr


# "compared": the head built from the cached base by comparing the two texts.
@pytest.mark.parametrize("build", ["full", "compared"])
def test_malformed_obo_names_the_original_line(git_repo: GitRepo, build: str,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    if build == "full":  # a first commit: nothing to build on
        git_repo.write("qqx.obo", BAD)
        git_repo.git("add", "qqx.obo")
        args = ["diff", "-C", str(git_repo.path), "--staged"]
    else:  # the committed file parses; the work tree adds a bad stanza further down
        git_repo.write("qqx.obo", GOOD)
        git_repo.commit()
        git_repo.write("qqx.obo", BAD)
        args = ["diff", "-C", str(git_repo.path)]
    for key in parse.PARSE_CALLS:
        parse.PARSE_CALLS[key] = 0
    assert main(args) == 2
    assert parse.PARSE_CALLS[build] == 1
    err = capsys.readouterr().err
    assert err.splitlines() == [
        f"parentage: qqx.obo:{BAD_LINE}: malformed OBO: expected EOI, Comment, or TermClause"]


def test_comment_line_inside_a_stanza_does_not_crash(git_repo: GitRepo) -> None:
    git_repo.write("qqx.obo", GOOD + "! a curator's note on its own line\n")
    git_repo.git("add", "qqx.obo")
    script = Path(sys.executable).with_name("parentage")
    done = subprocess.run([str(script), "diff", "--staged"], check=False, cwd=git_repo.path,
                          capture_output=True, text=True, env=dict(os.environ), timeout=60)
    assert done.returncode in (0, 2), done.stderr
    assert "Traceback" not in done.stderr and "panicked" not in done.stderr
    assert len(done.stderr.splitlines()) <= 1
