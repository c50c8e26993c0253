"""The review engine: both tiers, at both ends, on exactly what a change touched.

revisions -> snapshots -> change set -> affected terms -> tiers at base and head -> findings
(new / persisting / resolved). Nothing here prints; the `review` command renders the record.
"""
from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Iterable, Iterator, Mapping
from typing import TYPE_CHECKING, Any

from parentage.arbitration import arbitrate, disjoint_findings
from parentage.changes import ChangeSet, affected_terms, diff_ontologies
from parentage.config import Config
from parentage.findings import Finding, Review, compare, with_severity
from parentage.revisions import Side
from parentage.snapshot import Ontology, Term, read_structure
from parentage.workspace import Workspace

if TYPE_CHECKING:
    from parentage.chem.molecules import MolFacts


def smiles_of(term: Term, config: Config) -> str | None:
    return read_structure(term, config.structure).smiles


def structured_term(term: Term, config: Config) -> bool:
    s = read_structure(term, config.structure)
    return bool(s.smiles or s.inchi)


def is_structured(config: Config) -> Callable[[Term], bool]:
    return lambda term: structured_term(term, config)


class StoredIndex(Mapping[str, tuple[str, ...]]):
    """An InChIKey index kept in the store one key per row: a review looks up the handful of
    keys its terms have, so the index of the whole ontology is never read whole."""

    def __init__(self, ws: Workspace, namespace: str) -> None:
        self.store, self.namespace = ws.store, namespace
        self._seen: dict[str, tuple[str, ...] | None] = {}

    def __getitem__(self, key: str) -> tuple[str, ...]:
        if key not in self._seen:
            found = self.store.get(self.namespace, key)
            self._seen[key] = tuple(found) if found else None
        value = self._seen[key]
        if value is None:
            raise KeyError(key)
        return value

    def __iter__(self) -> Iterator[str]:
        return iter(self.store.keys(self.namespace))

    def __len__(self) -> int:
        return len(self.store.keys(self.namespace))


def key_index(ws: Workspace, ontology: Ontology) -> Mapping[str, tuple[str, ...]]:
    """Standard InChIKey -> live term ids over the whole ontology, cached per file versions."""
    stamp = json.dumps([[s.path, s.blob] for s in ontology.snapshots] + [sorted(
        (k, list(v)) for k, v in ws.config.structure.items())])
    namespace = "inchikey-index:" + hashlib.sha256(stamp.encode()).hexdigest()
    if ws.store.get("inchikey-index-built", namespace) is not None:
        return StoredIndex(ws, namespace)
    from parentage.tiers.structure import inchikey_index, structure_facts

    # Written InChIKeys stand in for unchanged terms (a wrong one is that term's own
    # annotation-mismatch); only terms without one are read, so a cold index stays cheap.
    unkeyed = [t.id for t in ontology.merged.live()
               if not read_structure(t, ws.config.structure).inchikey]
    facts = structure_facts(ontology, unkeyed, ws.config, ws.store)
    index = inchikey_index(ontology, ws.config, facts)
    ws.store.put_many(namespace, {k: list(v) for k, v in index.items()})
    ws.store.put("inchikey-index-built", namespace, len(index))
    return index


class IndexWithout(Mapping[str, tuple[str, ...]]):
    """An InChIKey index with some terms left out, filtered on lookup (a review looks up a
    handful of keys in an index of the whole ontology)."""

    def __init__(self, index: Mapping[str, tuple[str, ...]], drop: set[str]) -> None:
        self.index, self.drop = index, drop

    def __getitem__(self, key: str) -> tuple[str, ...]:
        kept = tuple(i for i in self.index[key] if i not in self.drop)
        if not kept:
            raise KeyError(key)
        return kept

    def __iter__(self) -> Iterator[str]:
        return (k for k in self.index if k in self)

    def __len__(self) -> int:
        return sum(1 for _ in self)


def structure_side(ws: Workspace, ontology: Ontology, term_ids: list[str],
                   others: Mapping[str, tuple[str, ...]], read: Iterable[str] | None = None,
                   facts: Mapping[str, MolFacts] | None = None) -> list[Finding]:
    """Structure, hierarchy and disjointness findings of `term_ids`.

    Structures are read (RDKit) only for the ids in `read` (default: all of `term_ids`); the
    hierarchy checks need none, so a change that only moves classes never loads RDKit. `facts`
    (from `read_both_ends`) holds structures already read.
    """
    from parentage.tiers.hierarchy import hierarchy_findings

    present = [t for t in term_ids if t in ontology.terms]
    out: list[Finding] = []
    wanted = present if read is None else [t for t in read if t in ontology.terms]
    if any(structured_term(ontology.terms[t], ws.config) for t in wanted):
        from parentage.tiers.structure import structure_facts, structure_findings

        if facts is None:
            facts = structure_facts(ontology, wanted, ws.config, ws.store)
        out += structure_findings(ontology, wanted, ws.config, facts, others)
    out += hierarchy_findings(ontology, present)
    out += disjoint_findings(ontology, present)
    return out


def read_both_ends(ws: Workspace, ends: Iterable[tuple[Ontology, Iterable[str]]]) -> dict[str, MolFacts]:
    """Facts of the structures of the listed terms at every end, keyed by the text as written,
    read in one batch: one worker process instead of one per end (chem/bounded.py)."""
    from parentage.chem.molecules import analyse_many
    from parentage.tiers.structure import structure_texts

    wanted: dict[str, list[str]] = {}
    for ontology, ids in ends:
        for kind, texts in structure_texts(ontology, ids, ws.config).items():
            wanted.setdefault(kind, []).extend(texts)
    facts: dict[str, MolFacts] = {}
    for kind, texts in wanted.items():
        if texts:
            facts.update(analyse_many(texts, ws.config.limits, ws.store, kind))
    return facts


def structure_changed(changes: ChangeSet) -> list[str]:
    """Added terms and edits that touched structure fields: the only ones RDKit must read."""
    return list(changes.added) + [t for t in changes.edited if "structure" in changes.fields.get(t, ())]


def run_review(ws: Workspace, base_side: Side, head_side: Side, files: Iterable[str] = (),
               use_model: bool = True) -> Review:
    config = ws.config
    base, head = ws.pair(base_side, head_side, files)
    changes = diff_ontologies(base, head, config.structure)
    notes: list[str] = []
    from parentage.tiers.rules import load_rules

    base_files, head_files = ws.rule_files(base_side), ws.rule_files(head_side)
    head_rules, head_warn = load_rules(head_files, head)
    notes += list(head_warn)
    # Rule files rarely change: the same text gives the same rules (the base's own warnings
    # about missing classes were the base's business).
    base_rules = head_rules if base_files == head_files else load_rules(base_files, base)[0]
    rule_changed = {c for c in set(base_rules.classes()) | set(head_rules.classes())
                    if base_rules.digest(c) != head_rules.digest(c)}
    affected = list(affected_terms(base, head, changes, rule_changed, is_structured(config)))
    changed = set(changes.touched) | set(changes.removed)

    # Structure and hierarchy at both ends; duplicates against the rest of the ontology.
    base_index = key_index(ws, base) if base.snapshots else {}
    others = IndexWithout(base_index, changed | set(affected))
    base_ids = [t for t in affected if t in base.terms and not base.terms[t].obsolete]
    # The review re-reads every added or edited structure (a legacy problem of an edited term
    # shows as persisting); members re-checked only because a class changed are not re-read.
    touched = set(changes.added) | set(changes.edited)
    read = [t for t in affected if t in touched]
    facts = read_both_ends(ws, [(head, read), (base, read)])
    head_findings = structure_side(ws, head, affected, others, read, facts)
    base_findings = structure_side(ws, base, base_ids, others, read, facts)

    # Rule and model tiers on the structured affected terms, with one model for both ends.
    structured = is_structured(config)
    model = None
    if use_model:
        from parentage.tiers.model import load_or_train

        exclude = set(changes.edited) | set(changes.obsoleted) | set(changes.removed)
        model = load_or_train(base if base.snapshots else head, config, ws.store, exclude,
                              base_side.name if base.snapshots else head_side.name, progress=None)
        if model is None:
            notes.append("model tier: too few members to learn any class "
                         f"(model.min_members = {config.model.min_members}); rule tier only")
    for side_onto, rules, ids, sink in ((base, base_rules, base_ids, base_findings),
                                        (head, head_rules, affected, head_findings)):
        live = [t for t in ids if t in side_onto.terms and structured(side_onto.terms[t])]
        smiles = {t: s for t in live if (s := smiles_of(side_onto.terms[t], config))}
        unreadable = {f.term for f in sink if f.kind == "structure-unreadable"}
        smiles = {t: s for t, s in smiles.items() if t not in unreadable}
        model_v = (model.predict(smiles, store=ws.store,
                                 asserted={t: side_onto.ancestors(t) for t in smiles})
                   if model is not None else {})
        # The rule tier also judges the classes the model proposes, so a defining or
        # necessary rule those structures fail can overrule the proposal.
        proposed = {t: [v.cls for v in vs if v.cls and v.opinion == "supports"]
                    for t, vs in model_v.items()}
        rule_v = rules.verdicts(side_onto, list(smiles), smiles, config.limits, also=proposed)
        f1 = model.class_f1 if model is not None else {}
        for tid in smiles:
            found = arbitrate(side_onto, tid, rule_v.get(tid, []), model_v.get(tid, []),
                              f1, config.model.min_f1, config.max_suggestions)
            sink.extend(found if tid in touched else [f for f in found if about_the_change(f)])
    # A structure that became unreadable says nothing about the base's tier findings: they
    # are not "resolved".
    unreadable_now = {f.term for f in head_findings if f.kind == "structure-unreadable"}
    base_findings = [f for f in base_findings
                     if f.term not in unreadable_now or f.kind not in TIER_KINDS]
    findings = compare(_dedupe(base_findings), _dedupe(head_findings))
    findings = with_severity(findings, config.severity)
    findings.sort(key=_order)
    names = {}
    for f in findings:
        for tid in (f.term, *f.classes):
            term = head.terms.get(tid) or base.terms.get(tid)
            if term is not None and term.name:
                names[tid] = term.name
    return Review(
        base=base_side.name, head=head_side.name,
        ontologies=tuple(sorted(set(base.paths) | set(head.paths))),
        changes=changes.to_json(), edited_fields=dict(changes.fields),
        affected=tuple(affected), findings=tuple(findings), names=names,
        fail_on=config.fail_on,
        model_revision=getattr(model, "revision", None), notes=tuple(notes))


TIER_KINDS = frozenset({"rule-violated", "parent-unsupported", "tiers-disagree", "parent-suggested"})


def about_the_change(finding: Finding) -> bool:
    """Kept for a member re-checked only because a class or rule changed.

    Such a member's own filing did not change, so model opinions about it (suggestions,
    doubts) are not the change's business; broken rules and rule-backed suggestions are.
    """
    if finding.kind in ("parent-unsupported", "tiers-disagree"):
        return False
    if finding.kind == "parent-suggested":
        return "rule" in finding.tiers
    return True


def _dedupe(findings: list[Finding]) -> list[Finding]:
    seen: set[Any] = set()
    out = []
    for f in findings:
        if f.identity not in seen:
            seen.add(f.identity)
            out.append(f)
    return out


_STATUS_ORDER = {"new": 0, "persisting": 1, "resolved": 2}


def _order(f: Finding) -> tuple[int, str, int, str]:
    return (_STATUS_ORDER.get(f.status, 3), f.path, f.line, f.kind)
