"""The review step of the parentage pull-request action.

Runs `parentage review` on the pull request's change, appends the markdown review to the job
summary, keeps ONE comment on the pull request up to date (found by the renderer's hidden
marker), writes SARIF on request and sets the step outputs. Exit status: 1 on a new blocking
finding, 2 when the review cannot run (the message says why), else 0.

Everything comes from the environment: the action's inputs as REVIEW_* variables, and the
runner's GITHUB_* variables. The repository under review is only read, as data, by parentage.
The script uses the standard library and the installed parentage package only.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
from collections.abc import Mapping, Sequence
from typing import Any, NamedTuple

from parentage.report.markdown import MARKER

PULL_REQUEST_EVENTS = ("pull_request", "pull_request_target")
NO_COMMIT = "0" * 40
FALSE_WORDS = ("", "0", "false", "no", "off")


class Settings(NamedTuple):
    repo: str
    config: str
    base: str
    head: str
    fail_on: str
    comment: bool
    sarif: bool
    sarif_file: str
    model: bool


class Outcome(NamedTuple):
    code: int
    findings: int = 0
    blocking: int = 0
    comment: str = "off"


def flag(value: str | None, default: bool) -> bool:
    if value is None or not value.strip():
        return default
    return value.strip().lower() not in FALSE_WORDS


def settings(env: Mapping[str, str]) -> Settings:
    temp = env.get("RUNNER_TEMP") or tempfile.gettempdir()
    return Settings(
        repo=env.get("REVIEW_REPOSITORY_PATH") or ".",
        config=env.get("REVIEW_CONFIG", "").strip(),
        base=env.get("REVIEW_BASE", "").strip(),
        head=env.get("REVIEW_HEAD", "").strip(),
        fail_on=env.get("REVIEW_FAIL_ON", "").strip(),
        comment=flag(env.get("REVIEW_COMMENT"), True),
        sarif=flag(env.get("REVIEW_SARIF"), False),
        sarif_file=env.get("REVIEW_SARIF_FILE", "").strip() or os.path.join(temp, "parentage-review.sarif"),
        model=flag(env.get("REVIEW_MODEL"), True),
    )


def load_event(env: Mapping[str, str]) -> dict[str, Any]:
    path = env.get("GITHUB_EVENT_PATH")
    if not path or not os.path.isfile(path):
        return {}
    with open(path, encoding="utf-8") as handle:
        data = json.load(handle)
    return data if isinstance(data, dict) else {}


def revisions(chosen: Settings, event: Mapping[str, Any], event_name: str) -> tuple[str, str]:
    """(base, head): the inputs, else the pull request's shas, else a push's before/after."""
    pull = event.get("pull_request") or {}
    base = chosen.base or (pull.get("base") or {}).get("sha") or ""
    head = chosen.head or (pull.get("head") or {}).get("sha") or ""
    if event_name == "push" and not (base and head):
        before, after = event.get("before") or "", event.get("after") or ""
        if before != NO_COMMIT:
            base = base or before
        head = head or after
    return base, head


def read_only_reason(event: Mapping[str, Any], event_name: str) -> str | None:
    """Why the token cannot comment, when the event payload already tells (a fork's PR)."""
    if event_name != "pull_request":
        return None  # pull_request_target runs with the base repository's token
    pull = event.get("pull_request") or {}
    head_repo = ((pull.get("head") or {}).get("repo") or {}).get("full_name")
    base_repo = ((pull.get("base") or {}).get("repo") or {}).get("full_name")
    if head_repo != base_repo:
        return (f"this pull request comes from a fork ({head_repo or 'a deleted repository'}), "
                "so its token is read-only and cannot comment; the review is in the job summary")
    return None


def annotate(level: str, message: str) -> None:
    """A workflow command (`::error::`), with the characters the runner treats specially escaped."""
    text = message.replace("%", "%25").replace("\r", "%0D").replace("\n", "%0A")
    print(f"::{level}::{text}", flush=True)


def append(path: str | None, text: str) -> None:
    if not path:
        return
    with open(path, "a", encoding="utf-8") as handle:
        handle.write(text if text.endswith("\n") else text + "\n")


def set_outputs(env: Mapping[str, str], values: Mapping[str, str]) -> None:
    lines = []
    for name, value in values.items():
        if "\n" in value or "\r" in value:
            raise ValueError(f"output {name} holds a line break")
        lines.append(f"{name}={value}\n")
    append(env.get("GITHUB_OUTPUT"), "".join(lines))


def commit_exists(repo: str, rev: str) -> bool:
    done = subprocess.run(["git", "-C", repo, "cat-file", "-e", f"{rev}^{{commit}}"],
                          capture_output=True, check=False)
    return done.returncode == 0


def review(chosen: Settings, span: str, fmt: str, output: str) -> subprocess.CompletedProcess[str]:
    argv = [sys.executable, "-m", "parentage", "review", span, "-C", chosen.repo, "--format", fmt, "--output", output]
    if chosen.config:
        argv += ["--config", chosen.config]
    if chosen.fail_on:
        argv += ["--fail-on", chosen.fail_on]
    if not chosen.model:
        argv.append("--no-model")
    return subprocess.run(argv, capture_output=True, text=True, check=False)


# -- the pull-request comment ------------------------------------------------------------------

def _json_values(text: str) -> list[Any]:
    """The JSON values in `text`: `gh api --paginate` prints one array per page, back to back."""
    decoder = json.JSONDecoder()
    values: list[Any] = []
    at = 0
    while True:
        while at < len(text) and text[at].isspace():
            at += 1
        if at >= len(text):
            return values
        value, at = decoder.raw_decode(text, at)
        values.append(value)


def our_comment(pages: Sequence[Any]) -> int | None:
    """The id of the first comment whose body starts with the marker (ours, not a quote of it)."""
    for page in pages:
        for comment in page if isinstance(page, list) else [page]:
            body = comment.get("body") if isinstance(comment, dict) else None
            if isinstance(body, str) and body.lstrip().startswith(MARKER):
                return int(comment["id"])
    return None


def _gh(*args: str) -> subprocess.CompletedProcess[str]:
    try:
        return subprocess.run(["gh", *args], capture_output=True, text=True, check=False)
    except FileNotFoundError:
        return subprocess.CompletedProcess(["gh", *args], 127, "", "the gh command is not installed")


def _forbidden(done: subprocess.CompletedProcess[str]) -> bool:
    text = done.stderr + done.stdout
    return "HTTP 403" in text or "Resource not accessible by integration" in text


def publish(env: Mapping[str, str], number: int, body: str) -> tuple[str, str | None]:
    """Create or update the one review comment: ("created" / "updated", None), or a failure."""
    repository = env.get("GITHUB_REPOSITORY", "")
    listing = _gh("api", "--paginate", f"repos/{repository}/issues/{number}/comments?per_page=100")
    if listing.returncode != 0:
        return _gh_failure(listing, "list the pull request's comments")
    try:
        existing = our_comment(_json_values(listing.stdout))
    except (ValueError, KeyError, TypeError):
        return "failed", "the comment listing from gh api was not the JSON expected"
    fd, payload = tempfile.mkstemp(prefix="parentage-comment-", suffix=".json", dir=env.get("RUNNER_TEMP"))
    with os.fdopen(fd, "w", encoding="utf-8") as handle:
        json.dump({"body": body}, handle)
    try:
        if existing is None:
            done = _gh("api", "--method", "POST", f"repos/{repository}/issues/{number}/comments",
                       "--input", payload)
            what = "created"
        else:
            done = _gh("api", "--method", "PATCH", f"repos/{repository}/issues/comments/{existing}",
                       "--input", payload)
            what = "updated"
    finally:
        os.unlink(payload)
    if done.returncode != 0:
        return _gh_failure(done, "write the review comment")
    return what, None


def _gh_failure(done: subprocess.CompletedProcess[str], doing: str) -> tuple[str, str]:
    """("read-only" or "failed", why) for a gh call that did not succeed."""
    if _forbidden(done):
        return "read-only", (f"the token may not {doing} (HTTP 403: it is read-only, as for a "
                             "fork's pull request, or the workflow lacks `permissions: "
                             "pull-requests: write`); the review is in the job summary")
    last = (done.stderr.strip() or done.stdout.strip() or f"exit {done.returncode}").splitlines()[-1]
    return "failed", f"could not {doing}: gh: {last[:300]}"


# -- the step --------------------------------------------------------------------------------

def run(env: Mapping[str, str]) -> Outcome:
    chosen = settings(env)
    event_name = env.get("GITHUB_EVENT_NAME", "")
    event = load_event(env)
    summary = env.get("GITHUB_STEP_SUMMARY")
    base, head = revisions(chosen, event, event_name)
    if not base or not head:
        message = ("parentage review: no base and head to compare; outside a pull request, give the "
                   "action's `base` and `head` inputs")
        annotate("error", message)
        append(summary, message)
        return Outcome(2)
    for name, rev in (("base", base), ("head", head)):
        if not commit_exists(chosen.repo, rev):
            message = (f"parentage review: the {name} commit {rev} is not in this clone; a shallow "
                       "checkout leaves it out: use `fetch-depth: 0` in actions/checkout")
            annotate("error", message)
            append(summary, message)
            return Outcome(2)

    span = f"{base}...{head}"  # from the merge base, as the pull request's diff is
    temp = tempfile.mkdtemp(prefix="parentage-review-", dir=env.get("RUNNER_TEMP"))
    counts = os.path.join(temp, "review.json")
    markdown_file = os.path.join(temp, "review.md")
    done = review(chosen, span, "json", counts)
    if done.returncode not in (0, 1):
        return _failed(done, summary)
    with open(counts, encoding="utf-8") as handle:
        data = json.load(handle)
    findings = sum(1 for f in data.get("findings", ()) if f.get("status") != "resolved")
    blocking = int(data.get("blocking", 0))
    code = done.returncode
    more = [("markdown", markdown_file)] + ([("sarif", chosen.sarif_file)] if chosen.sarif else [])
    for fmt, path in more:
        done = review(chosen, span, fmt, path)
        if done.returncode not in (0, 1):
            return _failed(done, summary)
    with open(markdown_file, encoding="utf-8") as handle:
        body = handle.read()
    append(summary, body)

    comment = "off"
    pull = event.get("pull_request") or {}
    if chosen.comment and event_name in PULL_REQUEST_EVENTS and pull.get("number"):
        reason = read_only_reason(event, event_name)
        if reason is not None:
            comment = "read-only"
        else:
            comment, reason = publish(env, int(pull["number"]), body)
        if reason is not None:
            annotate("warning" if comment == "failed" else "notice",
                     f"parentage review: no pull-request comment: {reason}")
            append(summary, f"\n> parentage posted no pull-request comment: {reason}\n")
    elif chosen.comment:
        comment = "not-a-pull-request"

    outputs = {"findings": str(findings), "blocking": str(blocking), "comment": comment,
               "markdown-file": markdown_file}
    if chosen.sarif:
        outputs["sarif-file"] = chosen.sarif_file
    set_outputs(env, outputs)
    if code == 1:
        annotate("error", f"parentage review: {blocking} new blocking finding(s); see the job summary")
    return Outcome(code, findings, blocking, comment)


def _failed(done: subprocess.CompletedProcess[str], summary: str | None) -> Outcome:
    detail = done.stderr.strip() or done.stdout.strip() or f"exit {done.returncode}"
    kind = "bad input or usage" if done.returncode == 2 else "an unexpected error"
    message = f"parentage review could not run ({kind}, exit {done.returncode}): {detail}"
    annotate("error", message)
    append(summary, "parentage review could not run:\n\n```\n" + detail.replace("```", "'''") + "\n```\n")
    return Outcome(2 if done.returncode == 2 else 3)


def main() -> int:
    return run(os.environ).code


if __name__ == "__main__":
    raise SystemExit(main())
