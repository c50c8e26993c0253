"""Release notes between two revisions of a small ontology parsed from real OBO text."""
from __future__ import annotations

import json
from typing import Any

import pytest
import yaml
from markdown_it import MarkdownIt

from parentage import release_notes
from parentage.parse import parse_ontology_text
from parentage.report import notes as notes_report
from parentage.snapshot import Ontology

MAPPING = {"smiles": ("smiles",)}

HEADER = "format-version: 1.2\nontology: demo\n"
COMMON = """
[Term]
id: DEMO:0000001
name: chemical entity

[Term]
id: DEMO:0000002
name: organic compound
is_a: DEMO:0000001

[Term]
id: DEMO:0000003
name: carboxylic acid
is_a: DEMO:0000002

[Term]
id: DEMO:0000004
name: alcohol
is_a: DEMO:0000002

[Term]
id: DEMO:0000011
name: ethanol
is_a: DEMO:0000004
property_value: smiles "CCO" xsd:string

[Term]
id: DEMO:0000020
name: inorganic compound
is_a: DEMO:0000001
"""
BASE = HEADER + COMMON + """
[Term]
id: DEMO:0000010
name: acetic acid
is_a: DEMO:0000004
property_value: smiles "CC(=O)O" xsd:string

[Term]
id: DEMO:0000012
name: methanol
is_a: DEMO:0000004
property_value: smiles "CO" xsd:string
"""
HEAD = HEADER + COMMON + """
[Term]
id: DEMO:0000010
name: acetic acid
is_a: DEMO:0000003
property_value: smiles "CC(=O)O" xsd:string

[Term]
id: DEMO:0000012
name: methanol
property_value: smiles "CO" xsd:string
is_obsolete: true
replaced_by: DEMO:0000013

[Term]
id: DEMO:0000013
name: methanol
is_a: DEMO:0000004
property_value: smiles "CO" xsd:string

[Term]
id: DEMO:0000014
name: propanoic acid
is_a: DEMO:0000003
property_value: smiles "CCC(=O)O" xsd:string

[Term]
id: DEMO:0000021
name: water
is_a: DEMO:0000020
property_value: smiles "O" xsd:string

[Term]
id: DEMO:0000030
name: helium
is_a: DEMO:0000001
property_value: smiles "[He]" xsd:string

[Term]
id: DEMO:0000031
name: no structure here
is_a: DEMO:0000003
"""
BASE_RULES = """
- class: DEMO:0000003
  kind: defining
  any_of: ["C(=O)[OH]"]
- class: DEMO:0000004
  kind: necessary
  any_of: ["[OX2H]"]
"""
HEAD_RULES = """
- class: DEMO:0000003
  kind: defining
  any_of: ["[CX3](=O)[OX2H1]"]
- class: DEMO:0000004
  kind: necessary
  any_of: ["[OX2H]"]
- class: DEMO:0000004
  kind: sufficient
  any_of: ["[CX4][OX2H]"]
"""


def ontology(text: str, revision: str) -> Ontology:
    return Ontology(revision, [parse_ontology_text(text, "src/demo.obo")])


@pytest.fixture(scope="module")
def notes() -> release_notes.Notes:
    return release_notes.compute(ontology(BASE, "v1"), ontology(HEAD, "v2"),
                                 yaml.safe_load(BASE_RULES), yaml.safe_load(HEAD_RULES), MAPPING)


def test_counts(notes: release_notes.Notes) -> None:
    assert notes.base == "v1" and notes.head == "v2"
    counts = {c.what: (c.base, c.head) for c in notes.counts}
    assert counts["terms"] == (8, 12)
    assert counts["structured terms"] == (3, 6)
    assert counts["obsolete terms"] == (0, 1)
    assert counts["rules"] == (2, 3)
    assert notes.changes == {"added": 5, "removed": 0, "obsoleted": 1, "edited": 1, "moved": 1, "rules": 2}


def test_new_structured_terms_under_top_classes(notes: release_notes.Notes) -> None:
    groups = {g.top: g.terms for g in notes.new_terms}
    assert groups == {"DEMO:0000002": ("DEMO:0000013", "DEMO:0000014"),
                      "DEMO:0000020": ("DEMO:0000021",),
                      "": ("DEMO:0000030",)}  # helium sits directly under the root


def test_moved_terms(notes: release_notes.Notes) -> None:
    assert notes.moved == (release_notes.Move("DEMO:0000010", ("DEMO:0000004",), ("DEMO:0000003",)),)


def test_members_gained_and_lost(notes: release_notes.Notes) -> None:
    by_class = {m.cls: m for m in notes.members}
    acid = by_class["DEMO:0000003"]
    assert (acid.before, acid.after, acid.gained, acid.lost) == (0, 2, ("DEMO:0000010", "DEMO:0000014"), ())
    alcohol = by_class["DEMO:0000004"]
    assert (alcohol.before, alcohol.after) == (3, 2)
    assert alcohol.gained == ("DEMO:0000013",) and alcohol.lost == ("DEMO:0000010", "DEMO:0000012")
    organic = by_class["DEMO:0000002"]
    assert organic.gained == ("DEMO:0000013", "DEMO:0000014") and organic.lost == ("DEMO:0000012",)
    assert by_class["DEMO:0000020"].gained == ("DEMO:0000021",)
    assert set(by_class) == {"DEMO:0000001", "DEMO:0000002", "DEMO:0000003", "DEMO:0000004", "DEMO:0000020"}


def test_obsoletions_and_rules(notes: release_notes.Notes) -> None:
    assert notes.obsoleted == (release_notes.Obsoletion("DEMO:0000012", ("DEMO:0000013",), ()),)
    by_class = {r.cls: r for r in notes.rules}
    acid = by_class["DEMO:0000003"]
    assert acid.added == () and acid.removed == ()
    assert [(a["any_of"], b["any_of"]) for a, b in acid.changed] == [(["C(=O)[OH]"], ["[CX3](=O)[OX2H1]"])]
    alcohol = by_class["DEMO:0000004"]
    assert [r["kind"] for r in alcohol.added] == ["sufficient"] and not alcohol.changed


RULE_CASES = [
    pytest.param([{"class": "C:1", "kind": "defining", "any_of": ["C"]}],
                 [{"class": "C:1", "kind": "defining", "any_of": ["C"]}], [], id="unchanged"),
    pytest.param({"C:1": [{"kind": "necessary", "any_of": ["N"]}]},
                 [{"class": "C:1", "any_of": ["N"], "kind": "necessary"}], [], id="mapping-vs-list"),
    pytest.param([{"class": "C:1", "kind": "defining", "any_of": ["C"]}], [],
                 [("C:1", 0, 1, 0)], id="removed"),
    pytest.param([], {"C:2": [{"kind": "sufficient", "all_of": ["O"]}]},
                 [("C:2", 1, 0, 0)], id="added"),
    pytest.param([{"class": "C:1", "kind": "defining", "any_of": ["C"]}],
                 [{"class": "C:1", "kind": "necessary", "any_of": ["C"]}],
                 [("C:1", 1, 1, 0)], id="kind-changed-is-add-plus-remove"),
    pytest.param([{"class": "C:1", "kind": "defining", "any_of": ["C"], "none_of": []}],
                 [{"class": "C:1", "kind": "defining", "any_of": ["C"], "none_of": ["N"]}],
                 [("C:1", 0, 0, 1)], id="smarts-changed"),
]


@pytest.mark.parametrize(("base", "head", "expected"), RULE_CASES)
def test_rule_changes(base: Any, head: Any, expected: list[tuple[str, int, int, int]]) -> None:
    got = [(r.cls, len(r.added), len(r.removed), len(r.changed))
           for r in release_notes.rule_changes(base, head)]
    assert got == expected


def test_same_revision_has_nothing_to_say() -> None:
    onto = ontology(BASE, "v1")
    rules = yaml.safe_load(BASE_RULES)
    same = release_notes.compute(onto, ontology(BASE, "v1"), rules, rules, MAPPING)
    assert (same.new_terms, same.moved, same.members, same.rules, same.obsoleted) == ((), (), (), (), ())
    assert all(c.base == c.head for c in same.counts)


def _tables(text: str) -> dict[str, list[list[str]]]:
    """Each table under its h3 heading, as cell texts, read with markdown-it-py (GFM tables)."""
    tokens = MarkdownIt("commonmark").enable("table").parse(text)
    out: dict[str, list[list[str]]] = {}
    heading = ""
    row: list[str] = []
    for i, tok in enumerate(tokens):
        if tok.type == "heading_open" and tok.tag == "h3":
            heading = tokens[i + 1].content
        elif tok.type == "tr_open":
            row = []
        elif tok.type in ("th_open", "td_open"):
            row.append("".join(c.content for c in tokens[i + 1].children or []))
        elif tok.type == "tr_close":
            out.setdefault(heading, []).append(row)
    return out


def test_markdown_lists_each_moved_term_and_new_member(notes: release_notes.Notes) -> None:
    text = notes_report.render_markdown(notes)
    tables = _tables(text)
    moved = tables["Terms whose parents changed"]
    assert moved[1] == ["DEMO:0000010 acetic acid", "DEMO:0000004", "DEMO:0000003"]
    members = {r[0].split(" ")[0]: r for r in tables["Classes that gained or lost members"][1:]}
    assert members["DEMO:0000003"][1:] == ["0", "2", "DEMO:0000010, DEMO:0000014", "none"]
    assert members["DEMO:0000004"][4] == "DEMO:0000010, DEMO:0000012"
    assert tables["Obsoleted terms"][1] == ["DEMO:0000012 methanol", "DEMO:0000013", "none"]
    rules = {r[0].split(" ")[0]: r[1] for r in tables["Rule changes"][1:]}
    assert rules["DEMO:0000004"].startswith("added ")
    assert "[CX3](=O)[OX2H1]" in rules["DEMO:0000003"]
    # New structured terms: one h4 per top class, then a list of its new terms.
    assert "#### `DEMO:0000002` organic compound (2)" in text
    assert "- `DEMO:0000014` propanoic acid" in text
    assert "#### Directly under a root class (1)" in text


def test_markdown_bounds_long_sections(notes: release_notes.Notes) -> None:
    text = notes_report.render_markdown(notes, max_rows=1)
    members = _tables(text)["Classes that gained or lost members"]
    assert len(members) == 2  # header and one row
    assert f"and {len(notes.members) - 1} more (see the JSON notes)" in text


def test_json_round_trip(notes: release_notes.Notes) -> None:
    data = json.loads(notes_report.render_json(notes))
    assert set(data) == {"base", "head", "counts", "changes", "new_terms", "moved", "members", "rules",
                         "obsoleted", "names"}
    assert data["moved"] == [{"term": "DEMO:0000010", "before": ["DEMO:0000004"], "after": ["DEMO:0000003"]}]
    assert data["counts"]["structured terms"] == {"base": 3, "head": 6}
    assert data["names"]["DEMO:0000014"] == "propanoic acid"
    gained = {m["class"]: m["gained"] for m in data["members"]}
    assert gained["DEMO:0000020"] == ["DEMO:0000021"]
