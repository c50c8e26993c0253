"""The cache: one SQLite file of JSON values and byte arrays, keyed by content, and beside it
large values (stored models) as files that are mapped into memory when read.

Keys are content addresses (git blob sha, canonical SMILES, settings hash), stamped with the
tool version so a new release never reads an old layout. Values are JSON or raw bytes (numeric
arrays), never pickle: a CI cache can be restored from an untrusted branch.

pre-commit runs hooks in parallel, so several processes may write at once: WAL mode, a busy
timeout, and short transactions keep the file consistent.
"""
from __future__ import annotations

import hashlib
import json
import mmap
import os
import sqlite3
import threading
import time
import zlib
from collections.abc import Iterable, Mapping
from typing import Any

from parentage import __version__
from parentage.errors import ParentageError

# Bump when the layout of any stored value changes (a Term field, a model array...), so an
# old cache is never read with a new layout even within one release.
LAYOUT = 7
# Values of at least this many bytes are written and read through SQLite's incremental blob
# I/O (Python 3.11+), never as one bound parameter or one fetched row: storing a 157 MB value
# as a parameter raised the peak memory by three times its size (our encoding byte put in front
# of a copy, SQLite's own copy of the parameter, the record it builds), and reading it back
# held the fetched row and the value sliced from it. (Models, the largest values, are files
# beside the database, see `put_file`; this path keeps large snapshots and an in-memory
# store's models lean.)
BLOB_IO_MIN = 1 << 24

_SCHEMA = """
CREATE TABLE IF NOT EXISTS entry (
    namespace TEXT NOT NULL,
    key TEXT NOT NULL,
    version TEXT NOT NULL,
    value BLOB NOT NULL,
    PRIMARY KEY (namespace, key, version)
);
"""


class Store:
    """`get`/`put` JSON values and `get_bytes`/`put_bytes` blobs under (namespace, key)."""

    def __init__(self, path: str | None, version: str = f"{__version__}+{LAYOUT}") -> None:
        self.path = path  # None: an in-memory store (nothing is kept)
        self.version = version
        self._lock = threading.Lock()
        self._conn: sqlite3.Connection | None = None
        self.hits = 0
        self.misses = 0

    def _connect(self) -> sqlite3.Connection:
        if self._conn is None:
            target = ":memory:"
            if self.path is not None:
                os.makedirs(os.path.dirname(os.path.abspath(self.path)), exist_ok=True)
                target = self.path
            conn = self._open(target)
            self._conn = conn
        return self._conn

    def _open(self, target: str) -> sqlite3.Connection:
        # Switching a new file to WAL needs a moment with no writer; a parallel hook may be
        # writing, and sqlite answers "locked" at once instead of waiting, so retry.
        deadline = time.monotonic() + 60
        while True:
            conn = None
            try:
                conn = sqlite3.connect(target, timeout=60, isolation_level=None,
                                       check_same_thread=False)
                conn.execute("PRAGMA busy_timeout = 60000")
                if self.path is not None:
                    conn.execute("PRAGMA journal_mode = WAL")
                conn.execute("PRAGMA synchronous = NORMAL")
                conn.executescript(_SCHEMA)
                return conn
            except sqlite3.OperationalError as exc:
                if conn is not None:
                    conn.close()
                busy = "locked" in str(exc) or "busy" in str(exc)
                if not busy or time.monotonic() > deadline:
                    raise ParentageError(f"{self.path}: cache is not usable ({exc}); delete it "
                                         "and run again") from None
                time.sleep(0.05)
            except sqlite3.DatabaseError as exc:
                if conn is not None:
                    conn.close()
                raise ParentageError(f"{self.path}: cache is not usable ({exc}); delete it and "
                                     "run again") from None

    def close(self) -> None:
        if self._conn is not None:
            self._conn.close()
            self._conn = None

    # -- bytes ------------------------------------------------------------------------------
    def get_bytes(self, namespace: str, key: str) -> bytes | None:
        with self._lock:
            conn = self._connect()
            big = BLOB_IO_MIN if hasattr(conn, "blobopen") else None
            # length() of a blob is read from its header: a big value is not loaded here.
            row = conn.execute(
                "SELECT CASE WHEN ?1 IS NULL OR length(value) < ?1 THEN value END, rowid FROM entry "
                "WHERE namespace=?2 AND key=?3 AND version=?4",
                (big, namespace, key, self.version)).fetchone()
            if row is not None and row[0] is None:
                with conn.blobopen("entry", "value", row[1], readonly=True) as blob:
                    kind = blob.read(1)
                    value = _unpack_parts(kind, blob.read())
            else:
                value = None if row is None else _unpack(row[0])
        if value is None:
            self.misses += 1
            return None
        self.hits += 1
        return value

    def put_bytes(self, namespace: str, key: str, value: bytes, compress: bool = True) -> None:
        self.put_many_bytes(namespace, [(key, value)], compress)

    def put_many_bytes(self, namespace: str, items: Iterable[tuple[str, bytes]],
                       compress: bool = True) -> None:
        """Store values; `compress=False` for large values read on the hot path, where
        inflating costs more than reading the bigger row (a 30 MB snapshot: ~0.1 s)."""
        rows, big = [], []
        for k, v in items:
            if not compress and len(v) >= BLOB_IO_MIN and hasattr(sqlite3.Connection, "blobopen"):
                big.append((k, v))
            else:
                rows.append((namespace, k, self.version, _pack(v, compress)))
        if not rows and not big:
            return
        with self._lock:
            conn = self._connect()
            conn.execute("BEGIN IMMEDIATE")
            try:
                conn.executemany("INSERT OR REPLACE INTO entry VALUES (?, ?, ?, ?)", rows)
                for k, v in big:
                    cursor = conn.execute("INSERT OR REPLACE INTO entry VALUES (?, ?, ?, zeroblob(?))",
                                          (namespace, k, self.version, len(v) + 1))
                    with conn.blobopen("entry", "value", cursor.lastrowid or 0) as blob:
                        blob.write(b"r")
                        blob.write(v)
                conn.execute("COMMIT")
            except BaseException:
                conn.execute("ROLLBACK")
                raise

    # -- large values as files, mapped into memory -------------------------------------------
    def _file(self, namespace: str, key: str) -> str | None:
        if self.path is None:
            return None
        name = hashlib.sha256(f"{namespace}\0{key}\0{self.version}".encode()).hexdigest()
        return os.path.join(os.path.dirname(os.path.abspath(self.path)), "files", name)

    def put_file(self, namespace: str, key: str, value: bytes) -> None:
        """Store a large value as a file beside the database, so `get_file` can map it instead
        of copying it out of SQLite (a 40 MB model: ~0.2 s of every warm review). Written to a
        temporary name and renamed, so a parallel reader sees the old file or the new one."""
        target = self._file(namespace, key)
        if target is None:
            self.put_bytes(namespace, key, value, compress=False)
            return
        os.makedirs(os.path.dirname(target), exist_ok=True)
        temporary = f"{target}.{os.getpid()}.{threading.get_ident()}.part"
        try:
            with open(temporary, "wb") as handle:
                handle.write(value)
            os.replace(temporary, target)
        except OSError as exc:
            raise ParentageError(f"{target}: cannot write to the cache ({exc.strerror})") from None
        finally:
            if os.path.exists(temporary):
                os.unlink(temporary)

    def get_file(self, namespace: str, key: str) -> bytes | mmap.mmap | None:
        """What `put_file` stored, mapped read-only (pages are read when touched), or None."""
        target = self._file(namespace, key)
        if target is None:
            return self.get_bytes(namespace, key)
        try:
            with open(target, "rb") as handle:
                mapped = mmap.mmap(handle.fileno(), 0, access=mmap.ACCESS_READ)
        except (OSError, ValueError):  # missing, unreadable or empty: a miss
            self.misses += 1
            return None
        self.hits += 1
        return mapped

    # -- JSON -------------------------------------------------------------------------------
    def get(self, namespace: str, key: str) -> Any | None:
        raw = self.get_bytes(namespace, key)
        return None if raw is None else json.loads(raw)

    def put(self, namespace: str, key: str, value: Any) -> None:
        self.put_many(namespace, {key: value})

    def get_many(self, namespace: str, keys: Iterable[str]) -> dict[str, Any]:
        wanted = list(dict.fromkeys(keys))
        out: dict[str, Any] = {}
        with self._lock:
            conn = self._connect()
            for start in range(0, len(wanted), 500):
                chunk = wanted[start:start + 500]
                marks = ",".join("?" * len(chunk))
                for key, value in conn.execute(
                        f"SELECT key, value FROM entry WHERE namespace=? AND version=? "
                        f"AND key IN ({marks})", (namespace, self.version, *chunk)):
                    raw = _unpack(value)
                    if raw is not None:
                        out[key] = json.loads(raw)
        self.hits += len(out)
        self.misses += len(wanted) - len(out)
        return out

    def get_all_bytes(self, namespace: str) -> dict[str, bytes]:
        """Every value of a namespace, keyed."""
        with self._lock:
            found = self._connect().execute(
                "SELECT key, value FROM entry WHERE namespace=? AND version=?",
                (namespace, self.version)).fetchall()
        out = {}
        for key, value in found:
            raw = _unpack(value)
            if raw is not None:
                out[key] = raw
        return out

    def keys(self, namespace: str) -> list[str]:
        with self._lock:
            return [k for (k,) in self._connect().execute(
                "SELECT key FROM entry WHERE namespace=? AND version=?", (namespace, self.version))]

    def put_many(self, namespace: str, items: Mapping[str, Any]) -> None:
        self.put_many_bytes(namespace, ((k, json.dumps(v, separators=(",", ":")).encode())
                                        for k, v in items.items()))


def _pack(value: bytes, compress: bool) -> bytes:
    return b"z" + zlib.compress(value, 1) if compress else b"r" + value


def _unpack(stored: bytes) -> bytes | None:
    """The value, or None for an encoding this version does not write (read as a miss)."""
    return _unpack_parts(stored[:1], stored[1:])


def _unpack_parts(kind: bytes, rest: bytes) -> bytes | None:
    """`_unpack` of an encoding byte and the bytes after it."""
    if kind == b"r":
        return rest
    if kind == b"z":
        try:
            return zlib.decompress(rest)
        except zlib.error:
            return None
    return None


def default_store_path(git_dir: str | None, configured: str | None, root: str) -> str | None:
    """`PARENTAGE_CACHE` wins, then the config's `cache`, then `<git dir>/parentage/`."""
    env = os.environ.get("PARENTAGE_CACHE")
    if env:
        return os.path.join(env, "store.sqlite")
    if configured:
        return os.path.join(root, configured, "store.sqlite")
    if git_dir:
        return os.path.join(git_dir, "parentage", "store.sqlite")
    return None
