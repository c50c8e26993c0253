"""`ChangeSet`: what a change did to the terms, found by comparing stanza digests first."""
from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from typing import Any, NamedTuple

from parentage.snapshot import STRUCTURE_FIELDS, Ontology, Term

FIELDS = ("structure", "parents", "relationships", "name", "synonyms", "disjointness",
          "obsolescence", "other")


class ChangeSet(NamedTuple):
    added: tuple[str, ...]
    removed: tuple[str, ...]
    obsoleted: tuple[str, ...]
    edited: tuple[str, ...]
    fields: Mapping[str, tuple[str, ...]]  # edited or obsoleted id -> changed FIELDS
    moved: Mapping[str, tuple[str, str]]  # id -> (base path, head path) when its file changed

    def to_json(self) -> dict[str, Any]:
        return {"added": list(self.added), "removed": list(self.removed),
                "obsoleted": list(self.obsoleted), "edited": list(self.edited)}

    @property
    def touched(self) -> tuple[str, ...]:
        return self.added + self.obsoleted + self.edited


def changed_fields(old: Term, new: Term, structure_props: frozenset[str]) -> tuple[str, ...]:
    """Which FIELDS differ between two versions of one term."""
    out = []

    def props(term: Term, inside: bool) -> list[tuple[str, str]]:
        return sorted(p for p in term.properties if (p[0] in structure_props) == inside)

    if props(old, True) != props(new, True):
        out.append("structure")
    if sorted(old.parents) != sorted(new.parents):
        out.append("parents")
    if sorted(old.relationships) != sorted(new.relationships):
        out.append("relationships")
    if old.name != new.name:
        out.append("name")
    if sorted(old.synonyms) != sorted(new.synonyms):
        out.append("synonyms")
    if sorted(old.disjoint_from) != sorted(new.disjoint_from):
        out.append("disjointness")
    if (old.obsolete, sorted(old.replaced_by), sorted(old.consider)) != \
            (new.obsolete, sorted(new.replaced_by), sorted(new.consider)):
        out.append("obsolescence")
    if (sorted(old.xrefs), props(old, False), sorted(old.other)) != \
            (sorted(new.xrefs), props(new, False), sorted(new.other)):
        out.append("other")
    if not out and old.content != new.content:
        # A detail our records do not model (a synonym's type or xrefs, a definition's xrefs,
        # qualifiers, datatypes) changed: still an edit.
        out.append("other")
    return tuple(out)


def structure_properties(mapping: Mapping[str, Iterable[str]]) -> frozenset[str]:
    return frozenset(name for field in STRUCTURE_FIELDS for name in mapping.get(field, ()))


def diff_ontologies(base: Ontology, head: Ontology,
                    mapping: Mapping[str, Iterable[str]] | None = None) -> ChangeSet:
    """Compare term by term. Equal digests (same stanza text) are never compared field by field."""
    props = structure_properties(mapping or {f: (f,) for f in STRUCTURE_FIELDS})
    old_terms, new_terms = base.terms, head.terms
    maybe = _candidates(base, head)
    if maybe is None:
        head_ids: Iterable[str] = new_terms
        base_ids: Iterable[str] = old_terms
    else:
        head_ids = sorted((t for t in maybe if t in new_terms), key=new_terms.index.__getitem__)
        base_ids = sorted((t for t in maybe if t in old_terms), key=old_terms.index.__getitem__)
    added = tuple(t for t in head_ids if t not in old_terms)
    removed = tuple(t for t in base_ids if t not in new_terms)
    obsoleted: list[str] = []
    edited: list[str] = []
    fields: dict[str, tuple[str, ...]] = {}
    moved: dict[str, tuple[str, str]] = {}
    old_digest, new_digest = base.merged.digest_of, head.merged.digest_of
    for tid in head_ids:
        if tid not in old_terms:
            continue
        if base.path_of[tid] != head.path_of[tid]:
            moved[tid] = (base.path_of[tid], head.path_of[tid])
        if old_digest(tid) == new_digest(tid):
            continue  # same stanza text: no need to decode either version
        old, new = old_terms[tid], new_terms[tid]
        what = changed_fields(old, new, props)
        if not what:
            continue  # only layout or clause order changed
        fields[tid] = what
        if new.obsolete and not old.obsolete:
            obsoleted.append(tid)
        else:
            edited.append(tid)
    return ChangeSet(added, removed, tuple(obsoleted), tuple(edited), fields, moved)


def _candidates(base: Ontology, head: Ontology) -> set[str] | None:
    """Ids that may differ between the two sides, found without visiting every term.

    A head file built from its base file by copying runs of stanzas (`Snapshot.copied`) can
    differ only in the terms outside those runs, on either side; an identical file in none;
    any other file in all of its terms. None when a side has duplicate ids (compare all).
    """
    if any(len(s.terms.index) != len(s.terms.ids) for s in (*base.snapshots, *head.snapshots)):
        return None
    old_files = {s.path: s for s in base.snapshots}
    out: set[str] = set()
    for snap in head.snapshots:
        old = old_files.pop(snap.path, None)
        if old is not None and old.blob is not None and old.blob == snap.blob:
            continue
        origin = snap.base
        if old is None or origin is None or (origin.blob, origin.path) != (old.blob, old.path):
            out.update(snap.terms.ids)
            if old is not None:
                out.update(old.terms.ids)
            continue
        in_head = bytearray(len(snap.terms.ids))
        in_base = bytearray(len(old.terms.ids))
        for at, start, count in snap.copied:
            in_head[at:at + count] = b"\x01" * count
            in_base[start:start + count] = b"\x01" * count
        for covered, ids in ((in_head, snap.terms.ids), (in_base, old.terms.ids)):
            n = covered.find(0)
            while n != -1:
                out.add(ids[n])
                n = covered.find(0, n + 1)
    for old in old_files.values():
        out.update(old.terms.ids)
    return out


CLASS_FIELDS = frozenset({"parents", "relationships", "disjointness", "obsolescence"})


def affected_terms(base: Ontology, head: Ontology, changes: ChangeSet,
                   rule_changed: Iterable[str], is_structured: Callable[[Term], bool]) -> tuple[str, ...]:
    """The live head terms a review must look at, in a stable order.

    - every added or edited term;
    - every descendant of a class whose parents, relationships, disjointness or obsolescence
      changed, at either end (moving a class moves its members), and of the classes a changed
      disjoint_from axiom names;
    - every member of a class whose rule changed;
    - every term that points at a removed or obsoleted term.
    Only structured terms are kept, except that edited, added and pointing terms are kept even
    without a structure (hierarchy checks need no structure).
    """
    wanted: dict[str, None] = {}

    def add(tid: str, need_structure: bool) -> None:
        term = head.terms.get(tid)
        if term is None or term.obsolete:
            return
        if need_structure and not is_structured(term):
            return
        wanted[tid] = None

    for tid in changes.added + changes.edited:
        add(tid, False)
    classes: set[str] = set(rule_changed)
    for tid, what in changes.fields.items():
        if CLASS_FIELDS & set(what):
            classes.add(tid)
            for side in (base, head):
                term = side.terms.get(tid)
                if term is not None:
                    classes.update(term.disjoint_from)
    for cls in sorted(classes):
        for desc in sorted(head.descendants(cls) | base.descendants(cls)):
            add(desc, True)
    gone = set(changes.removed) | set(changes.obsoleted)
    if gone:
        for tid in head.terms.mentioning(gone):
            if any(target in gone for _, target in head.terms[tid].references()):
                add(tid, False)
    return tuple(wanted)
