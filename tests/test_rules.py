"""Rule files and rule semantics, as tables of cases.

SMARTS come from RDKit's shipped `Functional_Group_Hierarchy.txt` (carboxylic acid, aromatic
carboxylic acid, alcohol); the molecules are textbook compounds whose classes are common
practice (acetic acid is a carboxylic acid, ethanol an alcohol, chloroform an organohalogen).
"""
from __future__ import annotations

import pytest

from parentage.config import Config
from parentage.parse import parse_ontology_text
from parentage.snapshot import Ontology
from parentage.tiers.rules import RuleFileError, load_rules, rule_agreement

# From RDKit's Functional_Group_Hierarchy.txt (CarboxylicAcid, CarboxylicAcid.Aromatic, Alcohol).
ACID = "C(=O)[O;H,-]"
AROMATIC_ACID = "[$(C-!@[a])](=O)([O;H,-])"
ALCOHOL = "[O;H1;$(O-!@[#6;!$(C=!@[O,N,S])])]"

ROOT, ACIDS, AROMATIC_ACIDS, ALCOHOLS, HALIDES, ANIONS = (f"CHEM:000000{i}" for i in range(1, 7))
CLASSES = [(ROOT, "chemical entity", None), (ACIDS, "carboxylic acid", ROOT),
           (AROMATIC_ACIDS, "aromatic carboxylic acid", ACIDS), (ALCOHOLS, "alcohol", ROOT),
           (HALIDES, "organohalogen compound", ROOT), (ANIONS, "anion", ROOT)]

# Textbook structures (common practice).
ACETIC_ACID = "CC(=O)O"
ACETATE = "CC(=O)[O-]"
BENZOIC_ACID = "OC(=O)c1ccccc1"
ETHANOL = "CCO"
CHLOROACETIC_ACID = "OC(=O)CCl"
CHLOROFORM = "ClC(Cl)Cl"
CHLOROETHANOL = "OCCCl"


def ontology(terms: list[tuple[str, str, list[str]]]) -> Ontology:
    lines = ["format-version: 1.2", "ontology: chem", ""]
    for cid, name, parent in CLASSES:
        lines += ["[Term]", f"id: {cid}", f"name: {name}"] + ([f"is_a: {parent}"] if parent else []) + [""]
    for tid, smiles, parents in terms:
        lines += ["[Term]", f"id: {tid}", f"name: {tid}"] + [f"is_a: {p}" for p in parents]
        lines += [f'property_value: smiles "{smiles}" xsd:string', ""]
    return Ontology("test", [parse_ontology_text("\n".join(lines), "chem.obo")])


def rule(cls: str, kind: str, **conditions: object) -> str:
    body = "".join(f"\n  {k}: {v!r}" if not isinstance(v, str) else f"\n  {k}: {v}"
                   for k, v in conditions.items())
    return f"- class: {cls}\n  kind: {kind}{body}\n"


def opinions(rules_text: str, smiles: str, parents: list[str]) -> dict[str, str]:
    onto = ontology([("CHEM:1000001", smiles, parents)])
    ruleset, warnings = load_rules([("rules/chem.yaml", rules_text)], onto)
    assert warnings == []
    verdicts = ruleset.verdicts(onto, ["CHEM:1000001"], {"CHEM:1000001": smiles})
    return {v.cls: v.opinion for v in verdicts["CHEM:1000001"]}


SEMANTICS = [
    pytest.param(rule(ACIDS, "defining", any_of=[ACID]), ACETIC_ACID, [ACIDS],
                 {ACIDS: "supports", ROOT: "supports"}, id="defining-matches-member"),
    pytest.param(rule(ACIDS, "defining", any_of=[ACID]), ETHANOL, [ACIDS],
                 {ACIDS: "opposes"}, id="defining-misses-member"),
    pytest.param(rule(ACIDS, "defining", any_of=[ACID]), ACETIC_ACID, [ALCOHOLS],
                 {ACIDS: "supports", ROOT: "supports"}, id="defining-implies-unfiled-class"),
    pytest.param(rule(ACIDS, "defining", any_of=[ACID]), ETHANOL, [ALCOHOLS],
                 {}, id="defining-silent-outside-when-no-match"),
    pytest.param(rule(ACIDS, "necessary", any_of=[ACID]), ETHANOL, [ACIDS],
                 {ACIDS: "opposes"}, id="necessary-misses-member"),
    pytest.param(rule(ACIDS, "necessary", any_of=[ACID]), ACETIC_ACID, [ACIDS],
                 {ACIDS: "supports"}, id="necessary-matches-member"),
    pytest.param(rule(ACIDS, "necessary", any_of=[ACID]), ACETIC_ACID, [ALCOHOLS],
                 {}, id="necessary-implies-nothing-outside"),
    pytest.param(rule(ACIDS, "sufficient", any_of=[ACID]), ETHANOL, [ACIDS],
                 {}, id="sufficient-miss-is-no-verdict"),
    pytest.param(rule(ACIDS, "sufficient", any_of=[ACID]), ACETIC_ACID, [ALCOHOLS],
                 {ACIDS: "supports", ROOT: "supports"}, id="sufficient-implies-class-and-ancestors"),
    pytest.param(rule(ACIDS, "necessary", any_of=[ACID]), ETHANOL, [AROMATIC_ACIDS],
                 {ACIDS: "opposes"}, id="necessary-rule-of-ancestor-applies"),
    pytest.param(rule(ACIDS, "necessary", any_of=[ACID]) + rule(AROMATIC_ACIDS, "defining", any_of=[AROMATIC_ACID]),
                 BENZOIC_ACID, [AROMATIC_ACIDS],
                 {ACIDS: "supports", AROMATIC_ACIDS: "supports", ROOT: "supports"}, id="inherited-and-own-rule-hold"),
    pytest.param(rule(ACIDS, "necessary", any_of=[ACID]) + rule(AROMATIC_ACIDS, "defining", any_of=[AROMATIC_ACID]),
                 ACETIC_ACID, [AROMATIC_ACIDS],
                 {ACIDS: "supports", AROMATIC_ACIDS: "opposes"}, id="own-rule-fails-inherited-holds"),
    pytest.param(rule(AROMATIC_ACIDS, "sufficient", any_of=[AROMATIC_ACID]) + rule(ACIDS, "necessary", all_of=["[Cl]"]),
                 BENZOIC_ACID, [ROOT],
                 {AROMATIC_ACIDS: "supports", ACIDS: "opposes", ROOT: "supports"},
                 id="implied-class-brings-necessary-rule-of-ancestor"),
    pytest.param(rule(ACIDS, "defining", any_of=[ACID], none_of=["[Cl]"]), CHLOROACETIC_ACID, [ACIDS],
                 {ACIDS: "opposes"}, id="none_of-match-fails"),
    pytest.param(rule(ACIDS, "defining", any_of=[ACID], none_of=["[Cl]"]), ACETIC_ACID, [ACIDS],
                 {ACIDS: "supports", ROOT: "supports"}, id="none_of-absent-holds"),
    pytest.param(rule(ACIDS, "defining", all_of=[ACID, "c"]), ACETIC_ACID, [ACIDS],
                 {ACIDS: "opposes"}, id="all_of-needs-every-pattern"),
    pytest.param(rule(ACIDS, "defining", any_of=["[Cl]", ACID]), ACETIC_ACID, [ACIDS],
                 {ACIDS: "supports", ROOT: "supports"}, id="any_of-needs-one-pattern"),
    pytest.param(rule(ANIONS, "sufficient", net_charge=-1), ACETATE, [ACIDS],
                 {ANIONS: "supports", ROOT: "supports"}, id="net-charge-matches"),
    pytest.param(rule(ANIONS, "defining", net_charge=[-1, -2]), ACETIC_ACID, [ANIONS],
                 {ANIONS: "opposes"}, id="net-charge-differs"),
    pytest.param(rule(HALIDES, "defining", has_elements=["Cl"]), CHLOROFORM, [HALIDES],
                 {HALIDES: "supports", ROOT: "supports"}, id="has-element-present"),
    pytest.param(rule(HALIDES, "defining", has_elements=["Cl"]), ETHANOL, [HALIDES],
                 {HALIDES: "opposes"}, id="has-element-absent"),
    pytest.param(rule(ALCOHOLS, "necessary", any_of=[ALCOHOL], lacks_elements=["Cl"]), CHLOROETHANOL, [ALCOHOLS],
                 {ALCOHOLS: "opposes"}, id="lacks-element-present"),
    pytest.param(rule(ALCOHOLS, "necessary", any_of=[ALCOHOL], lacks_elements=["Cl"]), ETHANOL, [ALCOHOLS],
                 {ALCOHOLS: "supports"}, id="lacks-element-absent"),
    pytest.param(rule(HALIDES, "necessary", has_elements=["H"]), CHLOROFORM, [HALIDES],
                 {HALIDES: "supports"}, id="implicit-hydrogen-counts-as-present"),
]


@pytest.mark.parametrize(("rules_text", "smiles", "parents", "expected"), SEMANTICS)
def test_rule_semantics(rules_text: str, smiles: str, parents: list[str], expected: dict[str, str]) -> None:
    assert opinions(rules_text, smiles, parents) == expected


# No-op cases: correctly filed terms get no opposing verdict.
CLEAN_RULES = (rule(ACIDS, "defining", any_of=[ACID]) + rule(AROMATIC_ACIDS, "defining", any_of=[AROMATIC_ACID])
               + rule(ALCOHOLS, "necessary", any_of=[ALCOHOL]) + rule(HALIDES, "necessary", has_elements=["Cl"])
               + rule(ANIONS, "necessary", net_charge=-1))


@pytest.mark.parametrize(("smiles", "parents"), [
    pytest.param(ACETIC_ACID, [ACIDS], id="acid"),
    pytest.param(BENZOIC_ACID, [AROMATIC_ACIDS], id="aromatic-acid"),
    pytest.param(ETHANOL, [ALCOHOLS], id="alcohol"),
    pytest.param(CHLOROETHANOL, [ALCOHOLS, HALIDES], id="two-parents"),
    pytest.param(ACETATE, [ANIONS, ACIDS], id="anion-and-acid"),
    pytest.param("CCCC", [ROOT], id="root-only"),
])
def test_clean_terms_get_no_opposing_verdict(smiles: str, parents: list[str]) -> None:
    found = opinions(CLEAN_RULES, smiles, parents)
    assert "opposes" not in found.values()
    assert all(found.get(p) in (None, "supports") for p in parents)


def test_evidence_names_rule_smarts_and_atoms() -> None:
    onto = ontology([("CHEM:1000001", ACETIC_ACID, [ACIDS])])
    ruleset, _ = load_rules([("rules/chem.yaml", rule(ACIDS, "defining", any_of=[ACID]))], onto)
    verdict = next(v for v in ruleset.verdicts(onto, ["CHEM:1000001"], {"CHEM:1000001": ACETIC_ACID})["CHEM:1000001"]
                   if v.cls == ACIDS)
    assert verdict.tier == "rule"
    assert verdict.evidence["rule"] == "rules/chem.yaml:1"
    assert verdict.evidence["smarts"] == [ACID]
    # CC(=O)O: atoms 1 (carbonyl C), 2 (=O), 3 (OH), in the SMARTS's order C, O, O.
    assert verdict.evidence["atoms"] == [[1, 2, 3]]


def test_unreadable_structure_abstains() -> None:
    onto = ontology([("CHEM:1000001", "C1CC", [ACIDS])])
    ruleset, _ = load_rules([("rules/chem.yaml", rule(ACIDS, "defining", any_of=[ACID]))], onto)
    [verdict] = ruleset.verdicts(onto, ["CHEM:1000001"], {"CHEM:1000001": "C1CC"})["CHEM:1000001"]
    assert (verdict.cls, verdict.opinion) == ("", "abstains")
    assert "unclosed ring" in verdict.evidence["reason"]


def test_digest_follows_content_not_position() -> None:
    onto = ontology([])
    first, _ = load_rules([("a.yaml", rule(ACIDS, "defining", any_of=[ACID]))], onto)
    moved, _ = load_rules([("b.yaml", "\n\n" + rule(ALCOHOLS, "necessary", any_of=[ALCOHOL])
                            + rule(ACIDS, "defining", any_of=[ACID]))], onto)
    changed, _ = load_rules([("a.yaml", rule(ACIDS, "defining", any_of=[AROMATIC_ACID]))], onto)
    assert first.digest(ACIDS) == moved.digest(ACIDS)
    assert first.digest(ACIDS) != changed.digest(ACIDS)
    assert first.digest(ALCOHOLS) != moved.digest(ALCOHOLS)
    assert moved.classes() == [ACIDS, ALCOHOLS]


# -- validation: every problem names file:line -------------------------------------------------

INVALID = [
    pytest.param(f"- class: {ACIDS}\n  kind: defining\n  any_of: ['C(=O']\n", "rules/x.yaml:3: any_of: not a valid SMARTS",
                 id="bad-smarts"),
    pytest.param(f"- class: {ACIDS}\n  kind: defining\n  anyof: ['{ACID}']\n", "rules/x.yaml:3: unknown key 'anyof'",
                 id="unknown-key"),
    pytest.param(f"- class: {ACIDS}\n  kind: usually\n  any_of: ['{ACID}']\n", "rules/x.yaml:1: kind 'usually'",
                 id="bad-kind"),
    pytest.param(f"- kind: defining\n  any_of: ['{ACID}']\n", "rules/x.yaml:1: rule has no 'class'", id="no-class"),
    pytest.param(f"- class: {ACIDS}\n  kind: defining\n", "rules/x.yaml:1: rule for CHEM:0000002 gives no condition",
                 id="no-condition"),
    pytest.param(f"class: {ACIDS}\n", "rules/x.yaml:1: a rule file is a list of rules", id="not-a-list"),
    pytest.param(f"- class: {ACIDS}\n  kind: defining\n  any_of: [C\n", "rules/x.yaml:4: not valid YAML",
                 id="yaml-syntax"),
    pytest.param(f"- class: {ACIDS}\n  kind: defining\n  has_elements: [Xx]\n",
                 "rules/x.yaml:3: has_elements: 'Xx' is not an element symbol", id="bad-element"),
    pytest.param(f"- class: {ACIDS}\n  kind: defining\n  net_charge: minus one\n",
                 "rules/x.yaml:3: net_charge must be an integer", id="bad-charge"),
    pytest.param(f"- class: {ACIDS}\n  kind: defining\n  any_of: [[C]]\n", "rules/x.yaml:3: any_of must list SMARTS",
                 id="nested-list"),
]


@pytest.mark.parametrize(("text", "message"), INVALID)
def test_invalid_rule_files_name_file_and_line(text: str, message: str) -> None:
    with pytest.raises(RuleFileError) as caught:
        load_rules([("rules/x.yaml", text)], ontology([]))
    assert str(caught.value).startswith(message), str(caught.value)
    assert "\n" not in str(caught.value)


def test_every_problem_is_kept() -> None:
    text = f"- class: {ACIDS}\n  kind: defining\n  any_of: ['C(=O', '{ACID}', 'c1cc']\n  colour: red\n"
    with pytest.raises(RuleFileError) as caught:
        load_rules([("rules/x.yaml", text)], ontology([]))
    assert len(caught.value.problems) == 3
    assert str(caught.value).endswith("(and 2 more problems)")


def test_missing_class_is_a_warning() -> None:
    text = rule("CHEM:9999999", "defining", any_of=[ACID]) + rule(ACIDS, "defining", any_of=[ACID])
    ruleset, warnings = load_rules([("rules/x.yaml", text)], ontology([]))
    assert warnings == ["rules/x.yaml:1: class CHEM:9999999 is not in the ontology; rule ignored"]
    assert ruleset.classes() == [ACIDS]


def test_empty_rule_file_and_bytes() -> None:
    ruleset, warnings = load_rules([("rules/empty.yaml", ""), ("rules/b.yaml", rule(ACIDS, "defining",
                                                                                    any_of=[ACID]).encode())],
                                   ontology([]))
    assert (len(ruleset), warnings) == (1, [])


# -- agreement with the curation ------------------------------------------------------------

def test_rule_agreement_counts_and_examples() -> None:
    onto = ontology([("CHEM:1000001", ACETIC_ACID, [ACIDS]), ("CHEM:1000002", BENZOIC_ACID, [AROMATIC_ACIDS]),
                     ("CHEM:1000003", ETHANOL, [ACIDS]), ("CHEM:1000004", CHLOROACETIC_ACID, [HALIDES]),
                     ("CHEM:1000005", "C1CC", [ACIDS])])
    ruleset, _ = load_rules([("rules/x.yaml", rule(ACIDS, "defining", any_of=[ACID]))], onto)
    report = rule_agreement(ruleset, onto, Config())
    [row] = report.rules
    assert report.structured == 4
    assert [t for t, _ in report.unchecked] == ["CHEM:1000005"]
    assert (row.members, row.matched_inside, row.matched_outside, row.missed_inside) == (3, 2, 1, 1)
    assert row.examples_outside == ("CHEM:1000004",)
    assert row.examples_missed == ("CHEM:1000003",)
    assert row.precision == pytest.approx(2 / 3)
    assert row.recall == pytest.approx(2 / 3)


TEXTBOOK = [ACETIC_ACID, ACETATE, BENZOIC_ACID, ETHANOL, CHLOROACETIC_ACID, CHLOROFORM, CHLOROETHANOL,
            "CCCC", "[Na+].[Cl-]"]


def test_rule_table_agrees_with_each_rule_on_its_own() -> None:
    # Every rule of the semantics table over every textbook structure: the (structures x
    # rules) table that `rules test` and the verdicts use must say what `holds` says rule by
    # rule, with atoms found or not.
    text = "".join(case.values[0] for case in SEMANTICS)
    onto = ontology([(f"CHEM:10000{i:02d}", s, [ROOT]) for i, s in enumerate(TEXTBOOK)])
    ruleset, _ = load_rules([("rules/chem.yaml", text)], onto)
    everything = range(len(ruleset))
    for evidence in (True, False):
        outcomes = ruleset.outcomes(TEXTBOOK, [everything] * len(TEXTBOOK), Config().limits, evidence)
        table = ruleset.holds_table(outcomes)
        expected = [[ruleset.holds(i, o).holds for i in everything] for o in outcomes]
        assert table.tolist() == expected
        assert any(map(any, expected)) and not all(map(all, expected))  # both answers occur
