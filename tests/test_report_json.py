"""The JSON review against the contract in DESIGN.md ("parentage review --format json")."""
from __future__ import annotations

import json

from parentage.findings import Finding, Review
from parentage.report import json as json_report

# Keys listed in DESIGN.md's JSON contract, plus the fields this renderer adds for tooling.
CONTRACT_KEYS = {"base", "head", "ontologies", "changes", "affected", "findings"}
EXTRA_KEYS = {"edited_fields", "blocking", "model_revision", "notes"}
CHANGE_KEYS = {"added", "removed", "obsoleted", "edited"}
FINDING_KEYS = {"kind", "severity", "status", "term", "classes", "tiers", "message", "path", "line",
                "evidence"}


def make_review() -> Review:
    found = (
        Finding("parent-suggested", "DEMO:1", "DEMO:12 is supported", ("DEMO:12",), ("rule", "model"),
                {"probability": 0.93}, "src/compounds.obo", 120, "warning", "new"),
        Finding("rule-violated", "DEMO:2", "fails DEMO:10", ("DEMO:10",), ("rule",),
                {"rule": "rules/a.yaml:3", "atoms": [[1, 2]]}, "src/compounds.obo", 140, "error", "new"),
        Finding("annotation-mismatch", "DEMO:3", "formula differs", (), ("structure",),
                {"field": "formula"}, "src/compounds.obo", 160, "error", "resolved"),
    )
    return Review("main", "abc123", ("src/compounds.obo",),
                  {"added": ("DEMO:1",), "edited": ("DEMO:2",)}, {"DEMO:2": ("parents",)},
                  ("DEMO:1", "DEMO:2"), found, {"DEMO:1": "x"}, model_revision="abc000",
                  notes=("model trained at abc000",))


def test_contract_keys_and_types() -> None:
    data = json.loads(json_report.render(make_review()))
    assert set(data) == CONTRACT_KEYS | EXTRA_KEYS
    assert isinstance(data["base"], str) and isinstance(data["head"], str)
    assert data["ontologies"] == ["src/compounds.obo"]
    # Every change key is present even when the review has no such change.
    assert data["changes"] == {"added": ["DEMO:1"], "removed": [], "obsoleted": [], "edited": ["DEMO:2"]}
    assert set(data["changes"]) == CHANGE_KEYS
    assert data["affected"] == ["DEMO:1", "DEMO:2"]
    assert len(data["findings"]) == 3
    for item in data["findings"]:
        assert set(item) == FINDING_KEYS
        assert isinstance(item["classes"], list) and isinstance(item["tiers"], list)
        assert isinstance(item["line"], int) and isinstance(item["evidence"], dict)
    assert data["findings"][0] == {
        "kind": "parent-suggested", "severity": "warning", "status": "new", "term": "DEMO:1",
        "classes": ["DEMO:12"], "tiers": ["rule", "model"], "message": "DEMO:12 is supported",
        "path": "src/compounds.obo", "line": 120, "evidence": {"probability": 0.93}}


def test_extra_fields() -> None:
    data = json_report.to_json(make_review())
    assert data["edited_fields"] == {"DEMO:2": ["parents"]}
    # Only the new rule-violated finding is in the default fail_on list and new.
    assert data["blocking"] == 1
    assert data["model_revision"] == "abc000"
    assert data["notes"] == ["model trained at abc000"]


def test_empty_review() -> None:
    rev = Review("a", "b", (), {}, {}, (), (), {})
    data = json.loads(json_report.render(rev))
    assert data["findings"] == [] and data["blocking"] == 0 and data["model_revision"] is None
