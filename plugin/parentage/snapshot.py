"""Our own records of an ontology at one revision: `Term` and `Snapshot`.

The rest of the code sees these records, never pronto or fastobo objects. Parsing lives in
the private adapters `_obo.py` (fastobo) and `_obojson.py` (OBO Graphs JSON).
"""
from __future__ import annotations

import json
from array import array
from bisect import bisect_right
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from functools import cached_property
from itertools import accumulate, repeat
from typing import Any, NamedTuple, overload

STRUCTURE_FIELDS = ("smiles", "inchi", "inchikey", "formula", "mass", "monoisotopic_mass", "charge")


class Term(NamedTuple):
    """One term stanza. Tuples keep the file's order; references may dangle."""

    id: str
    name: str | None = None
    parents: tuple[str, ...] = ()  # is_a targets
    relationships: tuple[tuple[str, str], ...] = ()  # (relation, target)
    disjoint_from: tuple[str, ...] = ()
    obsolete: bool = False
    replaced_by: tuple[str, ...] = ()
    consider: tuple[str, ...] = ()
    synonyms: tuple[tuple[str, str, str, str], ...] = ()  # (text, scope, type, xrefs)
    xrefs: tuple[str, ...] = ()
    properties: tuple[tuple[str, str], ...] = ()  # (property, value)
    other: tuple[tuple[str, str], ...] = ()  # every other clause: (tag, raw value)
    line: int = 0  # first line of the stanza, 1-based
    end_line: int = 0  # last non-blank line of the stanza
    digest: str = ""  # hash of the raw stanza text
    content: str = ""  # hash of the clauses as parsed, order-free (every detail of every clause)

    def property_values(self, names: Iterable[str]) -> tuple[str, ...]:
        wanted = set(names)
        return tuple(value for prop, value in self.properties if prop in wanted)

    def references(self) -> Iterator[tuple[str, str]]:
        """Every (clause, target id) this term points at."""
        for parent in self.parents:
            yield "is_a", parent
        for relation, target in self.relationships:
            yield relation, target
        for target in self.disjoint_from:
            yield "disjoint_from", target
        for target in self.replaced_by:
            yield "replaced_by", target


class Structure(NamedTuple):
    """The structure annotations of a term, as written (strings, unparsed)."""

    smiles: str | None = None
    inchi: str | None = None
    inchikey: str | None = None
    formula: str | None = None
    mass: str | None = None
    monoisotopic_mass: str | None = None
    charge: str | None = None


def read_structure(term: Term, mapping: Mapping[str, Iterable[str]]) -> Structure:
    """The first value of each structure field, under the property names `mapping` gives."""
    fields: dict[str, str | None] = {}
    for field in STRUCTURE_FIELDS:
        values = term.property_values(mapping.get(field, ()))
        fields[field] = values[0].strip() if values else None
    return Structure(**fields)


# Fields of a Term kept in a stored row; id, parents, obsolete, line, end_line and digest are
# columns beside the rows, so a warm load can diff and walk the hierarchy without decoding.
_ROW_FIELDS = ("name", "relationships", "disjoint_from", "replaced_by", "consider", "synonyms",
               "xrefs", "properties", "other", "content")


def _tuples(value: Any) -> tuple[Any, ...]:
    return tuple(tuple(v) if isinstance(v, list) else v for v in value)


class ParentColumn(Sequence[tuple[str, ...]]):
    """The is_a targets of every term, kept as tab-joined strings and split on access: a warm
    load then splits one string, not one per term. OBO ids hold no whitespace."""

    __slots__ = ("raw",)

    def __init__(self, raw: list[str]) -> None:
        self.raw = raw

    @classmethod
    def of(cls, parents: Iterable[tuple[str, ...]]) -> ParentColumn:
        return cls(["\t".join(p) for p in parents])

    @overload
    def __getitem__(self, n: int) -> tuple[str, ...]: ...
    @overload
    def __getitem__(self, n: slice) -> ParentColumn: ...
    def __getitem__(self, n: int | slice) -> tuple[str, ...] | ParentColumn:
        if isinstance(n, slice):
            return ParentColumn(self.raw[n])
        text = self.raw[n]
        return tuple(text.split("\t")) if text else ()

    def __len__(self) -> int:
        return len(self.raw)

    def named(self) -> frozenset[str]:
        """Every id named as a parent by some term."""
        return frozenset("\t".join(self.raw).split("\t")) - {""}


class Shifted(Sequence[Any]):
    """A column made of runs of other columns, each run's values moved by a constant: the
    line numbers and offsets of a head built from its base. A run costs O(1) to add, and a
    value is computed when asked for, so a 50,000-term head does not rebuild its lines."""

    def __init__(self) -> None:
        self._at: list[int] = []  # first position of each run
        self._runs: list[tuple[Sequence[Any], int, int, int]] = []  # (source, start, count, shift)
        self._size = 0
        self._tail: list[Any] = []  # values added one by one since the last run

    def _close_tail(self) -> None:
        if self._tail:
            tail, self._tail = self._tail, []
            self._at.append(self._size - len(tail))
            self._runs.append((tail, 0, len(tail), 0))

    def add(self, source: Sequence[Any], start: int, count: int, shift: int) -> None:
        if count <= 0:
            return
        self._close_tail()
        if isinstance(source, Shifted):
            for sub, sub_start, sub_count, sub_shift in source._pieces(start, start + count):
                self._at.append(self._size)
                self._runs.append((sub, sub_start, sub_count, sub_shift + shift))
                self._size += sub_count
            return
        self._at.append(self._size)
        self._runs.append((source, start, count, shift))
        self._size += count

    def append(self, value: Any) -> None:
        self._tail.append(value)
        self._size += 1

    def _pieces(self, start: int, stop: int) -> Iterator[tuple[Sequence[Any], int, int, int]]:
        self._close_tail()
        k = max(bisect_right(self._at, start) - 1, 0)
        while k < len(self._runs) and self._at[k] < stop:
            source, first, count, shift = self._runs[k]
            lo, hi = max(start, self._at[k]), min(stop, self._at[k] + count)
            if hi > lo:
                yield source, first + lo - self._at[k], hi - lo, shift
            k += 1

    @staticmethod
    def _moved(value: Any, shift: int) -> Any:
        if not shift:
            return value
        return (value[0] + shift, value[1] + shift) if isinstance(value, tuple) else value + shift

    @overload
    def __getitem__(self, n: int) -> Any: ...
    @overload
    def __getitem__(self, n: slice) -> list[Any]: ...
    def __getitem__(self, n: int | slice) -> Any:
        if isinstance(n, slice):
            return list(self)[n]
        if n < 0:
            n += self._size
        if not 0 <= n < self._size:
            raise IndexError(n)
        self._close_tail()
        k = bisect_right(self._at, n) - 1
        source, first, _count, shift = self._runs[k]
        return self._moved(source[first + n - self._at[k]], shift)

    def __iter__(self) -> Iterator[Any]:
        self._close_tail()
        moved = self._moved
        for source, first, count, shift in self._runs:
            part = source[first:first + count]
            yield from (part if not shift else (moved(v, shift) for v in part))

    def __len__(self) -> int:
        return self._size

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Sequence) and list(self) == list(other)

    __hash__ = None  # type: ignore[assignment]


class StoredRows:
    """The rows of a whole snapshot left in the store, read when a term is first asked for.

    `one(n)` reads row n; `every()` reads them all at once (for the rare whole-table scan).
    """

    def __init__(self, one: Callable[[int], str], every: Callable[[], list[str]]) -> None:
        self.one, self._every = one, every
        self._all: list[str] | None = None

    def row(self, n: int) -> str:
        return self._all[n] if self._all is not None else self.one(n)

    def every(self) -> list[str]:
        if self._all is None:
            self._all = self._every()
        return self._all


def _text_of(row: Any) -> str:
    """A row's JSON text: it is a string, or (StoredRows, position)."""
    return row if isinstance(row, str) else row[0].row(row[1])


class TermTable(Mapping[str, Term]):
    """id -> Term, decoding stored rows only when a term is asked for.

    Cheap columns (parents, digest, obsolete flag, line) answer the questions a warm review
    asks of every term; a full `Term` is built from its JSON row on first access. A row is a
    `Term`, its JSON text, or (StoredRows, position) while it is still in the store.
    """

    def __init__(self, ids: list[str], parents: Iterable[tuple[str, ...]] | ParentColumn,
                 obsolete: list[bool], lines: Sequence[tuple[int, int]], digests: list[str],
                 rows: list[Any]) -> None:
        self.ids = ids
        self.parents = parents if isinstance(parents, ParentColumn) else ParentColumn.of(parents)
        self.obsolete = obsolete
        self.lines = lines
        self.digests = digests
        self.rows = rows
        self.index = dict(zip(ids, range(len(ids))))  # later duplicates win

    @classmethod
    def of(cls, terms: Iterable[Term]) -> TermTable:
        chosen: dict[str, Term] = {}
        for term in terms:
            # A second stanza with the same id is kept as the later one; OBO merges them,
            # but for review purposes the later text is what a curator last wrote.
            chosen[term.id] = term
        values = list(chosen.values())
        return cls([t.id for t in values], [t.parents for t in values], [t.obsolete for t in values],
                   [(t.line, t.end_line) for t in values], [t.digest for t in values], list(values))

    def __getitem__(self, tid: str) -> Term:
        n = self.index[tid]
        row = self.rows[n]
        if isinstance(row, Term):
            line, end = self.lines[n]
            if (row.line, row.end_line) != (line, end):
                # A row copied from the base at another place: its lines are the column's.
                row = row._replace(line=line, end_line=end)
                self.rows[n] = row
            return row
        data = json.loads(_text_of(row))
        term = Term(tid, data[0], self.parents[n], _tuples(data[1]), tuple(data[2]), self.obsolete[n],
                    tuple(data[3]), tuple(data[4]), _tuples(data[5]), tuple(data[6]),
                    _tuples(data[7]), _tuples(data[8]), self.lines[n][0], self.lines[n][1],
                    self.digests[n], data[9])
        self.rows[n] = term
        return term

    def __iter__(self) -> Iterator[str]:
        if len(self.index) == len(self.ids):
            return iter(self.ids)
        return iter(self.index)

    def __len__(self) -> int:
        return len(self.index)

    def __contains__(self, tid: object) -> bool:
        return tid in self.index

    def mentioning(self, ids: set[str]) -> Iterator[str]:
        """Terms that may refer to one of `ids`: a superset, found without decoding rows.

        A parent column hit is certain; a stored row is a candidate when an id occurs in its
        text (the caller confirms on the decoded term).
        """
        written = {json.dumps(i)[1:-1] for i in ids}  # as the ASCII JSON rows spell them
        self.prefetch()
        for tid, n in self.index.items():
            row = self.rows[n]
            if type(row) is tuple:
                row = _text_of(row)
            if any(p in ids for p in self.parents[n]):
                yield tid
            elif isinstance(row, Term):
                if any(target in ids for _, target in row.references()):
                    yield tid
            elif any(i in row for i in written):
                yield tid

    def prefetch(self) -> None:
        """Read every row still in the store at once (before visiting every term)."""
        for source in {row[0] for row in self.rows if type(row) is tuple}:  # a Term is a tuple too
            source.every()

    def row_of(self, tid: str) -> str:
        """The stored JSON row of a term (its non-column fields)."""
        row = self.rows[self.index[tid]]
        if isinstance(row, Term):
            return json.dumps([getattr(row, f) for f in _ROW_FIELDS], separators=(",", ":"))
        return _text_of(row)


class Layout(NamedTuple):
    """Where each stanza of an OBO file starts (offset in the normalised text, 1-based line) and
    whether it is a Term stanza. Kept so the next revision can be compared block by block."""

    starts: Sequence[int]
    lines: Sequence[int]
    terms: list[bool]
    blocks: Sequence[str] = ()  # digest of each run of parse.BLOCK stanzas' text
    size: int = 0  # length of the normalised text
    header: str = ""  # digest of the text before the first stanza

    def first_terms(self) -> list[int]:
        """The term-table position of each stanza (of the next Term, for other stanzas), and
        the number of terms at the end."""
        return list(accumulate(self.terms, initial=0))


# A head built from a base: runs of base stanzas copied unchanged, and new stanzas.
# ("copy", first base stanza, count, offset shift, line shift) | ("new", offset, line, Term | None)
Segment = tuple[Any, ...]

# A derived snapshot is stored as its segments; a chain longer than this is stored whole.
MAX_DERIVED_DEPTH = 8


class Snapshot:
    """All terms of one ontology file at one revision; the hierarchy is computed lazily."""

    def __init__(self, path: str, blob: str | None, terms: Iterable[Term] | TermTable,
                 header: tuple[tuple[str, str], ...] = (), layout: Layout | None = None) -> None:
        self.path = path
        self.blob = blob
        self.header = header
        self.layout = layout
        self._disjoint: dict[str, tuple[str, ...]] | None = None  # see `disjoint`
        if isinstance(terms, TermTable):
            self.terms: TermTable = terms
        else:
            self.terms = TermTable.of(terms)
            self.disjoint  # every row is a Term: the axioms cost one pass now  # noqa: B018
        # Set when built from a base by copying runs of its stanzas (see `derived`).
        self.base: Snapshot | None = None
        self.segments: list[Segment] = []
        self.copied: list[tuple[int, int, int]] = []  # (head position, base position, count)
        self.depth = 0
        self._ancestors: dict[str, frozenset[str]] = {}

    @property
    def reusable(self) -> bool:
        """True when a later revision can be compared with this one block by block."""
        return self.layout is not None and len(self.terms) == sum(self.layout.terms)

    def __len__(self) -> int:
        return len(self.terms)

    def __contains__(self, term_id: object) -> bool:
        return term_id in self.terms

    def get(self, term_id: str) -> Term | None:
        return self.terms.get(term_id)

    def parents_of(self, term_id: str) -> tuple[str, ...]:
        n = self.terms.index.get(term_id)
        return self.terms.parents[n] if n is not None else ()

    def digest_of(self, term_id: str) -> str | None:
        n = self.terms.index.get(term_id)
        return self.terms.digests[n] if n is not None else None

    def is_obsolete(self, term_id: str) -> bool:
        n = self.terms.index.get(term_id)
        return n is not None and self.terms.obsolete[n]

    @property
    def disjoint(self) -> dict[str, tuple[str, ...]]:
        """id -> disjoint_from targets, for the terms that declare any (a few, usually): kept
        beside the columns so the axioms of the whole file are known without decoding rows."""
        if self._disjoint is None:
            self.terms.prefetch()
            self._disjoint = {t.id: t.disjoint_from for t in self.terms.values() if t.disjoint_from}
        return self._disjoint

    def disjoint_of(self, term_id: str) -> tuple[str, ...]:
        return self.disjoint.get(term_id, ())

    @property
    def known_disjoint(self) -> dict[str, tuple[str, ...]] | None:
        """The axioms if already known (stored, or carried from a base), else None."""
        return self._disjoint

    @known_disjoint.setter
    def known_disjoint(self, value: dict[str, tuple[str, ...]]) -> None:
        self._disjoint = value

    @cached_property
    def parent_ids(self) -> frozenset[str]:
        """Every id some term names as a parent (cheaper than the children map)."""
        return self.terms.parents.named()

    @cached_property
    def children(self) -> dict[str, tuple[str, ...]]:
        kids: dict[str, list[str]] = {}
        table = self.terms
        for tid, n in table.index.items():
            for parent in table.parents[n]:
                kids.setdefault(parent, []).append(tid)
        return {k: tuple(v) for k, v in kids.items()}

    def ancestors(self, term_id: str) -> frozenset[str]:
        """Every is_a ancestor (not the term itself). Safe on cycles and dangling parents."""
        known = self._ancestors.get(term_id)
        if known is not None:
            return known
        # Iterative depth-first walk; memoises every finished node. A node on a cycle sees
        # the cycle's members as ancestors (including possibly itself), which is what a
        # cycle means; `hierarchy-cycle` is reported by the hierarchy checks.
        result: set[str] = set()
        stack = [term_id]
        seen = {term_id}
        index, parents = self.terms.index, self.terms.parents
        while stack:
            current = stack.pop()
            n = index.get(current)
            if n is None:
                continue
            for parent in parents[n]:
                result.add(parent)
                done = self._ancestors.get(parent)
                if done is not None:
                    result.update(done)
                elif parent not in seen:
                    seen.add(parent)
                    stack.append(parent)
        frozen = frozenset(result)
        self._ancestors[term_id] = frozen
        return frozen

    def descendants(self, term_id: str) -> frozenset[str]:
        if term_id not in self.parent_ids:
            return frozenset()  # a leaf: no need to build the children map
        result: set[str] = set()
        stack = [term_id]
        while stack:
            for child in self.children.get(stack.pop(), ()):
                if child not in result:
                    result.add(child)
                    stack.append(child)
        result.discard(term_id)
        return frozenset(result)

    def dangling(self) -> Iterator[tuple[Term, str, str]]:
        """(term, clause, target) for every reference to an id this snapshot does not define."""
        self.terms.prefetch()
        for term in self.terms.values():
            for clause, target in term.references():
                if target not in self.terms:
                    yield term, clause, target

    def live(self) -> Iterator[Term]:
        table = self.terms
        table.prefetch()
        return (table[t] for t, n in table.index.items() if not table.obsolete[n])

    # -- serialisation for the store (JSON, never pickle) -------------------------------
    def to_json(self) -> dict[str, Any]:
        """The store form. A snapshot derived from a stored base is kept as its segments; a
        whole one keeps each column as one string (JSON decodes a few long strings far faster
        than 50,000 short ones). Ids and parent ids hold no whitespace in OBO, and rows are
        ASCII JSON, so newline, tab and the record separator cannot occur inside them."""
        if self.base is not None and self.depth <= MAX_DERIVED_DEPTH:
            layout = self.layout
            assert layout is not None
            return {"path": self.path, "blob": self.blob, "header": list(self.header),
                    "base": [self.base.blob, self.base.path],
                    "blocks": [list(layout.blocks), layout.size, layout.header],
                    "segments": [list(seg[:3]) + [_term_to_list(seg[3]) if seg[3] else None]
                                 if seg[0] == "new" else list(seg) for seg in self.segments]}
        table = self.terms
        ids = list(table)
        pos = [table.index[t] for t in ids]
        layout = self.layout
        return {"path": self.path, "blob": self.blob, "header": list(self.header),
                "ids": "\n".join(ids),
                "parents": "\n".join(table.parents.raw[n] for n in pos),
                "obsolete": "".join("1" if table.obsolete[n] else "0" for n in pos),
                "lines": [x for n in pos for x in table.lines[n]],
                "digests": "\n".join(table.digests[n] for n in pos),
                "rows": "\x1e".join(table.row_of(t) for t in ids),
                "disjoint": self.disjoint,
                "layout": None if layout is None else
                [list(layout.starts), list(layout.lines), "".join("1" if t else "0" for t in layout.terms),
                 list(layout.blocks), layout.size, layout.header]}

    @classmethod
    def from_json(cls, data: Mapping[str, Any], base: Snapshot | None = None,
                  rows: StoredRows | None = None) -> Snapshot:
        """Rebuild a stored snapshot; a derived one needs its `base` (see `base_key`), a whole
        one stored without its rows needs them as `rows`."""
        if "segments" in data:
            if base is None:
                raise ValueError("a derived snapshot needs its base")
            segments = [tuple(seg[:3]) + (_term_from_list(seg[3]) if seg[3] else None,)
                        if seg[0] == "new" else tuple(seg) for seg in data["segments"]]
            snap = derived(data["path"], data["blob"], tuple(tuple(h) for h in data["header"]),
                           base, segments)
            blocks, size, header = data["blocks"]
            assert snap.layout is not None
            snap.layout = snap.layout._replace(blocks=blocks, size=size, header=header)
            return snap
        ids = data["ids"].split("\n") if data["ids"] else []
        parents = ParentColumn(data["parents"].split("\n") if ids else [])
        flat = data["lines"]
        lines = list(zip(flat[0::2], flat[1::2]))
        if rows is not None:
            kept: list[Any] = list(zip(repeat(rows), range(len(ids))))  # tuples made in C
        else:
            kept = data["rows"].split("\x1e") if ids else []
        table = TermTable(ids, parents, list(map("1".__eq__, data["obsolete"])), lines,
                          data["digests"].split("\n") if ids else [], kept)
        stored = data.get("layout")
        layout = None if stored is None else Layout(stored[0], stored[1], list(map("1".__eq__, stored[2])),
                                                    stored[3], stored[4], stored[5])
        snap = cls(data["path"], data["blob"], table, tuple(tuple(h) for h in data["header"]), layout)
        if "disjoint" in data:
            snap._disjoint = {k: tuple(v) for k, v in data["disjoint"].items()}
        return snap

    def to_bytes(self) -> tuple[bytes, list[str] | None]:
        """The store form as bytes, and the rows to store one per term (None when they are
        inside). A derived snapshot is JSON with its new terms inside; a whole one is a JSON
        head followed by its columns as plain text sections (decoding them as JSON strings
        cost most of a warm load), its rows kept apart so a review reads only the few it
        decodes."""
        data = self.to_json()
        if "segments" in data:
            return b"J" + json.dumps(data, separators=(",", ":")).encode(), None
        rows = data.pop("rows").split("\x1e") if data["ids"] else []
        parts = [data.pop(name).encode("utf-8", "surrogatepass") for name in _SECTIONS]
        # Line numbers and offsets as machine integers: JSON lists of 200,000 numbers took a
        # tenth of a second to read back on every warm run.
        numbers = [data["lines"]] + ([data["layout"][0], data["layout"][1]] if data["layout"] else [])
        data["lines"] = None
        if data["layout"]:
            data["layout"][0] = data["layout"][1] = None
        parts += [array("q", values).tobytes() for values in numbers]
        data["sections"] = [len(p) for p in parts]
        head = json.dumps(data, separators=(",", ":")).encode()
        return b"S" + len(head).to_bytes(8, "little") + head + b"".join(parts), rows

    @staticmethod
    def unpack(raw: bytes) -> dict[str, Any]:
        """What `to_bytes` wrote, as the mapping `from_json` and `base_key` read."""
        if raw[:1] == b"J":
            return dict(json.loads(raw[1:]))
        if raw[:1] != b"S":
            raise ValueError("not a stored snapshot")
        size = int.from_bytes(raw[1:9], "little")
        data = dict(json.loads(raw[9:9 + size]))
        at = 9 + size
        lengths = data.pop("sections")
        for name, length in zip(_SECTIONS, lengths):
            data[name] = raw[at:at + length].decode("utf-8", "surrogatepass")
            at += length
        numbers = []
        for length in lengths[len(_SECTIONS):]:
            values = array("q")
            values.frombytes(raw[at:at + length])
            numbers.append(values.tolist())
            at += length
        data["lines"] = numbers[0]
        if data["layout"]:
            data["layout"][0], data["layout"][1] = numbers[1], numbers[2]
        return data

    @staticmethod
    def base_key(data: Mapping[str, Any]) -> tuple[str, str] | None:
        """(blob, path) of the base a stored derived snapshot needs, or None for a whole one."""
        return tuple(data["base"]) if "segments" in data else None  # type: ignore[return-value]


_SECTIONS = ("ids", "parents", "obsolete", "digests")


def _term_to_list(term: Term) -> list[Any]:
    return list(term)


def _term_from_list(data: list[Any]) -> Term:
    return Term(data[0], data[1], tuple(data[2]), _tuples(data[3]), tuple(data[4]), data[5],
                tuple(data[6]), tuple(data[7]), _tuples(data[8]), tuple(data[9]), _tuples(data[10]),
                _tuples(data[11]), *data[12:])


def derived(path: str, blob: str | None, header: tuple[tuple[str, str], ...], base: Snapshot,
            segments: list[Segment]) -> Snapshot:
    """The snapshot made of `segments` over `base` (which must be `reusable`).

    Copied runs take the base's columns as slices (rows stay undecoded); only line numbers
    are shifted. The result remembers which of its terms were copied, so a diff against the
    base looks at the rest only.
    """
    assert base.layout is not None
    old, layout = base.terms, base.layout
    first_term = layout.first_terms()
    ids: list[str] = []
    parents: list[str] = []  # tab-joined, as ParentColumn keeps them
    obsolete: list[bool] = []
    lines = Shifted()
    digests: list[str] = []
    rows: list[Any] = []
    starts = Shifted()
    stanza_lines = Shifted()
    flags: list[bool] = []
    copied: list[tuple[int, int, int]] = []
    for seg in segments:
        if seg[0] == "copy":
            _, k, n, shift, line_shift = seg
            p, q = first_term[k], first_term[k + n]
            if q > p:
                copied.append((len(ids), p, q - p))
            ids += old.ids[p:q]
            parents += old.parents.raw[p:q]
            obsolete += old.obsolete[p:q]
            digests += old.digests[p:q]
            # A decoded Term row keeps its old lines; TermTable takes them from `lines`.
            rows += old.rows[p:q]
            lines.add(old.lines, p, q - p, line_shift)
            stanza_lines.add(layout.lines, k, n, line_shift)
            starts.add(layout.starts, k, n, shift)
            flags += layout.terms[k:k + n]
        else:
            _, offset, line, term = seg
            starts.append(offset)
            stanza_lines.append(line)
            flags.append(term is not None)
            if term is not None:
                ids.append(term.id)
                parents.append("\t".join(term.parents))
                obsolete.append(term.obsolete)
                lines.append((term.line, term.end_line))
                digests.append(term.digest)
                rows.append(term)
    snap = Snapshot(path, blob, TermTable(ids, ParentColumn(parents), obsolete, lines, digests, rows), header,
                    Layout(starts, stanza_lines, flags))
    snap.base = base
    snap.segments = segments
    snap.copied = copied
    snap.depth = base.depth + 1
    if base._disjoint is not None:
        news = [seg[3].id for seg in segments if seg[0] == "new" and seg[3] is not None]
        snap._disjoint = carried_axioms(snap.terms, base._disjoint, news)
    return snap


def carried_axioms(table: TermTable, before: Mapping[str, tuple[str, ...]],
                   fresh: Iterable[str]) -> dict[str, tuple[str, ...]]:
    """The disjointness axioms of a table built from a base's rows and freshly parsed terms.

    Only ids the base declared axioms for (`before`) or that were parsed again (`fresh`) can
    have any. Each id resolves to one row (a later duplicate wins): a decoded or parsed `Term`
    brings its own axioms, a row still in its stored form is a copy of the base's stanza.
    """
    out = {}
    for tid in (*before, *fresh):
        n = table.index.get(tid)
        if n is None:
            continue
        row = table.rows[n]
        targets = row.disjoint_from if isinstance(row, Term) else before.get(tid, ())
        if targets:
            out[tid] = targets
    return out


class _OnePath(Mapping[str, str]):
    """term id -> file, for an ontology of one file (no dict of every id)."""

    def __init__(self, snap: Snapshot) -> None:
        self.snap = snap

    def __getitem__(self, tid: str) -> str:
        if tid not in self.snap.terms:
            raise KeyError(tid)
        return self.snap.path

    def __iter__(self) -> Iterator[str]:
        return iter(self.snap.terms)

    def __len__(self) -> int:
        return len(self.snap.terms)


class Ontology:
    """The union of the snapshots of every configured ontology file at one revision.

    Terms are keyed by id across files, so moving a term between files or renaming the file
    is not an add plus a remove.
    """

    def __init__(self, revision: str, snapshots: Iterable[Snapshot]) -> None:
        self.revision = revision
        self.snapshots = tuple(snapshots)
        self.path_of: Mapping[str, str]
        if len(self.snapshots) == 1:
            self.path_of = _OnePath(self.snapshots[0])
        else:
            self.path_of = {tid: snap.path for snap in self.snapshots for tid in snap.terms}
        if len(self.snapshots) == 1:
            self.merged = self.snapshots[0]
        else:
            tables = [s.terms for s in self.snapshots]
            rows = [(t, n) for t in tables for n in t.index.values()]
            self.merged = Snapshot("", None, TermTable(
                [t.ids[n] for t, n in rows], ParentColumn([t.parents.raw[n] for t, n in rows]),
                [t.obsolete[n] for t, n in rows], [t.lines[n] for t, n in rows],
                [t.digests[n] for t, n in rows], [t.rows[n] for t, n in rows]))

    @property
    def terms(self) -> TermTable:
        return self.merged.terms

    @property
    def paths(self) -> tuple[str, ...]:
        return tuple(s.path for s in self.snapshots)

    def ancestors(self, term_id: str) -> frozenset[str]:
        return self.merged.ancestors(term_id)

    def disjoint_of(self, term_id: str) -> tuple[str, ...]:
        """The disjoint_from targets a term declares, without decoding it."""
        if len(self.snapshots) == 1:
            return self.snapshots[0].disjoint_of(term_id)
        path = self.path_of.get(term_id)
        found = [s for s in self.snapshots if s.path == path]
        return found[0].disjoint_of(term_id) if found else ()

    def descendants(self, term_id: str) -> frozenset[str]:
        return self.merged.descendants(term_id)
