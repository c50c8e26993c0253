"""The pull-request action: its metadata, the example workflows, and its steps run locally.

Metadata and workflows are checked against check-jsonschema's builtin SchemaStore schemas
(`vendor.github-actions`, `vendor.github-workflows`). The steps run under a simulated runner:
GITHUB_* variables, an event payload file, the summary and output files, and a stand-in `gh`
on PATH that keeps the pull request's comments in a JSON file and records every call.
"""
from __future__ import annotations

import importlib.util
import json
import os
import re
import subprocess
import sys
from collections.abc import Callable, Mapping
from pathlib import Path
from types import ModuleType
from typing import TYPE_CHECKING, Any

import pytest
import yaml

from parentage.report.markdown import MARKER

if TYPE_CHECKING:
    from conftest import GitRepo

ROOT = Path(__file__).resolve().parents[1]
ACTION_DIR = ROOT / "actions" / "review"
ACTION = ACTION_DIR / "action.yml"
WORKFLOWS = [ROOT / "actions" / "examples" / "review.yml", ROOT / "actions" / "examples" / "release-notes.yml"]
REPOSITORY = "curators/compounds"

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
BAD_TERM = """
[Term]
id: QQX:0000012
name: cyclohexanol
is_a: QQX:0000002
property_value: smiles "C1CC(" xsd:string
"""

FAKE_GH = '''\
"""Stand-in for the gh CLI: the `gh api` calls the action makes, against a JSON file of comments."""
import json, os, sys

args = sys.argv[1:]
with open(os.environ["FAKE_GH_LOG"], "a") as log:
    log.write(json.dumps(args) + "\\n")
if os.environ.get("FAKE_GH_FORBID"):
    sys.stderr.write("gh: Resource not accessible by integration (HTTP 403)\\n")
    sys.exit(1)
state_file = os.environ["FAKE_GH_STATE"]
comments = json.load(open(state_file)) if os.path.exists(state_file) else []
method = args[args.index("--method") + 1] if "--method" in args else "GET"
path = [a for a in args[1:] if a.startswith("repos/")][0]
if method == "GET":
    # gh api --paginate prints one JSON array per page, back to back: two per page here.
    for at in range(0, max(len(comments), 1), 2):
        print(json.dumps(comments[at:at + 2]))
    sys.exit(0)
body = json.load(open(args[args.index("--input") + 1]))["body"]
if method == "POST":
    comments.append({"id": 1000 + len(comments), "body": body, "user": {"login": "github-actions[bot]"}})
elif method == "PATCH":
    wanted = int(path.rsplit("/", 1)[1])
    [c for c in comments if c["id"] == wanted][0]["body"] = body
json.dump(comments, open(state_file, "w"))
print("{}")
'''


def _load_script() -> ModuleType:
    spec = importlib.util.spec_from_file_location("run_review", ACTION_DIR / "run_review.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


run_review = _load_script()


def _check_jsonschema(schema: str, *paths: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "check_jsonschema", "--builtin-schema", schema,
                           *map(str, paths)], capture_output=True, text=True, check=False, timeout=120)


# -- metadata and workflows --------------------------------------------------------------------

def test_action_metadata_is_valid() -> None:
    # Source: SchemaStore's github-action schema, bundled with check-jsonschema.
    done = _check_jsonschema("vendor.github-actions", ACTION)
    assert done.returncode == 0, done.stdout + done.stderr


def test_action_schema_check_can_fail(tmp_path: Path) -> None:
    broken = yaml.safe_load(ACTION.read_text())
    broken["runs"] = {"using": "composite"}  # a composite action without steps
    path = tmp_path / "action.yml"
    path.write_text(yaml.safe_dump(broken))
    assert _check_jsonschema("vendor.github-actions", path).returncode != 0


def test_example_workflows_are_valid(tmp_path: Path) -> None:
    # Source: SchemaStore's github-workflow schema, bundled with check-jsonschema. The README's
    # workflow snippets are checked too.
    text = "".join((ROOT / name).read_text(encoding="utf-8") for name in ("actions/README.md", "README.md"))
    snippets = [s for s in re.findall(r"```yaml\n(.*?)```", text, re.DOTALL) if "\njobs:" in s]
    assert len(snippets) == 3
    paths = list(WORKFLOWS)
    for n, snippet in enumerate(snippets):
        paths.append(tmp_path / f"readme-{n}.yml")
        paths[-1].write_text(snippet)
    done = _check_jsonschema("vendor.github-workflows", *paths)
    assert done.returncode == 0, done.stdout + done.stderr


def test_action_installs_from_its_own_checkout_and_passes_inputs_by_env() -> None:
    action = yaml.safe_load(ACTION.read_text())
    steps = action["runs"]["steps"]
    uses = [s["uses"].split("@")[0] for s in steps if "uses" in s]
    assert uses == ["actions/setup-python", "actions/cache"]
    install = next(s for s in steps if s.get("name") == "Install parentage")
    assert install["env"]["ACTION_ROOT"] == "${{ github.action_path }}/../.."
    cache = next(s for s in steps if s.get("uses", "").startswith("actions/cache"))
    review = next(s for s in steps if s.get("id") == "review")
    assert cache["with"]["path"] == review["env"]["PARENTAGE_CACHE"]
    assert "github.event.pull_request.base.sha" in cache["with"]["key"]
    for step in steps:
        # No expression is pasted into a script: inputs and contexts reach it through env.
        assert "${{" not in step.get("run", "")
    assert set(action["outputs"]) >= {"findings", "blocking", "sarif-file"}


# -- the steps, run locally --------------------------------------------------------------------

def _expression(text: str, context: Mapping[str, str]) -> str:
    """`${{ a || b }}` in action metadata, for the names the action uses."""
    def one(match: re.Match[str]) -> str:
        for name in match.group(1).split("||"):
            value = context.get(name.strip(), "")
            if value:
                return value
        return ""
    return re.sub(r"\$\{\{\s*(.*?)\s*\}\}", one, text)


class Runner:
    """A simulated GitHub runner for the action's Review step."""

    def __init__(self, tmp: Path, repo: GitRepo, event: dict[str, Any], event_name: str = "pull_request") -> None:
        self.tmp, self.repo = tmp, repo
        self.bin = tmp / "bin"
        self.bin.mkdir(exist_ok=True)
        gh = self.bin / "gh"
        gh.write_text(f"#!{sys.executable}\n{FAKE_GH}")
        gh.chmod(0o755)
        self.log, self.state = tmp / "gh-calls.jsonl", tmp / "comments.json"
        self.event_path = tmp / "event.json"
        self.event_path.write_text(json.dumps(event))
        self.event_name = event_name
        (tmp / "runner-temp").mkdir(exist_ok=True)
        self.runs = 0

    def calls(self) -> list[list[str]]:
        if not self.log.exists():
            return []
        return [json.loads(line) for line in self.log.read_text().splitlines()]

    def comments(self) -> list[dict[str, Any]]:
        return json.loads(self.state.read_text()) if self.state.exists() else []

    def step(self, inputs: Mapping[str, str] | None = None,
             extra_env: Mapping[str, str] | None = None) -> tuple[subprocess.CompletedProcess[str], dict[str, str], str]:
        """Run the action's Review step as the runner would: its env, then its `run` script."""
        self.runs += 1
        action = yaml.safe_load(ACTION.read_text())
        context = {"runner.temp": str(self.tmp / "runner-temp"), "github.action_path": str(ACTION_DIR),
                   "github.token": "test-token"}
        for name, spec in action["inputs"].items():
            context[f"inputs.{name}"] = _expression(str(spec.get("default", "")), context)
        for name, value in (inputs or {}).items():
            context[f"inputs.{name}"] = value
        step = next(s for s in action["runs"]["steps"] if s.get("id") == "review")
        summary, output = self.tmp / f"summary-{self.runs}.md", self.tmp / f"output-{self.runs}.txt"
        summary.touch()
        output.touch()
        env = {k: v for k, v in os.environ.items() if not k.startswith(("GIT_", "GITHUB_"))}
        env.update({k: _expression(str(v), context) for k, v in step["env"].items()})
        env.update(
            VENV=sys.prefix,  # the Install step's virtual environment: this interpreter's
            GIT_CONFIG_GLOBAL=os.environ.get("GIT_CONFIG_GLOBAL", os.devnull), GIT_CONFIG_NOSYSTEM="1",
            GITHUB_ACTION_PATH=str(ACTION_DIR), GITHUB_WORKSPACE=str(self.repo.path),
            GITHUB_EVENT_NAME=self.event_name, GITHUB_EVENT_PATH=str(self.event_path),
            GITHUB_REPOSITORY=REPOSITORY, GITHUB_SERVER_URL="https://github.com",
            GITHUB_STEP_SUMMARY=str(summary), GITHUB_OUTPUT=str(output),
            RUNNER_TEMP=context["runner.temp"],
            PATH=os.pathsep.join([str(self.bin), os.environ["PATH"]]),
            FAKE_GH_LOG=str(self.log), FAKE_GH_STATE=str(self.state), **(extra_env or {}))
        done = subprocess.run(["bash", "-c", step["run"]], cwd=self.repo.path, env=env,
                              capture_output=True, text=True, check=False, timeout=300)
        outputs = dict(line.split("=", 1) for line in output.read_text().splitlines() if line)
        return done, outputs, summary.read_text()


def _pull_request(repo: GitRepo, base: str, head: str, head_repo: str = REPOSITORY) -> dict[str, Any]:
    return {"number": 7, "pull_request": {
        "number": 7,
        "base": {"sha": base, "ref": "main", "repo": {"full_name": REPOSITORY}},
        "head": {"sha": head, "ref": "add-cyclohexanol", "repo": {"full_name": head_repo}}}}


@pytest.fixture
def pr_repo(make_git_repo: Callable[[str], GitRepo]) -> tuple[GitRepo, str, str]:
    """A repository whose branch adds a term with an unreadable structure: (repo, base, head)."""
    repo = make_git_repo("onto")
    repo.write("src/compounds.obo", BASE)
    base = repo.commit("base", "src/compounds.obo")
    repo.git("checkout", "-q", "-b", "add-cyclohexanol")
    repo.write("src/compounds.obo", BASE + BAD_TERM)
    head = repo.commit("add cyclohexanol", "src/compounds.obo")
    return repo, base, head


NO_MODEL = {"model": "false"}


def test_step_comments_once_then_edits(pr_repo: tuple[GitRepo, str, str], tmp_path: Path) -> None:
    repo, base, head = pr_repo
    runner = Runner(tmp_path, repo, _pull_request(repo, base, head))
    # Comments already on the pull request: a person's, and one quoting our marker.
    runner.state.write_text(json.dumps([
        {"id": 1, "body": "Please check the ring closure.", "user": {"login": "curator"}},
        {"id": 2, "body": f"> {MARKER}\n> old review", "user": {"login": "curator"}}]))

    done, outputs, summary = runner.step({**NO_MODEL, "sarif": "true"})
    assert done.returncode == 1, done.stdout + done.stderr  # a new blocking finding fails the job
    assert "::error::parentage review: 1 new blocking finding(s)" in done.stdout
    assert summary.startswith(MARKER) and "structure-unreadable" in summary
    assert outputs["findings"] == "1" and outputs["blocking"] == "1"
    assert outputs["comment"] == "created"
    posts = [c for c in runner.calls() if "POST" in c]
    assert len(posts) == 1 and posts[0][posts[0].index("--method") + 2] == f"repos/{REPOSITORY}/issues/7/comments"
    ours = [c for c in runner.comments() if c["body"].startswith(MARKER)]
    assert len(ours) == 1 and ours[0]["body"] == summary
    sarif = json.loads(Path(outputs["sarif-file"]).read_text())
    assert sarif["version"] == "2.1.0"
    assert [r["ruleId"] for r in sarif["runs"][0]["results"]] == ["structure-unreadable"]

    done, outputs, _ = runner.step(NO_MODEL)
    assert done.returncode == 1
    assert outputs["comment"] == "updated"
    calls = runner.calls()
    assert sum("POST" in c for c in calls) == 1
    (patch,) = [c for c in calls if "PATCH" in c]
    assert patch[patch.index("--method") + 2] == f"repos/{REPOSITORY}/issues/comments/1002"
    assert len(runner.comments()) == 3  # the two earlier comments are untouched
    assert runner.comments()[1]["body"].startswith("> ")


def test_step_on_a_clean_change(make_git_repo: Callable[[str], GitRepo], tmp_path: Path) -> None:
    repo = make_git_repo("onto")
    repo.write("src/compounds.obo", BASE)
    base = repo.commit("base", "src/compounds.obo")
    repo.write("src/compounds.obo", BASE.replace("name: ethanol", "name: ethyl alcohol"))
    head = repo.commit("rename ethanol", "src/compounds.obo")
    runner = Runner(tmp_path, repo, _pull_request(repo, base, head))
    done, outputs, summary = runner.step(NO_MODEL)
    assert done.returncode == 0, done.stdout + done.stderr
    assert outputs["blocking"] == "0" and outputs["comment"] == "created"
    assert "No new finding blocks this change." in summary


def test_step_from_a_fork_writes_the_summary_and_says_why(pr_repo: tuple[GitRepo, str, str],
                                                         tmp_path: Path) -> None:
    repo, base, head = pr_repo
    runner = Runner(tmp_path, repo, _pull_request(repo, base, head, head_repo="visitor/compounds"))
    done, outputs, summary = runner.step(NO_MODEL)
    assert done.returncode == 1  # the review's verdict still decides the job
    assert runner.calls() == []  # a read-only token: gh is not even tried
    assert outputs["comment"] == "read-only"
    assert "structure-unreadable" in summary
    assert "comes from a fork (visitor/compounds)" in summary and "read-only" in summary
    assert "::notice::" in done.stdout


def test_step_with_a_token_that_may_not_comment(pr_repo: tuple[GitRepo, str, str], tmp_path: Path) -> None:
    repo, base, head = pr_repo
    runner = Runner(tmp_path, repo, _pull_request(repo, base, head))
    done, outputs, summary = runner.step({**NO_MODEL, "fail-on": "duplicate-structure"},
                                         {"FAKE_GH_FORBID": "1"})
    # fail-on no longer lists the unreadable structure: nothing blocks, and the 403 does not
    # fail the job either.
    assert done.returncode == 0, done.stdout + done.stderr
    assert outputs["comment"] == "read-only" and outputs["blocking"] == "0"
    assert len(runner.calls()) == 1
    assert "HTTP 403" in summary and "structure-unreadable" in summary


def test_step_in_a_shallow_clone_asks_for_full_history(pr_repo: tuple[GitRepo, str, str],
                                                       tmp_path: Path) -> None:
    repo, base, head = pr_repo
    shallow = repo.clone(tmp_path / "shallow", "--depth", "1", "--branch", "add-cyclohexanol")
    runner = Runner(tmp_path, shallow, _pull_request(shallow, base, head))
    done, outputs, summary = runner.step(NO_MODEL)
    assert done.returncode == 2
    assert f"the base commit {base} is not in this clone" in done.stdout
    assert "fetch-depth: 0" in summary
    assert runner.calls() == [] and outputs == {}


def test_step_reports_a_review_that_cannot_run(pr_repo: tuple[GitRepo, str, str], tmp_path: Path) -> None:
    repo, base, head = pr_repo
    runner = Runner(tmp_path, repo, _pull_request(repo, base, head))
    done, _, summary = runner.step({**NO_MODEL, "config": "missing.yaml"})
    assert done.returncode == 2
    assert "::error::parentage review could not run (bad input or usage, exit 2)" in done.stdout
    assert "missing.yaml" in summary
    assert runner.calls() == []


# -- the script's pieces -----------------------------------------------------------------------

@pytest.mark.parametrize(("text", "expected"), [
    pytest.param('[{"id": 1}][{"id": 2}]\n', [[{"id": 1}], [{"id": 2}]], id="pages back to back"),
    pytest.param('[]\n', [[]], id="no comments"),
    pytest.param('', [], id="nothing"),
])
def test_json_values(text: str, expected: list[Any]) -> None:
    assert run_review._json_values(text) == expected


@pytest.mark.parametrize(("pages", "expected"), [
    pytest.param([[{"id": 3, "body": "lgtm"}], [{"id": 4, "body": MARKER + "\n## review"}]], 4, id="second page"),
    pytest.param([[{"id": 5, "body": "> " + MARKER}]], None, id="a quote is not ours"),
    pytest.param([[{"id": 6, "body": None}]], None, id="empty body"),
])
def test_our_comment(pages: list[Any], expected: int | None) -> None:
    assert run_review.our_comment(pages) == expected


@pytest.mark.parametrize(("env", "event", "name", "expected"), [
    pytest.param({}, {"pull_request": {"base": {"sha": "b"}, "head": {"sha": "h"}}}, "pull_request",
                 ("b", "h"), id="pull request"),
    pytest.param({"REVIEW_BASE": "v1"}, {"pull_request": {"base": {"sha": "b"}, "head": {"sha": "h"}}},
                 "pull_request", ("v1", "h"), id="input wins"),
    pytest.param({}, {"before": "a", "after": "c"}, "push", ("a", "c"), id="push"),
    pytest.param({}, {"before": "0" * 40, "after": "c"}, "push", ("", "c"), id="new branch push"),
])
def test_revisions(env: dict[str, str], event: dict[str, Any], name: str, expected: tuple[str, str]) -> None:
    assert run_review.revisions(run_review.settings(env), event, name) == expected


def test_read_only_only_for_a_fork_on_pull_request() -> None:
    fork = {"pull_request": {"base": {"repo": {"full_name": "a/b"}}, "head": {"repo": {"full_name": "c/b"}}}}
    same = {"pull_request": {"base": {"repo": {"full_name": "a/b"}}, "head": {"repo": {"full_name": "a/b"}}}}
    assert run_review.read_only_reason(fork, "pull_request") is not None
    assert run_review.read_only_reason(fork, "pull_request_target") is None
    assert run_review.read_only_reason(same, "pull_request") is None


def test_annotations_escape_line_breaks(capsys: pytest.CaptureFixture[str]) -> None:
    # Source: GitHub's workflow-command syntax (%, CR and LF are written %25, %0D, %0A).
    run_review.annotate("error", "50% done\nnext")
    assert capsys.readouterr().out == "::error::50%25 done%0Anext\n"
