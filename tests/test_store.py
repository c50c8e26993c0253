"""The SQLite store: round trips, version stamps, parallel writers, location, and cache hits."""
from __future__ import annotations

import io
import json
import multiprocessing
import os
import sqlite3
import subprocess
import sys
import time
import tracemalloc
import zlib
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

from parentage import parse
from parentage.cli import main
from parentage.store import BLOB_IO_MIN, Store, default_store_path

if TYPE_CHECKING:
    from conftest import GitRepo

WORKERS = 6
ITEMS = 40


def test_json_values_round_trip(tmp_path: Path) -> None:
    store = Store(str(tmp_path / "s" / "store.sqlite"))
    value = {"name": "acétique", "mass": 60.052, "parents": ["QQX:1", "QQX:2"], "none": None,
             "nested": {"ok": True, "n": -3}}
    store.put("snapshot", "k1", value)
    assert store.get("snapshot", "k1") == value
    assert store.get("snapshot", "missing") is None
    assert store.get("other-namespace", "k1") is None
    store.put_many("snapshot", {"a": [1, 2], "b": "text"})
    assert store.get_many("snapshot", ["a", "b", "c", "a"]) == {"a": [1, 2], "b": "text"}
    store.put("snapshot", "k1", {"replaced": 1})
    store.close()
    reopened = Store(str(tmp_path / "s" / "store.sqlite"))
    assert reopened.get("snapshot", "k1") == {"replaced": 1}
    reopened.close()


def test_bytes_round_trip(tmp_path: Path) -> None:
    store = Store(str(tmp_path / "store.sqlite"))
    payload = bytes(range(256)) * 50 + b"\0\0"
    store.put_bytes("arrays", "fp", payload)
    store.put_bytes("arrays", "empty", b"")
    store.close()
    again = Store(str(tmp_path / "store.sqlite"))
    assert again.get_bytes("arrays", "fp") == payload
    assert again.get_bytes("arrays", "empty") == b""
    assert again.get_bytes("arrays", "none") is None
    assert (again.hits, again.misses) == (2, 1)
    again.close()


def test_file_values_round_trip(tmp_path: Path) -> None:
    store = Store(str(tmp_path / "store.sqlite"))
    payload = bytes(range(256)) * 4000
    store.put_file("model", "k", payload)
    store.put_file("model", "k", payload[::-1])  # replaced whole, never half-written
    assert bytes(store.get_file("model", "k") or b"") == payload[::-1]
    assert store.get_file("model", "other") is None
    assert Store(str(tmp_path / "store.sqlite"), version="another").get_file("model", "k") is None
    assert [p.name for p in (tmp_path / "files").iterdir() if p.name.endswith(".part")] == []
    memory = Store(None)  # no folder: kept in the in-memory database
    memory.put_file("model", "k", payload)
    assert memory.get_file("model", "k") == payload


def test_model_file_round_trip_and_damage(tmp_path: Path) -> None:
    from dataclasses import asdict

    import numpy as np

    from parentage.config import ModelSettings
    from parentage.errors import ParentageError
    from parentage.tiers.model import FORMAT, Model

    arrays = {"w": np.arange(12, dtype=np.float16).reshape(3, 4), "ids": np.array([b"A:1", b"B:22"]),
              "ptr": np.array([0, 5, 9], dtype=np.int64), "none": np.zeros((0, 3), dtype=np.float32)}
    meta = {"format": FORMAT, "settings": asdict(ModelSettings()), "classes": ["C:1"], "revision": "r",
            "ancestors": {"C:1": []}, "disjoint": []}
    blob = Model(arrays, meta).to_bytes()
    store = Store(str(tmp_path / "store.sqlite"))
    store.put_file("model", "k", blob)
    back = Model.from_bytes(store.get_file("model", "k") or b"")
    for name, values in arrays.items():
        assert back.arrays[name].dtype == values.dtype and np.array_equal(back.arrays[name], values)
        assert back.arrays[name].ctypes.data % 64 == 0  # a view of the mapped file, aligned
        assert not back.arrays[name].flags.writeable
    assert back.revision == "r"
    # The file is an ordinary .npz: numpy's own reader, pickles refused, finds the same arrays.
    with np.load(io.BytesIO(blob), allow_pickle=False) as plain:
        assert sorted(plain.files) == sorted([*arrays, "meta.json"])
        for name, values in arrays.items():
            assert np.array_equal(plain[name], values)
    assert Model.from_bytes(blob).arrays["ptr"].tolist() == [0, 5, 9]  # from bytes as well
    # The central directory as read by our reader and by the standard library's zipfile.
    from parentage import npz

    assert npz._members(blob) == npz._members_zip64(blob)
    # Reading does not import zipfile (13 ms of a warm review's start-up).
    path = tmp_path / "model.npz"
    path.write_bytes(blob)
    code = ("import sys; from parentage.tiers.model import Model; "
            f"Model.from_bytes(open({str(path)!r}, 'rb').read()); print('zipfile' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
    # A damaged or foreign file is one clear error, never a crash or a pickle load.
    for damaged in (blob[: len(blob) // 2], b"not a model", blob.replace(b"<f2", b"|O8", 1)):
        with pytest.raises(ParentageError, match="stored model is unreadable"):
            Model.from_bytes(damaged)


@pytest.mark.skipif(not hasattr(sqlite3.Connection, "blobopen"), reason="blob I/O needs Python 3.11")
def test_large_values_go_through_without_whole_copies(tmp_path: Path) -> None:
    """A stored model of BLOB_IO_MIN bytes or more is not copied whole on its way in or out."""
    big = os.urandom(BLOB_IO_MIN + 1000)  # random: zlib cannot shrink it either
    store = Store(str(tmp_path / "store.sqlite"))
    store.put_bytes("model", "old", b"a smaller value first", compress=False)
    tracemalloc.start()
    try:
        store.put_bytes("model", "old", big, compress=False)  # replaces it
        put_peak = tracemalloc.get_traced_memory()[1]
        store.put_bytes("model", "deflated", big)  # compressed: an ordinary row, read back in pieces
        store.close()
        again = Store(str(tmp_path / "store.sqlite"))
        tracemalloc.reset_peak()
        back = again.get_bytes("model", "old")
        get_peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert back == big
    assert again.get_bytes("model", "deflated") == big
    assert put_peak < len(big) / 2  # no copy with an encoding byte in front
    assert get_peak < 1.5 * len(big)  # the value alone, not the fetched row as well
    again.close()


def test_no_pickle_in_the_file(tmp_path: Path) -> None:
    path = tmp_path / "store.sqlite"
    store = Store(str(path))
    store.put("snapshot", "k", {"a": 1})
    store.put_bytes("plain", "k", b"\x00raw bytes", compress=False)
    store.close()
    with sqlite3.connect(path) as conn:
        (packed,) = conn.execute("SELECT value FROM entry WHERE namespace='snapshot'").fetchone()
        (plain,) = conn.execute("SELECT value FROM entry WHERE namespace='plain'").fetchone()
    # One byte says how the value is kept ("z": zlib, "r": as given); the rest is JSON or bytes.
    assert packed[:1] == b"z" and json.loads(zlib.decompress(packed[1:])) == {"a": 1}
    assert plain == b"r\x00raw bytes"
    assert Store(str(path)).get_bytes("plain", "k") == b"\x00raw bytes"


def test_another_version_does_not_see_old_entries(tmp_path: Path) -> None:
    path = str(tmp_path / "store.sqlite")
    old = Store(path, version="0.0.1")
    old.put("snapshot", "k", {"layout": "old"})
    old.close()
    new = Store(path, version="0.0.2")
    assert new.get("snapshot", "k") is None
    assert new.get_many("snapshot", ["k"]) == {}
    new.put("snapshot", "k", {"layout": "new"})
    new.close()
    again = Store(path, version="0.0.1")
    assert again.get("snapshot", "k") == {"layout": "old"}
    again.close()


def _worker(path: str, number: int, barrier: Any) -> None:
    store = Store(path)
    barrier.wait(timeout=60)  # every process opens the fresh file at the same moment
    for i in range(ITEMS):
        store.put("values", f"{number}:{i}", {"worker": number, "i": i})
        store.put_bytes("blobs", f"{number}:{i}", bytes([number, i]) * 100)
        seen = store.get_many("values", [f"{w}:{i}" for w in range(WORKERS)])
        for key, value in seen.items():
            w, n = key.split(":")
            if value != {"worker": int(w), "i": int(n)}:
                raise SystemExit(f"wrong value under {key}: {value}")
    store.close()


def test_parallel_writers(tmp_path: Path) -> None:
    path = str(tmp_path / "cache" / "store.sqlite")
    # The file exists (as after any earlier run); a fresh file is the case below.
    first = Store(path)
    first.put("values", "setup", True)
    first.close()
    ctx = multiprocessing.get_context("fork")
    barrier = ctx.Barrier(WORKERS)
    procs = [ctx.Process(target=_worker, args=(path, n, barrier)) for n in range(WORKERS)]
    for proc in procs:
        proc.start()
    for proc in procs:
        proc.join(timeout=120)
    assert [p.exitcode for p in procs] == [0] * WORKERS
    store = Store(path)
    keys = [f"{w}:{i}" for w in range(WORKERS) for i in range(ITEMS)]
    values = store.get_many("values", keys)
    assert values == {k: {"worker": int(k.split(":")[0]), "i": int(k.split(":")[1])} for k in keys}
    for key in keys:
        w, i = (int(x) for x in key.split(":"))
        assert store.get_bytes("blobs", key) == bytes([w, i]) * 100
    store.close()
    # Reference: SQLite's own consistency check of the file.
    with sqlite3.connect(path) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]


def _hold_write_lock(path: str, locked: Any, seconds: float) -> None:
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("BEGIN IMMEDIATE")
    conn.execute("CREATE TABLE IF NOT EXISTS other_tool (x)")
    locked.set()
    time.sleep(seconds)
    conn.execute("COMMIT")
    conn.close()


def test_opening_a_fresh_file_waits_for_another_writer(tmp_path: Path) -> None:
    path = str(tmp_path / "store.sqlite")
    ctx = multiprocessing.get_context("fork")
    locked = ctx.Event()
    holder = ctx.Process(target=_hold_write_lock, args=(path, locked, 1.0))
    holder.start()
    try:
        assert locked.wait(timeout=30)
        store = Store(path)
        store.put("values", "k", 1)  # must wait for the other writer, not fail
        assert store.get("values", "k") == 1
        store.close()
    finally:
        holder.join(timeout=30)
    assert holder.exitcode == 0


def test_unusable_store_file_is_a_clear_error(git_repo: GitRepo,
                                              capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("qqx.obo", OBO)
    git_repo.commit()
    store = Path(git_repo.git("rev-parse", "--absolute-git-dir").strip()) / "parentage" / "store.sqlite"
    store.parent.mkdir(parents=True)
    store.write_bytes(b"this is not a database" * 100)
    assert main(["diff", "-C", str(git_repo.path), "HEAD"]) == 2
    err = capsys.readouterr().err
    assert len(err.splitlines()) == 1 and "store.sqlite" in err and "Traceback" not in err


# -- location --------------------------------------------------------------------------------

OBO = "format-version: 1.4\n\n[Term]\nid: QQX:0000001\nname: chemical entity\n"
EDITED = OBO + "\n[Term]\nid: QQX:0000002\nname: acid\nis_a: QQX:0000001\n"


@pytest.fixture
def two_commits(git_repo: GitRepo) -> GitRepo:
    git_repo.write("qqx.obo", OBO)
    git_repo.commit("first")
    git_repo.write("qqx.obo", EDITED)
    git_repo.commit("second")
    return git_repo


def test_default_location_is_in_the_git_directory(two_commits: GitRepo,
                                                  capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["diff", "-C", str(two_commits.path), "HEAD~1..HEAD"]) == 0
    # Reference: git's own answer for where the git directory is.
    git_dir = Path(two_commits.git("rev-parse", "--absolute-git-dir").strip())
    assert (git_dir / "parentage" / "store.sqlite").is_file()
    assert default_store_path(str(git_dir), None, str(two_commits.path)) == str(
        git_dir / "parentage" / "store.sqlite")


def test_environment_overrides_the_location(two_commits: GitRepo, tmp_path: Path,
                                            monkeypatch: pytest.MonkeyPatch,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    cache = tmp_path / "ci-cache"
    monkeypatch.setenv("PARENTAGE_CACHE", str(cache))
    assert main(["diff", "-C", str(two_commits.path), "HEAD~1..HEAD"]) == 0
    assert (cache / "store.sqlite").is_file()
    assert not (two_commits.path / ".git" / "parentage").exists()
    # The environment wins over the config's `cache` too.
    assert default_store_path("/g", "elsewhere", "/r") == str(cache / "store.sqlite")


def test_config_cache_key_sets_the_location(two_commits: GitRepo,
                                            capsys: pytest.CaptureFixture[str]) -> None:
    two_commits.write(".parentage.yaml", "cache: .cache/parentage\n")
    assert main(["diff", "-C", str(two_commits.path), "HEAD~1..HEAD"]) == 0
    assert (two_commits.path / ".cache" / "parentage" / "store.sqlite").is_file()
    assert not (two_commits.path / ".git" / "parentage").exists()


# -- cache hits ------------------------------------------------------------------------------

def _parse_count() -> int:
    return sum(parse.PARSE_CALLS.values())


def _reset() -> None:
    for key in parse.PARSE_CALLS:
        parse.PARSE_CALLS[key] = 0


@pytest.mark.parametrize("selector", [["HEAD~1..HEAD"], ["HEAD~1"], ["--staged"]],
                         ids=["range", "work-tree", "index"])
def test_second_diff_does_not_parse_again(two_commits: GitRepo, selector: list[str],
                                          capsys: pytest.CaptureFixture[str]) -> None:
    two_commits.write("qqx.obo", EDITED + "\n[Term]\nid: QQX:0000003\nname: base\n")
    two_commits.git("add", "qqx.obo")
    args = ["diff", "-C", str(two_commits.path), "--format", "json", *selector]
    _reset()
    assert main(args) == 0
    first = capsys.readouterr().out
    assert _parse_count() == 2  # base and head, each parsed once
    _reset()
    assert main(args) == 0
    assert _parse_count() == 0
    assert capsys.readouterr().out == first


# -- the InChIKey index, stored one key per row ------------------------------------------------

# Ethanol and its InChIKey (from memory; the structure tests check it against RDKit).
ETHANOL_KEY = "LFQSCWFLJHTTHZ-UHFFFAOYSA-N"
DUPLICATES = OBO + "".join(
    f"\n[Term]\nid: QQX:000001{n}\nname: ethanol {n}\nis_a: QQX:0000001\n"
    f'property_value: smiles "{smiles}" xsd:string\n' for n, smiles in ((1, "CCO"), (2, "OCC")))


def test_stored_inchikey_index_gives_the_same_duplicates(two_commits: GitRepo, tmp_path: Path,
                                                         monkeypatch: pytest.MonkeyPatch,
                                                         capsys: pytest.CaptureFixture[str]) -> None:
    """A second run looks keys up in the stored index instead of building it: same findings."""
    monkeypatch.setenv("PARENTAGE_CACHE", str(tmp_path / "cache"))
    two_commits.write("qqx.obo", DUPLICATES)
    two_commits.commit()
    # The change adds a third ethanol: a duplicate of both committed ones (found in the index).
    two_commits.write("qqx.obo", DUPLICATES + "\n[Term]\nid: QQX:0000013\nname: ethanol 3\n"
                      'is_a: QQX:0000001\nproperty_value: smiles "C(C)O" xsd:string\n')
    two_commits.git("add", "qqx.obo")
    args = ["check", "-C", str(two_commits.path), "--format", "json"]
    runs = []
    for _ in range(2):
        assert main(args) == 1
        runs.append(json.loads(capsys.readouterr().out))
    assert runs[0] == runs[1]
    dup = [f for f in runs[0]["findings"] if f["kind"] == "duplicate-structure"]
    assert [(f["term"], f["evidence"]["others"]) for f in dup] == [
        ("QQX:0000013", ["QQX:0000011", "QQX:0000012"])]
    store = Store(str(tmp_path / "cache" / "store.sqlite"))
    built = store.keys("inchikey-index-built")
    assert len(built) == 1
    assert store.get(built[0], ETHANOL_KEY) == ["QQX:0000011", "QQX:0000012"]
    store.close()


def test_stored_rows_come_back_page_by_page(two_commits: GitRepo, tmp_path: Path,
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    """A whole snapshot's rows are stored in pages; read one at a time or all at once, every
    term equals the parsed one (600 terms: three pages, the last one short)."""
    from parentage.parse import parse_ontology_text
    from parentage.workspace import ROW_PAGE, Workspace

    monkeypatch.setenv("PARENTAGE_CACHE", str(tmp_path / "cache"))
    text = OBO + "".join(f"\n[Term]\nid: QQX:{n:07d}\nname: term {n}\nis_a: QQX:0000001\n"
                         f'synonym: "t{n}" EXACT []\n' for n in range(10, 610))
    parsed = parse_ontology_text(text, "qqx.obo", "b" * 40)
    assert len(parsed.terms) > 2 * ROW_PAGE
    ws = Workspace(str(two_commits.path))
    ws._put("b" * 40 + ":qqx.obo", parsed)
    for walk in ("one by one", "all at once"):
        ws._snapshots.clear()
        again = ws._stored("b" * 40, "qqx.obo")
        assert again is not None
        if walk == "all at once":
            again.terms.prefetch()
        assert [again.terms[t] for t in reversed(list(again.terms))] == \
            [parsed.terms[t] for t in reversed(list(parsed.terms))]
    ws.close()
