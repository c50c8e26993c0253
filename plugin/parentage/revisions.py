"""Bytes and blob shas of files at a revision: a commit, the index, the work tree, or nothing.

The one module that talks to git (through gitpython). The index is read with `git ls-files`
so `GIT_INDEX_FILE` (set by git during `git commit -a` and by hooks) is honoured.
"""
from __future__ import annotations

import hashlib
import os
import re
import subprocess
from functools import lru_cache
from typing import NamedTuple

from parentage.errors import ParentageError

EMPTY = "empty"
INDEX = "index"
WORKTREE = "worktree"


class Side(NamedTuple):
    """One end of a comparison. `kind` is "commit", INDEX, WORKTREE or EMPTY."""

    kind: str
    commit: str | None = None  # full sha for a commit side
    label: str = ""  # what the user wrote, or a short description

    @property
    def name(self) -> str:
        if self.kind == "commit":
            return self.label or (self.commit or "")[:12]
        return self.label or self.kind


class FileVersion(NamedTuple):
    path: str
    blob: str | None  # git blob sha; None when the file is absent at that side
    data: bytes | None


def blob_sha(data: bytes) -> str:
    """The sha git gives these bytes as a blob (`git hash-object`)."""
    return hashlib.sha1(b"blob %d\0" % len(data) + data).hexdigest()


@lru_cache(maxsize=256)
def _glob_regex(pattern: str) -> re.Pattern[str]:
    out = []
    i = 0
    while i < len(pattern):
        if pattern.startswith("**/", i):
            out.append("(?:.*/)?")
            i += 3
        elif pattern.startswith("**", i):
            out.append(".*")
            i += 2
        elif pattern[i] == "*":
            out.append("[^/]*")
            i += 1
        elif pattern[i] == "?":
            out.append("[^/]")
            i += 1
        elif pattern[i] == "[":
            close = pattern.find("]", i + 1)
            body = pattern[i + 1:close].replace("\\", "\\\\")
            if body.startswith("!"):
                body = "^" + body[1:]
            out.append(f"[{body}]")
            i = close + 1
        else:
            out.append(re.escape(pattern[i]))
            i += 1
    return re.compile("".join(out) + r"\Z")


def match_glob(pattern: str, path: str) -> bool:
    """Glob match on repository paths: `*` stays within a folder, `**/` spans folders."""
    return bool(_glob_regex(pattern).match(path))


SMALL_BLOB = 1 << 20  # blobs up to this size are kept for the run once read


class GitFailed(ParentageError):
    pass


def _run_git(args: list[str], cwd: str) -> subprocess.CompletedProcess[bytes]:
    try:
        return subprocess.run(["git", *args], check=False, cwd=cwd, capture_output=True)
    except FileNotFoundError:
        raise ParentageError("git failed: is it installed and on PATH?") from None
    except NotADirectoryError:
        raise ParentageError(f"{os.path.abspath(cwd)}: not a folder") from None


class Repository:
    """One git repository, read through the git command line.

    gitpython is not used here: importing it costs ~0.2 s, a fifth of a commit hook's budget,
    and every call below is one git command anyway.
    """

    def __init__(self, start: str = ".") -> None:
        if not os.path.isdir(start):
            raise ParentageError(f"{os.path.abspath(start)}: not inside a git repository; run "
                                 "parentage from the ontology's repository")
        self._trees: dict[str, dict[str, str]] = {}  # commit -> path -> blob sha
        self._small_blobs: dict[str, bytes] = {}  # rule files and configs, read at both ends
        # One git call in a checkout; a second only to say why when the first fails.
        found = _run_git(["rev-parse", "--is-bare-repository", "--absolute-git-dir", "--show-toplevel"], start)
        lines = found.stdout.decode("utf-8", "surrogateescape").split("\n")
        if found.returncode == 0 and len(lines) >= 3 and lines[0].strip() == "false":
            self.git_dir, self.root = lines[1].strip(), lines[2].strip()
            return
        found = _run_git(["rev-parse", "--is-bare-repository", "--absolute-git-dir"], start)
        if found.returncode != 0:
            raise ParentageError(f"{os.path.abspath(start)}: not inside a git repository; run "
                                 "parentage from the ontology's repository")
        git_dir = found.stdout.decode("utf-8", "surrogateescape").split("\n")[1]
        raise ParentageError(f"{git_dir.strip()}: a bare repository has no work tree; run "
                             "parentage in a checkout")

    def git(self, *args: str) -> str:
        """Run git in the work tree; its standard output, or a one-line error."""
        done = _run_git(list(args), self.root)
        if done.returncode != 0:
            detail = done.stderr.decode("utf-8", "replace").strip().splitlines()
            raise GitFailed(f"git {args[0]} failed: {detail[0] if detail else 'no message'}")
        return done.stdout.decode("utf-8", "surrogateescape")

    def _quiet(self, *args: str) -> str:
        """Standard output of a git command, or "" when it fails."""
        done = _run_git(list(args), self.root)
        return done.stdout.decode("utf-8", "surrogateescape") if done.returncode == 0 else ""

    # -- resolving ---------------------------------------------------------------------------
    def _is_shallow(self) -> bool:
        return os.path.exists(os.path.join(self.git_dir, "shallow"))

    def has_head(self) -> bool:
        return bool(self._quiet("rev-parse", "--verify", "--quiet", "HEAD^{commit}").strip())

    def commit(self, rev: str) -> Side:
        sha = self._quiet("rev-parse", "--verify", "--quiet", "--end-of-options", rev + "^{commit}")
        if not sha.strip():
            if rev == "HEAD" and not self.has_head():
                return Side(EMPTY, None, "empty (no commits yet)")
            hint = ("; this is a shallow clone: fetch more history (git fetch --unshallow, "
                    "or fetch-depth: 0 in actions/checkout)") if self._is_shallow() else ""
            raise ParentageError(f"unknown revision {rev!r}: not a commit in this repository{hint}")
        return Side("commit", sha.strip(), rev)

    def merge_base(self, a: Side, b: Side) -> Side:
        if a.commit is None or b.commit is None:
            return a
        base = self._quiet("merge-base", a.commit, b.commit).strip()
        if not base:
            hint = (" this is a shallow clone: fetch more history (git fetch --unshallow, or "
                    "fetch-depth: 0 in actions/checkout)") if self._is_shallow() else \
                " the two revisions share no history."
            raise ParentageError(f"no merge base for {a.name}...{b.name}:{hint}")
        return Side("commit", base, f"merge-base({a.name}, {b.name})")

    def resolve(self, spec: str | None, staged: bool = False, worktree: bool = False) -> tuple[Side, Side]:
        """(base, head) for `A..B`, `A...B`, a single revision (rev..work tree), --staged, --worktree."""
        chosen = sum(1 for x in (spec, staged or None, worktree or None) if x)
        if chosen > 1:
            raise ParentageError("give one of a range (A..B or A...B), --staged or --worktree")
        if staged:
            return self.commit("HEAD"), Side(INDEX, None, "index")
        if worktree or not spec:
            return self.commit("HEAD"), Side(WORKTREE, None, "work tree")
        if "..." in spec:
            left, right = spec.split("...", 1)
            a, b = self.commit(left or "HEAD"), self.commit(right or "HEAD")
            return self.merge_base(a, b), b
        if ".." in spec:
            left, right = spec.split("..", 1)
            return self.commit(left or "HEAD"), self.commit(right or "HEAD")
        return self.commit(spec), Side(WORKTREE, None, "work tree")

    # -- listing and reading -------------------------------------------------------------------
    def list_files(self, side: Side) -> list[str]:
        """Every file git tracks at `side` (repository-relative, '/'-separated)."""
        if side.kind == EMPTY:
            return []
        if side.kind == "commit" and side.commit is not None:
            return list(self._tree(side.commit))
        out = self.git("ls-files", "-z")
        paths = [p for p in out.split("\0") if p]
        if side.kind == WORKTREE:
            paths = [p for p in paths if os.path.isfile(os.path.join(self.root, p))]
        return paths

    def _tree(self, commit: str) -> dict[str, str]:
        """Path -> object sha of every entry of a commit's tree, listed once per run (a review
        asks for its ontologies and its rule files at both ends)."""
        found = self._trees.get(commit)
        if found is None:
            found = {}
            for entry in self.git("ls-tree", "-r", "-z", commit).split("\0"):
                meta, _, path = entry.partition("\t")
                if path:
                    found[path] = meta.split()[2]  # "<mode> <type> <sha>"
            self._trees[commit] = found
        return found

    def matching(self, side: Side, patterns: tuple[str, ...]) -> list[str]:
        return [p for p in self.list_files(side) if any(match_glob(g, p) for g in patterns)]

    def read(self, side: Side, path: str, sha_only: bool = False) -> FileVersion:
        """The file at `side`. With `sha_only`, the bytes are left out (data None) wherever git
        knows the sha without them (commits and the index): a cache keyed by blob sha then
        never reads a large file it already holds."""
        if side.kind == EMPTY:
            return FileVersion(path, None, None)
        if side.kind == WORKTREE:
            full = os.path.join(self.root, path)
            if not os.path.isfile(full):
                return FileVersion(path, None, None)
            with open(full, "rb") as handle:
                data = handle.read()
            return FileVersion(path, blob_sha(data), data)
        if side.kind == INDEX:
            # ":(literal)" so a name with [ or * is not taken as a pattern.
            line = self.git("ls-files", "-s", "--", f":(literal){path}")
            if not line.strip():
                return FileVersion(path, None, None)
            sha = line.split()[1]
        else:
            assert side.commit is not None
            sha = self._tree(side.commit).get(path, "")
            if not sha:
                return FileVersion(path, None, None)
        sha = sha.strip()
        return FileVersion(path, sha, None if sha_only else self.blob_bytes(sha))

    def blob_bytes(self, sha: str) -> bytes:
        small = self._small_blobs.get(sha)
        if small is not None:
            return small
        data = self._blob_bytes(sha)
        if len(data) <= SMALL_BLOB:
            self._small_blobs[sha] = data
        return data

    def _blob_bytes(self, sha: str) -> bytes:
        # One read of the whole pipe: `communicate` polls in 32 KB steps, which took ~4x
        # longer on a 30 MB ontology. cat-file writes nothing else to stderr, so reading
        # stdout to the end first cannot block.
        with subprocess.Popen(["git", "cat-file", "blob", sha], cwd=self.root,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE) as child:
            assert child.stdout is not None and child.stderr is not None
            data = child.stdout.read()
            problem = child.stderr.read()
            code = child.wait()
        if code != 0:
            raise ParentageError(f"git cat-file failed for blob {sha}: "
                                 f"{problem.decode('utf-8', 'replace').strip()[:200]}")
        return data

    def git_path(self, name: str) -> str:
        """`git rev-parse --git-path NAME`, absolute."""
        found = self.git("rev-parse", "--git-path", name).strip()
        return found if os.path.isabs(found) else os.path.join(self.root, found)


def build_repository(dest: str, commits: list[tuple[str, str, dict[str, bytes]]]) -> str:
    """Create a git repository at `dest` from (branch, message, files) steps, in order.

    Each step checks out `branch` (created from the current commit when new), writes the
    files (a value of b"" deletes the file), and commits. Used by `parentage demo` and tests.
    """
    import git

    if os.path.exists(dest) and os.listdir(dest):
        raise ParentageError(f"{dest}: folder exists and is not empty; choose another")
    repo = git.Repo.init(dest, initial_branch=commits[0][0] if commits else "main")
    with repo.config_writer() as cfg:
        cfg.set_value("user", "name", "parentage demo")
        cfg.set_value("user", "email", "demo@example.invalid")
        cfg.set_value("commit", "gpgsign", "false")
    for branch, message, files in commits:
        if repo.head.is_valid() and repo.active_branch.name != branch:
            if branch in repo.heads:
                repo.heads[branch].checkout()
            else:
                repo.create_head(branch).checkout()
        for path, data in files.items():
            full = os.path.join(dest, path)
            if data == b"":
                if os.path.exists(full):
                    repo.index.remove([path], working_tree=True)
                continue
            os.makedirs(os.path.dirname(full), exist_ok=True)
            with open(full, "wb") as handle:
                handle.write(data)
            repo.git.add("--", path)
        repo.git.commit("-q", "--allow-empty", "-m", message)
    return str(repo.working_tree_dir)
