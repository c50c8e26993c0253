"""`Finding` records, their kinds and default severities, and base-vs-head status."""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any, NamedTuple

# Stable ids (used in config, JSON and SARIF) -> (default severity, one-line meaning).
KINDS: dict[str, tuple[str, str]] = {
    "structure-unreadable": ("error", "the SMILES cannot be parsed or sanitised"),
    "annotation-mismatch": ("error", "InChI, InChIKey, formula, mass or charge disagree with the structure"),
    "duplicate-structure": ("error", "same standard InChIKey as another live term"),
    "hierarchy-cycle": ("error", "is_a cycle"),
    "parent-dangling": ("error", "is_a or relationship target is not defined"),
    "parent-obsolete": ("warning", "parent is obsolete"),
    "parent-redundant": ("note", "asserted parent already implied by another asserted parent"),
    "rule-violated": ("error", "fails a necessary or defining rule of an ancestor"),
    "disjoint-violated": ("error", "member of two classes declared disjoint"),
    "parent-unsupported": ("warning", "an asserted parent that no tier supports"),
    "tiers-disagree": ("note", "the rule tier and the model tier give opposite verdicts"),
    "parent-suggested": ("warning", "a more specific class that the structure supports"),
}
SEVERITIES = ("error", "warning", "note")
STATUSES = ("new", "persisting", "resolved")
DEFAULT_FAIL_ON = ("structure-unreadable", "annotation-mismatch", "duplicate-structure",
                   "hierarchy-cycle", "parent-dangling", "rule-violated", "disjoint-violated")


class Finding(NamedTuple):
    kind: str
    term: str
    message: str
    classes: tuple[str, ...] = ()
    tiers: tuple[str, ...] = ()  # which tiers speak: "structure", "rule", "model"
    evidence: Mapping[str, Any] = {}
    path: str = ""
    line: int = 0
    severity: str = ""  # filled from KINDS / config when empty
    status: str = "new"

    @property
    def identity(self) -> tuple[str, str, tuple[str, ...], str]:
        """What makes a finding 'the same' at base and head: not its line or wording."""
        return (self.kind, self.term, self.classes, str(self.evidence.get("field", "")))

    def to_json(self) -> dict[str, Any]:
        return {"kind": self.kind, "severity": self.severity, "status": self.status,
                "term": self.term, "classes": list(self.classes), "tiers": list(self.tiers),
                "message": self.message, "path": self.path, "line": self.line,
                "evidence": dict(self.evidence)}


def with_severity(findings: Iterable[Finding], overrides: Mapping[str, str] | None = None) -> list[Finding]:
    overrides = overrides or {}
    return [f._replace(severity=overrides.get(f.kind) or f.severity or KINDS[f.kind][0])
            for f in findings]


def compare(base: Iterable[Finding], head: Iterable[Finding]) -> list[Finding]:
    """Status by comparing the same term's findings at both ends.

    A head finding also present at base is `persisting`; only at head, `new`; a base
    finding gone from head is `resolved` (reported with its base location).
    """
    base_list = list(base)
    base_ids = {f.identity for f in base_list}
    head_list = list(head)
    head_ids = {f.identity for f in head_list}
    out = [f._replace(status="persisting" if f.identity in base_ids else "new") for f in head_list]
    out += [f._replace(status="resolved") for f in base_list if f.identity not in head_ids]
    return out


def blocking(findings: Iterable[Finding], fail_on: Iterable[str]) -> list[Finding]:
    kinds = set(fail_on)
    return [f for f in findings if f.status == "new" and f.kind in kinds]


class Review(NamedTuple):
    """Everything a renderer needs about one review of base..head."""

    base: str
    head: str
    ontologies: tuple[str, ...]
    changes: Mapping[str, tuple[str, ...]]  # added / removed / obsoleted / edited -> ids
    edited_fields: Mapping[str, tuple[str, ...]]  # id -> changed field names
    affected: tuple[str, ...]
    findings: tuple[Finding, ...]
    names: Mapping[str, str]  # id -> name, for every id a finding mentions
    fail_on: tuple[str, ...] = DEFAULT_FAIL_ON
    model_revision: str | None = None  # revision the model verdicts were trained on
    notes: tuple[str, ...] = ()  # one-line remarks for the reader (e.g. model not trained)
