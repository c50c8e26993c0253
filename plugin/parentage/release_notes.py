"""What changed in the classification between two releases, as a `Notes` record.

A *member* of a class is a live structured term with that class among its ancestors. Rules are
taken as plain dicts, as read from the YAML rule files; `report/notes.py` renders the record.
"""
from __future__ import annotations

import json
from collections.abc import Iterable, Mapping, Sequence
from typing import Any, NamedTuple

from parentage.changes import diff_ontologies
from parentage.snapshot import Ontology, Term, read_structure

Rule = Mapping[str, Any]
# Either {class id: [rule, ...]} or a flat list of rules that each name their "class".
Rules = Mapping[str, Sequence[Rule]] | Sequence[Rule]


class Count(NamedTuple):
    what: str
    base: int
    head: int


class TermGroup(NamedTuple):
    top: str  # the most general non-root ancestor; "" for terms with none
    terms: tuple[str, ...]


class Move(NamedTuple):
    term: str
    before: tuple[str, ...]  # is_a parents at base
    after: tuple[str, ...]  # is_a parents at head


class MemberChange(NamedTuple):
    cls: str
    before: int
    after: int
    gained: tuple[str, ...]
    lost: tuple[str, ...]


class RuleChange(NamedTuple):
    cls: str
    added: tuple[Rule, ...]
    removed: tuple[Rule, ...]
    changed: tuple[tuple[Rule, Rule], ...]  # (before, after), paired by rule kind


class Obsoletion(NamedTuple):
    term: str
    replaced_by: tuple[str, ...]
    consider: tuple[str, ...]


class Notes(NamedTuple):
    base: str
    head: str
    counts: tuple[Count, ...]
    changes: Mapping[str, int]  # added / removed / obsoleted / edited / moved / rules
    new_terms: tuple[TermGroup, ...]
    moved: tuple[Move, ...]
    members: tuple[MemberChange, ...]
    rules: tuple[RuleChange, ...]
    obsoleted: tuple[Obsoletion, ...]
    names: Mapping[str, str]  # id -> name for every id the notes mention


def _structured(term: Term, mapping: Mapping[str, Iterable[str]]) -> bool:
    return not term.obsolete and bool(read_structure(term, mapping).smiles)


def _members(onto: Ontology, structured: Iterable[str]) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for tid in structured:
        for cls in onto.ancestors(tid):
            if cls in onto.terms:
                out.setdefault(cls, set()).add(tid)
    return out


def _roots(onto: Ontology) -> set[str]:
    return {t.id for t in onto.terms.values() if not any(p in onto.terms for p in t.parents)}


def _positions(onto: Ontology) -> dict[str, int]:
    return {tid: i for i, tid in enumerate(onto.terms)}


def top_classes(onto: Ontology, term_id: str, roots: set[str],
                positions: Mapping[str, int]) -> tuple[str, ...]:
    """The ancestors that are not roots and have no non-root parent, in file order."""
    tops = []
    for tid in onto.ancestors(term_id) - roots - {term_id}:
        term = onto.terms.get(tid)
        if term is not None and all(p in roots or p not in onto.terms for p in term.parents):
            tops.append(tid)
    return tuple(sorted(tops, key=positions.__getitem__))


def _group_new(onto: Ontology, new: Sequence[str]) -> tuple[TermGroup, ...]:
    roots, positions = _roots(onto), _positions(onto)
    groups: dict[str, list[str]] = {}
    for tid in new:
        for top in top_classes(onto, tid, roots, positions) or ("",):
            groups.setdefault(top, []).append(tid)
    # Named groups in file order, the group of terms with no class above them last.
    order = sorted((t for t in groups if t), key=positions.__getitem__) + ([""] if "" in groups else [])
    return tuple(TermGroup(top, tuple(groups[top])) for top in order)


def _by_class(rules: Rules) -> dict[str, list[Rule]]:
    if isinstance(rules, Mapping):
        return {str(cls): list(items) for cls, items in rules.items()}
    out: dict[str, list[Rule]] = {}
    for rule in rules:
        out.setdefault(str(rule.get("class", "")), []).append(rule)
    return out


def _canonical(rule: Rule) -> str:
    return json.dumps({k: v for k, v in rule.items() if k != "class"}, sort_keys=True, default=str)


def rule_changes(base_rules: Rules, head_rules: Rules) -> tuple[RuleChange, ...]:
    """Per class: rules added, removed, and changed (a rule of the same kind replaced)."""
    old, new = _by_class(base_rules), _by_class(head_rules)
    out = []
    for cls in sorted(set(old) | set(new)):
        before = list(old.get(cls, ()))
        after = list(new.get(cls, ()))
        for rule in list(after):
            match = next((b for b in before if _canonical(b) == _canonical(rule)), None)
            if match is not None:
                before.remove(match)
                after.remove(rule)
        changed = []
        for rule in list(after):
            match = next((b for b in before if b.get("kind") == rule.get("kind")), None)
            if match is not None:
                before.remove(match)
                after.remove(rule)
                changed.append((match, rule))
        if before or after or changed:
            out.append(RuleChange(cls, tuple(after), tuple(before), tuple(changed)))
    return tuple(out)


def _rule_count(rules: Rules) -> int:
    return sum(len(items) for items in _by_class(rules).values())


def compute(base: Ontology, head: Ontology, base_rules: Rules, head_rules: Rules,
            structure_mapping: Mapping[str, Iterable[str]]) -> Notes:
    changes = diff_ontologies(base, head, structure_mapping)
    old_structured = [t.id for t in base.terms.values() if _structured(t, structure_mapping)]
    new_structured = [t.id for t in head.terms.values() if _structured(t, structure_mapping)]
    old_set = set(old_structured)
    new_terms = _group_new(head, [t for t in new_structured if t not in old_set])

    moved = tuple(
        Move(tid, base.terms[tid].parents, head.terms[tid].parents)
        for tid in changes.edited
        if "parents" in changes.fields.get(tid, ()) and not base.terms[tid].obsolete)

    old_members, new_members = _members(base, old_structured), _members(head, new_structured)
    old_pos, new_pos = _positions(base), _positions(head)
    member_changes = []
    for cls in set(old_members) | set(new_members):
        was, now = old_members.get(cls, set()), new_members.get(cls, set())
        if was != now:
            member_changes.append(MemberChange(
                cls, len(was), len(now), tuple(sorted(now - was, key=new_pos.__getitem__)),
                tuple(sorted(was - now, key=old_pos.__getitem__))))
    member_changes.sort(key=lambda m: (-(len(m.gained) + len(m.lost)), m.cls))

    obsoleted = tuple(Obsoletion(tid, head.terms[tid].replaced_by, head.terms[tid].consider)
                      for tid in changes.obsoleted)
    rules = rule_changes(base_rules, head_rules)

    def live(onto: Ontology) -> int:
        return sum(1 for t in onto.terms.values() if not t.obsolete)

    counts = (
        Count("terms", live(base), live(head)),
        Count("structured terms", len(old_structured), len(new_structured)),
        Count("classes with members", len(old_members), len(new_members)),
        Count("obsolete terms", len(base.terms) - live(base), len(head.terms) - live(head)),
        Count("rules", _rule_count(base_rules), _rule_count(head_rules)),
    )
    summary = {"added": len(changes.added), "removed": len(changes.removed),
               "obsoleted": len(changes.obsoleted), "edited": len(changes.edited),
               "moved": len(moved), "rules": len(rules)}

    mentioned: set[str] = set()
    for group in new_terms:
        mentioned.update(group.terms, [group.top])
    for move in moved:
        mentioned.update(move.before, move.after, [move.term])
    for change in member_changes:
        mentioned.update(change.gained, change.lost, [change.cls])
    for gone in obsoleted:
        mentioned.update(gone.replaced_by, gone.consider, [gone.term])
    mentioned.update(r.cls for r in rules)
    names = {}
    for tid in sorted(mentioned - {""}):
        term = head.terms.get(tid) or base.terms.get(tid)
        if term is not None and term.name:
            names[tid] = term.name
    return Notes(base.revision, head.revision, counts, summary, new_terms, moved,
                 tuple(member_changes), rules, obsoleted, names)
