"""Commit-time integrations: the pre-commit manifest, the plain git hooks, `parentage install-hooks`.

The manifest is checked by the real pre-commit framework (`pre-commit validate-manifest`,
`pre-commit try-repo`, hooks installed with `pre-commit install`), the plain hooks by git
itself running them on `git commit` in real repositories.
"""
from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING

import pytest
import yaml

from parentage import hooks
from parentage.commands import install_hooks

if TYPE_CHECKING:
    from conftest import GitRepo

ROOT = Path(__file__).resolve().parents[1]
MANIFEST = ROOT / ".pre-commit-hooks.yaml"
HOOK_IDS = ("parentage-check", "parentage-review", "parentage-review-push")

BASE = """\
format-version: 1.4
ontology: qqx

[Term]
id: QQX:0000001
name: chemical entity

[Term]
id: QQX:0000002
name: alcohol
is_a: QQX:0000001

[Term]
id: QQX:0000011
name: ethanol
is_a: QQX:0000002
property_value: smiles "CCO" xsd:string
"""
# An unreadable SMILES (unclosed ring and branch): a `structure-unreadable` finding, blocking
# by default.
BAD_TERM = """
[Term]
id: QQX:0000012
name: cyclohexanol
is_a: QQX:0000002
property_value: smiles "C1CC(" xsd:string
"""
GOOD_TERM = BAD_TERM.replace('"C1CC("', '"OC1CCCCC1"')


def _clean_env(**extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("GIT_", "PRE_COMMIT"))}
    env.update(GIT_CONFIG_GLOBAL=os.environ.get("GIT_CONFIG_GLOBAL", os.devnull),
               GIT_CONFIG_NOSYSTEM="1", **extra)
    return env


def _run(argv: list[str], cwd: Path, env: Mapping[str, str]) -> subprocess.CompletedProcess[str]:
    return subprocess.run(argv, cwd=cwd, env=dict(env), capture_output=True, text=True, check=False,
                          timeout=300)


def _ontology_repo(make_git_repo: Callable[[str], GitRepo], name: str = "onto") -> GitRepo:
    repo = make_git_repo(name)
    repo.write("src/compounds.obo", BASE)
    repo.commit("base", "src/compounds.obo")
    return repo


# -- the manifest ------------------------------------------------------------------------------

def test_manifest_passes_pre_commit_validate_manifest() -> None:
    # Source: the pre-commit framework's own manifest schema (`pre-commit validate-manifest`).
    done = _run([sys.executable, "-m", "pre_commit", "validate-manifest", str(MANIFEST)], ROOT, _clean_env())
    assert done.returncode == 0, done.stdout + done.stderr


def test_manifest_validation_can_fail(tmp_path: Path) -> None:
    # The same validator rejects a manifest whose hook lacks an entry: the check above has teeth.
    broken = [{k: v for k, v in h.items() if k != "entry"} for h in yaml.safe_load(MANIFEST.read_text())]
    path = tmp_path / ".pre-commit-hooks.yaml"
    path.write_text(yaml.safe_dump(broken))
    done = _run([sys.executable, "-m", "pre_commit", "validate-manifest", str(path)], tmp_path, _clean_env())
    assert done.returncode != 0


def test_manifest_hooks() -> None:
    manifest = {h["id"]: h for h in yaml.safe_load(MANIFEST.read_text())}
    assert tuple(manifest) == HOOK_IDS
    for hook in manifest.values():
        assert hook["language"] == "python"
        assert hook["types"] == ["text"]
        assert hook["pass_filenames"] is False
        pattern = re.compile(hook["files"])
        assert pattern.search("src/compounds.obo") and pattern.search("graphs/compounds.json")
        assert not pattern.search("README.md") and not pattern.search("compounds.obo.bak")
    assert manifest["parentage-review-push"]["stages"] == ["pre-push"]
    assert "stages" not in manifest["parentage-check"]
    assert manifest["parentage-review"]["entry"] == "parentage review --staged"


def test_every_hook_id_is_documented() -> None:
    texts = [(ROOT / "actions" / "README.md").read_text(encoding="utf-8")]
    if (ROOT / "README.md").exists():
        texts.append((ROOT / "README.md").read_text(encoding="utf-8"))
    for text in texts:
        for hook_id in HOOK_IDS:
            assert hook_id in text
    example = yaml.safe_load((ROOT / "actions" / "examples" / "pre-commit-config.yaml").read_text())
    assert {h["id"] for r in example["repos"] for h in r["hooks"]} == set(HOOK_IDS)


def test_example_pre_commit_configs_are_valid(tmp_path: Path) -> None:
    # Source: the pre-commit framework's config schema (`pre-commit validate-config`), on the
    # example file and on the snippets in the READMEs.
    paths = [ROOT / "actions" / "examples" / "pre-commit-config.yaml"]
    text = "".join((ROOT / name).read_text(encoding="utf-8") for name in ("actions/README.md", "README.md"))
    for n, snippet in enumerate(s for s in re.findall(r"```yaml\n(.*?)```", text, re.DOTALL) if "repos:" in s):
        paths.append(tmp_path / f"snippet-{n}.yaml")
        paths[-1].write_text(snippet)
    assert len(paths) == 3
    done = _run([sys.executable, "-m", "pre_commit", "validate-config", *map(str, paths)], ROOT, _clean_env())
    assert done.returncode == 0, done.stdout + done.stderr


# -- the real framework ------------------------------------------------------------------------

@pytest.fixture(scope="session")
def hook_repo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """This project's working tree, committed to a fresh repository (pre-commit reads commits)."""
    if not (ROOT / ".git").exists():
        pytest.skip("needs the project's git checkout")
    env = _clean_env()
    listed = subprocess.run(["git", "ls-files", "-z", "-co", "--exclude-standard"], cwd=ROOT, env=env,
                            capture_output=True, check=True).stdout.decode()
    dest = tmp_path_factory.mktemp("hook-repo")
    for rel in filter(None, listed.split("\0")):
        source = ROOT / rel
        if source.is_file():
            (dest / rel).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(source, dest / rel)
    for argv in (["git", "init", "-q", "-b", "main"], ["git", "add", "-A"],
                 ["git", "-c", "user.name=Test", "-c", "user.email=test@example.org",
                  "-c", "commit.gpgsign=false", "commit", "-q", "-m", "snapshot"]):
        subprocess.run(argv, cwd=dest, env=env, capture_output=True, check=True)
    return dest


@pytest.fixture(scope="session")
def framework_env(tmp_path_factory: pytest.TempPathFactory) -> dict[str, str]:
    """Environment for pre-commit that installs this package without downloading anything.

    pre-commit builds a fresh virtualenv and pip-installs the hook repository into it: that is
    the install under test (console scripts, package data). Downloading rdkit, scipy and the
    rest into every such environment took 2 min 50 s here, so the third-party packages come
    from this interpreter's site-packages through PYTHONPATH instead (without any copy of
    parentage itself), and the build backend is the setuptools wheel bundled with virtualenv,
    unpacked beside them (build isolation off, no index): about 15 s per environment.
    """
    import virtualenv

    site = Path(sysconfig.get_paths()["purelib"])
    deps = tmp_path_factory.mktemp("deps")
    skip = ("parentage", "__editable__", "_parentage", "setuptools", "pkg_resources", "_distutils_hack")
    for entry in site.iterdir():
        if not entry.name.lower().startswith(skip) and entry.suffix != ".pth":
            (deps / entry.name).symlink_to(entry)
    embedded = Path(virtualenv.__file__).parent / "seed" / "wheels" / "embed"
    setuptools_wheel = max(embedded.glob("setuptools-*.whl"), default=None)
    if setuptools_wheel is None:
        pytest.skip("virtualenv bundles no setuptools wheel to build the hook environment offline")
    with zipfile.ZipFile(setuptools_wheel) as archive:
        archive.extractall(deps)
    env = _clean_env(PYTHONPATH=str(deps), PIP_NO_DEPS="1", PIP_NO_INDEX="1",
                     # pip reads PIP_NO_BUILD_ISOLATION=0 as --no-build-isolation.
                     PIP_NO_BUILD_ISOLATION="0",
                     PRE_COMMIT_HOME=str(tmp_path_factory.mktemp("pre-commit-home")))
    env["PATH"] = os.pathsep.join([os.path.dirname(sys.executable), env.get("PATH", "")])
    return env


def _try_repo(hook_repo: Path, repo: GitRepo, env: Mapping[str, str], hook_id: str,
              *files: str) -> subprocess.CompletedProcess[str]:
    return _run([sys.executable, "-m", "pre_commit", "try-repo", str(hook_repo), hook_id,
                 "--files", *files], repo.path, env)


def test_try_repo_check_blocks_a_bad_structure(hook_repo: Path, framework_env: dict[str, str],
                                               make_git_repo: Callable[[str], GitRepo]) -> None:
    repo = _ontology_repo(make_git_repo)
    repo.write("src/compounds.obo", BASE + BAD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _try_repo(hook_repo, repo, framework_env, "parentage-check", "src/compounds.obo")
    assert done.returncode == 1, done.stdout + done.stderr
    assert "parentage structure check" in done.stdout and "Failed" in done.stdout
    assert "QQX:0000012 structure-unreadable" in done.stdout


def test_try_repo_check_passes_a_clean_change(hook_repo: Path, framework_env: dict[str, str],
                                              make_git_repo: Callable[[str], GitRepo]) -> None:
    repo = _ontology_repo(make_git_repo)
    repo.write("src/compounds.obo", BASE + GOOD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _try_repo(hook_repo, repo, framework_env, "parentage-check", "src/compounds.obo")
    assert done.returncode == 0, done.stdout + done.stderr
    assert re.search(r"parentage structure check\.+Passed", done.stdout)


def test_framework_hooks_on_commit_and_push(hook_repo: Path, framework_env: dict[str, str],
                                            make_git_repo: Callable[[str], GitRepo],
                                            tmp_path: Path) -> None:
    """All three hooks installed with `pre-commit install`, run by git on commit and push."""
    sha = subprocess.run(["git", "rev-parse", "HEAD"], cwd=hook_repo, capture_output=True, text=True,
                         check=True).stdout.strip()
    repo = _ontology_repo(make_git_repo)
    config = {"repos": [{"repo": str(hook_repo), "rev": sha, "hooks": [
        {"id": "parentage-check"},
        {"id": "parentage-review", "args": ["--no-model"]},
        # verbose: pre-commit shows a passing hook's output only then.
        {"id": "parentage-review-push", "args": ["--no-model"], "verbose": True}]}]}
    repo.write(".pre-commit-config.yaml", yaml.safe_dump(config))
    repo.commit("use parentage hooks", ".pre-commit-config.yaml")
    remote = tmp_path / "remote.git"
    subprocess.run(["git", "init", "-q", "--bare", str(remote)], check=True, env=framework_env)
    repo.git("remote", "add", "origin", str(remote))
    env = framework_env

    def _out(done: subprocess.CompletedProcess[str]) -> str:
        return done.stdout + done.stderr  # git sends a commit hook's standard output to stderr
    installed = _run([sys.executable, "-m", "pre_commit", "install", "-t", "pre-commit", "-t", "pre-push"],
                     repo.path, env)
    assert installed.returncode == 0, installed.stderr

    # A first push carries the root commit: pre-commit gives no range and the hook says so.
    pushed = _run(["git", "push", "-q", "origin", "main"], repo.path, env)
    assert pushed.returncode == 0, pushed.stdout + pushed.stderr
    assert "nothing to review" in pushed.stdout + pushed.stderr

    # A commit staging a bad structure is stopped by both commit-time hooks.
    repo.write("src/compounds.obo", BASE + BAD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _run(["git", "commit", "-m", "add cyclohexanol"], repo.path, env)
    assert done.returncode != 0
    assert re.search(r"parentage structure check\.+Failed", _out(done)), _out(done)
    assert re.search(r"parentage review of the staged change\.+Failed", _out(done)), _out(done)
    assert repo.git("rev-list", "--count", "HEAD").strip() == "2"

    # The same commit made without the hooks is stopped at push time by the pre-push review.
    repo.git("commit", "-q", "--no-verify", "-m", "add cyclohexanol")
    bad = repo.rev()
    done = _run(["git", "push", "origin", "main"], repo.path, env)
    assert done.returncode != 0
    assert re.search(r"parentage review of the pushed commits\.+Failed", _out(done)), _out(done)
    assert "structure-unreadable" in _out(done)
    assert repo.git("ls-remote", str(remote), "main").split()[0] != bad

    # Fixed: the commit goes through, and so does the push of both commits.
    repo.write("src/compounds.obo", BASE + GOOD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _run(["git", "commit", "-m", "fix the cyclohexanol structure"], repo.path, env)
    assert done.returncode == 0, done.stdout + done.stderr
    assert re.search(r"parentage structure check\.+Passed", _out(done))
    done = _run(["git", "push", "origin", "main"], repo.path, env)
    assert done.returncode == 0, done.stdout + done.stderr
    assert re.search(r"parentage review of the pushed commits\.+Passed", _out(done)), _out(done)
    assert repo.git("ls-remote", str(remote), "main").split()[0] == repo.rev()

    # The environment pre-commit built holds the plain hooks as package data, as pip installs them.
    home = Path(env["PRE_COMMIT_HOME"])
    for hook in install_hooks.HOOKS:
        (shipped,) = home.glob(f"repo*/py_env-*/lib/python*/site-packages/parentage/_hooks/{hook}")
        assert shipped.read_bytes() == (ROOT / "hooks" / hook).read_bytes()


# -- the plain git hooks -----------------------------------------------------------------------

@pytest.fixture
def tool_path(tmp_path: Path) -> str:
    """PATH with this interpreter's scripts and every console script pyproject.toml declares,
    written as pip writes them (an editable install made earlier may lack the newer ones)."""
    bin_dir = tmp_path / "bin"
    bin_dir.mkdir()
    # tomllib is Python 3.11+; the section is simple `name = "module:function"` lines.
    section = (ROOT / "pyproject.toml").read_text().split("[project.scripts]\n", 1)[1].split("\n[", 1)[0]
    scripts = dict(re.findall(r'^([\w.-]+)\s*=\s*"([\w.]+:\w+)"', section, re.MULTILINE))
    assert "parentage-commit-summary" in scripts
    for name, target in scripts.items():
        module, function = target.split(":")
        script = bin_dir / name
        script.write_text(f"#!{sys.executable}\nimport sys\nfrom {module} import {function}\n"
                          f"sys.exit({function}())\n")
        script.chmod(0o755)
    return os.pathsep.join([str(bin_dir), os.path.dirname(sys.executable), os.environ["PATH"]])


def _install(repo: GitRepo, *args: str) -> tuple[int, str, str]:
    done = _run([sys.executable, "-m", "parentage", "install-hooks", *args], repo.path, _clean_env())
    return done.returncode, done.stdout, done.stderr


def _commit(repo: GitRepo, path: str, *args: str) -> subprocess.CompletedProcess[str]:
    return _run(["git", "commit", *args], repo.path, _clean_env(PATH=path))


def test_plain_pre_commit_hook_blocks_and_passes(make_git_repo: Callable[[str], GitRepo],
                                                 tool_path: str) -> None:
    repo = _ontology_repo(make_git_repo)
    code, out, _ = _install(repo)
    assert code == 0 and "pre-commit: installed" in out
    repo.write("src/compounds.obo", BASE + BAD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _commit(repo, tool_path, "-m", "add cyclohexanol")
    assert done.returncode == 1
    # git runs a hook with its standard output sent to standard error.
    assert "src/compounds.obo:" in done.stderr and "QQX:0000012 structure-unreadable" in done.stderr
    assert "commit stopped by the new blocking finding" in done.stderr
    assert repo.git("rev-list", "--count", "HEAD").strip() == "1"

    repo.write("src/compounds.obo", BASE + GOOD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _commit(repo, tool_path, "-m", "add cyclohexanol")
    assert done.returncode == 0, done.stdout + done.stderr
    assert repo.git("rev-list", "--count", "HEAD").strip() == "2"


def test_a_legacy_problem_never_blocks_an_unrelated_commit(make_git_repo: Callable[[str], GitRepo],
                                                         tool_path: str) -> None:
    # The base already holds a broken structure (committed before the hook was installed).
    repo = make_git_repo("legacy")
    repo.write("src/compounds.obo", BASE + BAD_TERM)
    repo.commit("legacy", "src/compounds.obo")
    _install(repo, "pre-commit")
    # An unrelated clean edit to the same file: a new synonym on ethanol.
    repo.write("src/compounds.obo", (BASE + BAD_TERM).replace(
        "name: ethanol\n", 'name: ethanol\nsynonym: "ethyl alcohol" EXACT []\n'))
    repo.git("add", "src/compounds.obo")
    done = _commit(repo, tool_path, "-m", "synonym")
    assert done.returncode == 0, done.stdout + done.stderr
    assert repo.git("rev-list", "--count", "HEAD").strip() == "2"
    # The whole-file check still sees the legacy problem when asked.
    full = _run([sys.executable, "-m", "parentage", "check", "--all", "HEAD"], repo.path, _clean_env())
    assert full.returncode == 1 and "QQX:0000012 structure-unreadable" in full.stdout


def test_plain_pre_commit_hook_ignores_other_files(make_git_repo: Callable[[str], GitRepo],
                                                   tmp_path: Path) -> None:
    repo = _ontology_repo(make_git_repo)
    _install(repo, "pre-commit")
    repo.write("notes.txt", "curation notes\n")
    repo.git("add", "notes.txt")
    # Without parentage on PATH: the hook does not even need it for a commit of other files.
    done = _commit(repo, "/usr/bin:/bin", "-m", "notes")
    assert done.returncode == 0, done.stderr


def test_plain_pre_commit_hook_without_parentage(make_git_repo: Callable[[str], GitRepo]) -> None:
    repo = _ontology_repo(make_git_repo)
    _install(repo, "pre-commit")
    repo.write("src/compounds.obo", BASE + GOOD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _commit(repo, "/usr/bin:/bin", "-m", "add cyclohexanol")
    assert done.returncode == 1
    assert "'parentage' is not installed or not on PATH" in done.stderr
    assert "git commit --no-verify" in done.stderr
    assert repo.git("rev-list", "--count", "HEAD").strip() == "1"


def _message(repo: GitRepo) -> str:
    return repo.git("log", "-1", "--format=%B")


def test_prepare_commit_msg_comment_lines(make_git_repo: Callable[[str], GitRepo], tool_path: str,
                                          tmp_path: Path) -> None:
    repo = _ontology_repo(make_git_repo)
    _install(repo, "prepare-commit-msg")
    repo.write("src/compounds.obo", BASE + GOOD_TERM)
    repo.git("add", "src/compounds.obo")
    # An "editor" that keeps a copy of what git shows and writes the subject line.
    seen = tmp_path / "seen.txt"
    editor = tmp_path / "editor.sh"
    editor.write_text(f'#!/bin/sh\ncp "$1" "{seen}"\nprintf "add cyclohexanol\\n" | cat - "$1" > "$1.new"\n'
                      'mv "$1.new" "$1"\n')
    editor.chmod(0o755)
    done = _run(["git", "commit"], repo.path, _clean_env(PATH=tool_path, GIT_EDITOR=str(editor)))
    assert done.returncode == 0, done.stdout + done.stderr
    shown = seen.read_text()
    assert "# parentage: ontology terms 1 added, 0 removed, 0 obsoleted, 0 edited\n" in shown
    assert "# parentage: 0 findings from parentage check, 0 blocking\n" in shown
    # git drops comment lines from the message itself.
    assert _message(repo).strip() == "add cyclohexanol"


def test_prepare_commit_msg_trailers_and_untouched_sources(make_git_repo: Callable[[str], GitRepo],
                                                          tool_path: str) -> None:
    repo = _ontology_repo(make_git_repo)
    _install(repo, "prepare-commit-msg")
    repo.git("config", "parentage.commitSummary", "trailer")
    repo.write("src/compounds.obo", BASE.replace("name: ethanol", "name: ethyl alcohol") + BAD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _commit(repo, tool_path, "--no-verify", "-m", "rename ethanol, add cyclohexanol")
    assert done.returncode == 0, done.stderr
    trailers = repo.git("log", "-1", "--format=%(trailers)")
    assert "Ontology-Changes: 1 added, 0 removed, 0 obsoleted, 1 edited" in trailers
    assert "Ontology-Findings: 1 finding from parentage check, 1 blocking" in trailers

    # --amend reuses the message (source "commit"): it is left as it was, though the amended
    # commit now edits one more term.
    before = _message(repo)
    repo.write("src/compounds.obo", BASE.replace("name: ethanol", "name: ethyl alcohol")
               .replace("name: alcohol", "name: alcohols") + BAD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _commit(repo, tool_path, "--no-verify", "--amend", "--no-edit")
    assert done.returncode == 0, done.stderr
    assert _message(repo) == before

    # A merge message is git's own: no summary.
    repo.git("checkout", "-q", "-b", "side", "HEAD~1")
    repo.write("src/other.obo", BASE.replace("ontology: qqx", "ontology: qqy"))
    repo.git("add", "src/other.obo")
    _commit(repo, tool_path, "--no-verify", "-m", "another ontology")
    repo.git("checkout", "-q", "main")
    done = _run(["git", "merge", "--no-ff", "--no-edit", "side"], repo.path, _clean_env(PATH=tool_path))
    assert done.returncode == 0, done.stdout + done.stderr
    assert "Ontology-" not in _message(repo)


def test_prepare_commit_msg_never_blocks(make_git_repo: Callable[[str], GitRepo]) -> None:
    repo = _ontology_repo(make_git_repo)
    _install(repo, "prepare-commit-msg")
    repo.write("src/compounds.obo", BASE + GOOD_TERM)
    repo.git("add", "src/compounds.obo")
    done = _commit(repo, "/usr/bin:/bin", "-m", "add cyclohexanol")
    assert done.returncode == 0, done.stderr
    assert "no summary added" in done.stderr
    assert _message(repo).strip() == "add cyclohexanol"


# -- parentage install-hooks -------------------------------------------------------------------

def test_install_hooks_respects_core_hooks_path(git_repo: GitRepo) -> None:
    git_repo.git("config", "core.hooksPath", "tools/git-hooks")
    code, out, _ = _install(git_repo)
    assert code == 0, out
    for hook in install_hooks.HOOKS:
        installed = git_repo.path / "tools" / "git-hooks" / hook
        assert installed.read_bytes() == (ROOT / "hooks" / hook).read_bytes()
        assert os.access(installed, os.X_OK)
        assert not (git_repo.path / ".git" / "hooks" / hook).exists()
    code, out, _ = _install(git_repo)
    assert code == 0 and out.count("already installed") == 2


def test_install_hooks_keeps_a_different_hook(git_repo: GitRepo) -> None:
    theirs = "#!/bin/sh\necho their own hook\n"
    target = git_repo.path / ".git" / "hooks" / "pre-commit"
    target.write_text(theirs)
    target.chmod(0o755)
    code, out, err = _install(git_repo)
    assert code == 2
    assert "a different hook is already there" in err and "--force" in err
    assert target.read_text() == theirs
    assert "prepare-commit-msg: installed" in out  # the other hook still went in

    code, out, _ = _install(git_repo, "--force", "pre-commit")
    assert code == 0
    assert target.read_bytes() == (ROOT / "hooks" / "pre-commit").read_bytes()
    assert (target.parent / "pre-commit.before-parentage").read_text() == theirs

    # A second --force over another different hook keeps the first backup as well.
    target.write_text(theirs + "# edited\n")
    code, _, _ = _install(git_repo, "--force", "pre-commit")
    assert code == 0
    assert (target.parent / "pre-commit.before-parentage").read_text() == theirs
    assert (target.parent / "pre-commit.before-parentage.1").read_text() == theirs + "# edited\n"


def test_install_hooks_rejects_an_unknown_hook(git_repo: GitRepo) -> None:
    code, _, err = _install(git_repo, "post-merge")
    assert code == 2 and "unknown hook 'post-merge'" in err


# -- the helpers behind the hooks --------------------------------------------------------------

@pytest.mark.parametrize(("environ", "expected"), [
    pytest.param({"PRE_COMMIT_FROM_REF": "a1", "PRE_COMMIT_TO_REF": "b2"}, "a1..b2", id="current names"),
    pytest.param({"PRE_COMMIT_ORIGIN": "a1", "PRE_COMMIT_SOURCE": "b2"}, "a1..b2", id="names before 2.13"),
    pytest.param({"PRE_COMMIT_TO_REF": "b2"}, None, id="no start"),
    pytest.param({}, None, id="whole history pushed"),
])
def test_push_range(environ: dict[str, str], expected: str | None) -> None:
    assert hooks.push_range(environ) == expected


@pytest.mark.parametrize(("message", "configured", "expected"), [
    pytest.param("subject\n", "", "#", id="default"),
    pytest.param("subject\n", ";", ";", id="configured"),
    pytest.param("#1 fixed\n", "auto", ";", id="auto avoids a used character"),
    pytest.param("subject\n", "auto", "#", id="auto"),
])
def test_comment_char(message: str, configured: str, expected: str) -> None:
    assert hooks.comment_char(message, configured) == expected


@pytest.mark.parametrize(("message", "expected"), [
    pytest.param("subject\n", "subject\n\n# a\n# b\n", id="after the message"),
    pytest.param("", "\n# a\n# b\n", id="empty message keeps a first line free"),
    pytest.param("subject\n# ------------------------ >8 ------------------------\ndiff\n",
                 "subject\n\n# a\n# b\n# ------------------------ >8 ------------------------\ndiff\n",
                 id="above the scissors line"),
])
def test_with_comment(message: str, expected: str) -> None:
    assert hooks.with_comment(message, ["a", "b"], "#") == expected
