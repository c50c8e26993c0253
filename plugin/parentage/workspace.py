"""One repository, its config and its store: ontologies and rule files at any side, cached."""
from __future__ import annotations

from collections.abc import Iterable

from parentage.config import Config, load_config
from parentage.errors import ParentageError
from parentage.parse import decode, parse_ontology_text
from parentage.revisions import EMPTY, Repository, Side
from parentage.snapshot import MAX_DERIVED_DEPTH, Ontology, Snapshot, StoredRows
from parentage.store import Store, default_store_path

ONTOLOGY_SUFFIXES = (".obo", ".json")
ROW_PAGE = 256  # stored rows per store entry


class Workspace:
    def __init__(self, start: str = ".", config_path: str | None = None,
                 store: Store | None = None) -> None:
        self.repo = Repository(start)
        self.root = self.repo.root
        self.config: Config = load_config(config_path, self.root)
        self.store = store or Store(default_store_path(self.repo.git_dir, self.config.cache, self.root))
        self._snapshots: dict[tuple[str, str], Snapshot] = {}

    def close(self) -> None:
        self.store.close()

    # -- which files -------------------------------------------------------------------------
    def ontology_paths(self, side: Side, only: Iterable[str] = ()) -> list[str]:
        """Configured ontology files at `side` (default: every tracked *.obo file)."""
        chosen = [p.replace("\\", "/").removeprefix("./") for p in only]
        if chosen:
            return chosen
        if self.config.ontologies:
            return self.repo.matching(side, self.config.ontologies)
        return [p for p in self.repo.list_files(side) if p.endswith(".obo")]

    def rule_files(self, side: Side) -> list[tuple[str, str]]:
        """(path, text) of every rule file the config names, as they are at `side`."""
        out = []
        for path in self.repo.matching(side, self.config.rules):
            version = self.repo.read(side, path)
            if version.data is not None:
                out.append((path, decode(version.data, path)))
        return out

    # -- snapshots ---------------------------------------------------------------------------
    def snapshot(self, side: Side, path: str, base: Snapshot | None = None) -> Snapshot | None:
        """The snapshot of `path` at `side`, or None where the file is absent."""
        version = self.repo.read(side, path, sha_only=True)
        if version.blob is None:
            return None
        snap = self._stored(version.blob, path)
        if snap is None:
            data = version.data if version.data is not None else self.repo.blob_bytes(version.blob)
            text = decode(data, path)
            snap = parse_ontology_text(text, path, version.blob, base, data=data)
            self._put(f"{version.blob}:{path}", snap)
            self._snapshots[(version.blob, path)] = snap
        return snap

    def _put(self, key: str, snap: Snapshot) -> None:
        columns, rows = snap.to_bytes()
        if rows is not None:
            # Rows in pages of ROW_PAGE, written before the columns that point at them: a
            # review reads the few pages its terms are on (class stanzas sit together).
            pages = ((str(n // ROW_PAGE), "\x1e".join(rows[n:n + ROW_PAGE]).encode("utf-8", "surrogatepass"))
                     for n in range(0, len(rows), ROW_PAGE))
            self.store.put_many_bytes(f"snapshot-rows:{key}", pages, compress=False)
        # A whole snapshot's columns are stored uncompressed: they are read on every warm run.
        self.store.put_bytes("snapshot", key, columns, compress=rows is None)

    def _rows(self, key: str, count: int) -> StoredRows:
        namespace = f"snapshot-rows:{key}"
        lost = ParentageError(f"the cache lost stored rows of {key.split(':', 1)[-1]}; delete "
                              "the cache folder and run again")
        pages: dict[int, list[str]] = {}

        def page(raw: bytes | None) -> list[str]:
            if raw is None:
                raise lost
            return raw.decode("utf-8", "surrogatepass").split("\x1e")

        def one(n: int) -> str:
            number = n // ROW_PAGE
            if number not in pages:
                pages[number] = page(self.store.get_bytes(namespace, str(number)))
            return pages[number][n % ROW_PAGE]

        def every() -> list[str]:
            found = self.store.get_all_bytes(namespace)
            out = [row for number in range(-(-count // ROW_PAGE)) for row in page(found.get(str(number)))]
            if len(out) != count:
                raise lost
            return out

        return StoredRows(one, every)

    def _stored(self, blob: str, path: str, depth: int = 0) -> Snapshot | None:
        """A snapshot from this run or from the store; a derived one brings its base along."""
        cached = self._snapshots.get((blob, path))
        if cached is not None:
            return cached
        raw = self.store.get_bytes("snapshot", f"{blob}:{path}")
        if raw is None:
            return None
        try:
            stored = Snapshot.unpack(raw)
            base_key = Snapshot.base_key(stored)
            base = None
            if base_key is not None:
                base = self._stored(*base_key, depth + 1) if depth < 2 * MAX_DERIVED_DEPTH else None
                if base is None:
                    return None  # its base is gone from the store: parse again
            rows = None
            if base_key is None and "rows" not in stored:
                rows = self._rows(f"{blob}:{path}", stored["ids"].count("\n") + 1 if stored["ids"] else 0)
            snap = Snapshot.from_json(stored, base, rows)
        except (KeyError, TypeError, ValueError, IndexError):
            return None  # an entry of another layout: parse again and replace it
        self._snapshots[(blob, path)] = snap
        return snap

    def ontology(self, side: Side, paths: Iterable[str] | None = None,
                 base: Ontology | None = None) -> Ontology:
        """Every ontology file at `side`, merged; with `base`, unchanged stanzas are reused."""
        if side.kind == EMPTY:
            return Ontology(side.name, ())
        chosen = list(paths) if paths is not None else self.ontology_paths(side)
        snaps = []
        for path in chosen:
            if not path.endswith(ONTOLOGY_SUFFIXES):
                continue
            earlier = None
            if base is not None:
                same = [s for s in base.snapshots if s.path == path]
                # A renamed file (one ontology each side) still reuses the old stanzas.
                earlier = same[0] if same else (base.snapshots[0] if len(base.snapshots) == 1 else None)
            snap = self.snapshot(side, path, earlier)
            if snap is not None:
                snaps.append(snap)
        return Ontology(side.name, snaps)

    def pair(self, base_side: Side, head_side: Side,
             only: Iterable[str] = ()) -> tuple[Ontology, Ontology]:
        only = list(only)
        for path in only:
            if (self.repo.read(base_side, path, sha_only=True).blob is None
                    and self.repo.read(head_side, path, sha_only=True).blob is None):
                raise ParentageError(f"{path}: no such file at {base_side.name} or {head_side.name}")
        base = self.ontology(base_side, self.ontology_paths(base_side, only) if base_side.kind != EMPTY else [])
        head = self.ontology(head_side, self.ontology_paths(head_side, only), base)
        if not base.snapshots and not head.snapshots and base_side.kind != EMPTY:
            raise ParentageError("no ontology files found: add an *.obo file or list them under "
                                 "'ontologies' in .parentage.yaml")
        return base, head

    def is_ontology_path(self, side: Side, path: str) -> bool:
        """True for *.obo files, and for *.json files that are configured or OBO Graphs JSON."""
        path = path.replace("\\", "/").removeprefix("./")
        if path.endswith(".obo"):
            return True
        if not path.endswith(".json"):
            return False
        if self.config.ontologies and path in self.repo.matching(side, self.config.ontologies):
            return True
        data = self.repo.read(side, path).data or b""
        return b'"graphs"' in data[:4096]

    def override_fail_on(self, kinds: str) -> None:
        """Replace the config's fail_on with a comma-separated list (the --fail-on option)."""
        from dataclasses import replace

        from parentage.findings import KINDS

        chosen = tuple(k.strip() for k in kinds.split(",") if k.strip())
        unknown = [k for k in chosen if k not in KINDS]
        if unknown:
            raise ParentageError(f"--fail-on: unknown finding kind {unknown[0]!r} (known: {', '.join(KINDS)})")
        self.config = replace(self.config, fail_on=chosen)
