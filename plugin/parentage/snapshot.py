"""Our own records of an ontology at one revision: `Term` and `Snapshot`.

The rest of the code sees these records, never pronto or fastobo objects. Parsing lives in
the private adapters `_obo.py` (fastobo) and `_obojson.py` (OBO Graphs JSON).
"""
from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from functools import cached_property
from typing import Any, NamedTuple

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


class Snapshot:
    """All terms of one ontology file at one revision; the hierarchy is computed lazily."""

    def __init__(self, path: str, blob: str | None, terms: Iterable[Term],
                 header: tuple[tuple[str, str], ...] = ()) -> None:
        self.path = path
        self.blob = blob
        self.header = header
        self.terms: dict[str, Term] = {}
        for term in terms:
            # A second stanza with the same id is kept as the later one; OBO merges them,
            # but for review purposes the later text is what a curator last wrote.
            self.terms[term.id] = term
        self._ancestors: dict[str, frozenset[str]] = {}

    def __len__(self) -> int:
        return len(self.terms)

    def __contains__(self, term_id: object) -> bool:
        return term_id in self.terms

    def get(self, term_id: str) -> Term | None:
        return self.terms.get(term_id)

    @cached_property
    def children(self) -> dict[str, tuple[str, ...]]:
        kids: dict[str, list[str]] = {}
        for term in self.terms.values():
            for parent in term.parents:
                kids.setdefault(parent, []).append(term.id)
        return {k: tuple(v) for k, v in kids.items()}

    def ancestors(self, term_id: str) -> frozenset[str]:
        """Every is_a ancestor (not the term itself). Safe on cycles and dangling parents."""
        known = self._ancestors.get(term_id)
        if known is not None:
            return known
        # Iterative depth-first walk; memoises every finished node. A node on a cycle sees
        # the cycle's members as ancestors (including possibly itself), which is what a
        # cycle means; `hierarchy-cycle` is reported by the structure tier.
        result: set[str] = set()
        stack = [term_id]
        seen = {term_id}
        while stack:
            current = stack.pop()
            term = self.terms.get(current)
            if term is None:
                continue
            for parent in term.parents:
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
        for term in self.terms.values():
            for clause, target in term.references():
                if target not in self.terms:
                    yield term, clause, target

    def live(self) -> Iterator[Term]:
        return (t for t in self.terms.values() if not t.obsolete)

    # -- serialisation for the store (JSON, never pickle) -------------------------------
    def to_json(self) -> dict[str, Any]:
        return {"path": self.path, "blob": self.blob, "header": list(self.header),
                "terms": [list(t) for t in self.terms.values()]}

    @classmethod
    def from_json(cls, data: Mapping[str, Any]) -> Snapshot:
        terms = []
        for row in data["terms"]:
            (tid, name, parents, rels, disj, obsolete, replaced, consider, syn, xrefs, props,
             other, line, end_line, digest, content) = row
            terms.append(Term(tid, name, tuple(parents), tuple(tuple(r) for r in rels),
                              tuple(disj), obsolete, tuple(replaced), tuple(consider),
                              tuple(tuple(s) for s in syn), tuple(xrefs),
                              tuple(tuple(p) for p in props), tuple(tuple(o) for o in other),
                              line, end_line, digest, content))
        return cls(data["path"], data["blob"], terms, tuple(tuple(h) for h in data["header"]))


class Ontology:
    """The union of the snapshots of every configured ontology file at one revision.

    Terms are keyed by id across files, so moving a term between files or renaming the file
    is not an add plus a remove.
    """

    def __init__(self, revision: str, snapshots: Iterable[Snapshot]) -> None:
        self.revision = revision
        self.snapshots = tuple(snapshots)
        merged: list[Term] = []
        self.path_of: dict[str, str] = {}
        for snap in self.snapshots:
            for term in snap.terms.values():
                merged.append(term)
                self.path_of[term.id] = snap.path
        self.merged = Snapshot("", None, merged)

    @property
    def terms(self) -> dict[str, Term]:
        return self.merged.terms

    @property
    def paths(self) -> tuple[str, ...]:
        return tuple(s.path for s in self.snapshots)

    def ancestors(self, term_id: str) -> frozenset[str]:
        return self.merged.ancestors(term_id)

    def descendants(self, term_id: str) -> frozenset[str]:
        return self.merged.descendants(term_id)
