"""The review as SARIF 2.1.0: one run, one rule per finding kind, one result per open finding.

Resolved findings are not results: code-scanning services would show them as open alerts.
Their count is kept in the run's properties instead.
"""
from __future__ import annotations

import hashlib
import json
from typing import Any
from urllib.parse import quote

from parentage import __version__
from parentage.findings import KINDS, Finding, Review, blocking
from parentage.report.advice import advice

SCHEMA_URI = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
FINGERPRINT_KEY = "parentageIdentity/v1"  # bump the suffix if Finding.identity changes
_LEVELS = {"error": "error", "warning": "warning", "note": "note"}
_BASELINE = {"new": "new", "persisting": "unchanged"}


def _level(severity: str) -> str:
    return _LEVELS.get(severity, "warning")


def fingerprint(finding: Finding) -> str:
    """A stable hash of what makes a finding the same at base and head (not line or wording)."""
    kind, term, classes, field = finding.identity
    data = json.dumps([kind, term, list(classes), field], separators=(",", ":"))
    return hashlib.sha256(data.encode()).hexdigest()


def _rules(findings: list[Finding]) -> list[dict[str, Any]]:
    kinds = list(KINDS) + sorted({f.kind for f in findings} - set(KINDS))
    rules = []
    for kind in kinds:
        severity, meaning = KINDS.get(kind, ("warning", kind))
        rules.append({
            "id": kind,
            "shortDescription": {"text": meaning},
            "help": {"text": advice(kind)},
            "defaultConfiguration": {"level": _level(severity)},
        })
    return rules


def _result(finding: Finding, rule_index: int, blocks: bool) -> dict[str, Any]:
    severity = finding.severity or KINDS.get(finding.kind, ("warning", ""))[0]
    location: dict[str, Any] = {"logicalLocations": [{"name": finding.term,
                                                       "fullyQualifiedName": finding.term}]}
    if finding.path:
        physical: dict[str, Any] = {"artifactLocation": {"uri": quote(finding.path, safe="/")}}
        if finding.line > 0:
            physical["region"] = {"startLine": finding.line}
        location["physicalLocation"] = physical
    return {
        "ruleId": finding.kind,
        "ruleIndex": rule_index,
        "level": _level(severity),
        "message": {"text": finding.message or finding.kind},
        "locations": [location],
        "partialFingerprints": {FINGERPRINT_KEY: fingerprint(finding)},
        "baselineState": _BASELINE.get(finding.status, "new"),
        "properties": {"status": finding.status, "blocking": blocks, "term": finding.term,
                       "classes": list(finding.classes), "tiers": list(finding.tiers),
                       "evidence": dict(finding.evidence)},
    }


def to_sarif(review: Review, version: str = __version__) -> dict[str, Any]:
    findings = list(review.findings)
    rules = _rules(findings)
    index = {rule["id"]: i for i, rule in enumerate(rules)}
    results = [_result(f, index[f.kind], bool(blocking([f], review.fail_on)))
               for f in findings if f.status != "resolved"]
    run = {
        "tool": {"driver": {"name": "parentage", "version": version, "rules": rules}},
        "results": results,
        "properties": {"base": review.base, "head": review.head,
                       "ontologies": list(review.ontologies),
                       "resolved": sum(1 for f in findings if f.status == "resolved"),
                       "blocking": len(blocking(findings, review.fail_on)), "modelRevision": review.model_revision},
    }
    return {"$schema": SCHEMA_URI, "version": "2.1.0", "runs": [run]}


def render(review: Review, version: str = __version__) -> str:
    return json.dumps(to_sarif(review, version), indent=2, default=str, ensure_ascii=False) + "\n"
