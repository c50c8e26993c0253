"""The structure tier on real OBO text: annotation checks, duplicates and hierarchy checks."""
from __future__ import annotations

import fgbench
import pytest

from parentage.config import Config, Limits, Tolerances
from parentage.findings import Finding
from parentage.parse import parse_ontology_text
from parentage.snapshot import Ontology
from parentage.store import Store
from parentage.tiers.hierarchy import hierarchy_findings
from parentage.tiers.structure import (
    inchikey_index,
    structure_facts,
    structure_findings,
)

PATH = "src/compounds.obo"
HEADER = "format-version: 1.2\nontology: test\n"

# Ethanol, annotated correctly. Sources: InChI and InChIKey from memory of PubChem's record;
# formula and mass 46.068 g/mol from the CRC Handbook (from memory); monoisotopic mass summed
# from AME2020 atomic masses (2 x 12 + 6 x 1.00782503 + 15.99491462 = 46.04186, from memory).
ETHANOL = {
    "smiles": "CCO",
    "inchi": "InChI=1S/C2H6O/c1-2-3/h3H,2H2,1H3",
    "inchikey": "LFQSCWFLJHTTHZ-UHFFFAOYSA-N",
    "formula": "C2H6O",
    "mass": "46.068",
    "monoisotopic_mass": "46.04186",
    "charge": "0",
}


def stanza(term_id: str, props: dict[str, str] | None = None, is_a: tuple[str, ...] = (),
           extra: tuple[str, ...] = ()) -> str:
    lines = ["[Term]", f"id: {term_id}", f"name: {term_id.lower()}"]
    lines += [f"is_a: {p}" for p in is_a]
    lines += list(extra)
    for prop, value in (props or {}).items():
        value = value.replace("\\", "\\\\").replace('"', '\\"')
        lines.append(f'property_value: {prop} "{value}" xsd:string')
    return "\n".join(lines) + "\n"


def ontology(*stanzas: str) -> Ontology:
    text = HEADER + "\n" + "\n".join(stanzas)
    return Ontology("HEAD", [parse_ontology_text(text, PATH)])


def structure_of(onto: Ontology, term_ids: list[str] | None = None,
                 config: Config | None = None) -> list[Finding]:
    config = config or Config()
    ids = term_ids if term_ids is not None else list(onto.terms)
    facts = structure_facts(onto, ids, config)
    return structure_findings(onto, ids, config, facts, inchikey_index(onto, config, facts))


# -- annotation-mismatch -----------------------------------------------------------------------

MISMATCHES = [
    # A wrong value, the field it is in, and words the message must contain.
    pytest.param({"inchi": "InChI=1S/CH4O/c1-2/h2H,1H3"}, "inchi", "not the standard InChI",
                 id="InChI of methanol (from memory)"),
    pytest.param({"inchi": "InChI=1/C2H6O/c1-2-3/h3H,2H2,1H3"}, "inchi", "InChI=1S/",
                 id="non-standard InChI prefix"),
    pytest.param({"inchikey": "VNWKTOKETHGBQD-UHFFFAOYSA-N"}, "inchikey", "LFQSCWFLJHTTHZ",
                 id="InChIKey of methane (from memory)"),
    pytest.param({"inchikey": "LFQSCWFLJHTTHZ"}, "inchikey", "not a valid InChIKey",
                 id="first block only"),
    pytest.param({"formula": "C2H6O2"}, "formula", "C2H6O", id="one oxygen too many"),
    pytest.param({"formula": "C2H6O+"}, "formula", "C2H6O+", id="a charge the structure lacks"),
    pytest.param({"formula": "ethanol"}, "formula", "cannot be read", id="a name, not a formula"),
    pytest.param({"mass": "47.07"}, "mass", "differs", id="mass off by one"),
    pytest.param({"mass": "46.2"}, "mass", "tolerance 0.05", id="mass just outside tolerance"),
    pytest.param({"mass": "abc"}, "mass", "not a number", id="mass not a number"),
    pytest.param({"monoisotopic_mass": "46.05"}, "monoisotopic_mass", "differs",
                 id="monoisotopic mass outside 0.005"),
    pytest.param({"charge": "+1"}, "charge", "net formal charge, 0", id="charge of a cation"),
    pytest.param({"charge": "neutral"}, "charge", "not an integer", id="charge as a word"),
]


@pytest.mark.parametrize(("wrong", "field", "words"), MISMATCHES)
def test_each_wrong_annotation_is_one_finding(wrong: dict[str, str], field: str, words: str) -> None:
    onto = ontology(stanza("T:1", {**ETHANOL, **wrong}))
    findings = structure_of(onto)
    assert [(f.kind, f.evidence["field"]) for f in findings] == [("annotation-mismatch", field)]
    finding = findings[0]
    assert words in finding.message
    assert finding.evidence["found"] == wrong[field]
    assert finding.term == "T:1" and finding.path == PATH and finding.line == 4  # HEADER, a blank line, then the stanza
    assert finding.severity == "" and finding.tiers == ("structure",)


def test_every_wrong_field_is_reported() -> None:
    wrong = {"inchi": "InChI=1S/CH4/h1H4", "inchikey": "VNWKTOKETHGBQD-UHFFFAOYSA-N",
             "formula": "CH4", "mass": "16.04", "monoisotopic_mass": "16.0313", "charge": "1"}
    findings = structure_of(ontology(stanza("T:1", {**ETHANOL, **wrong})))
    assert sorted(f.evidence["field"] for f in findings) == sorted(wrong)


CONSISTENT = [
    pytest.param(ETHANOL, id="ethanol, every field right"),
    pytest.param({**ETHANOL, "formula": "CH3CH2OH"}, id="condensed formula in another order"),
    pytest.param({**ETHANOL, "mass": "46.07"}, id="mass to two decimals"),
    pytest.param({**ETHANOL, "mass": "46.1"}, id="mass within 0.05"),
    pytest.param({"smiles": "OCC", "inchikey": "LFQSCWFLJHTTHZ-UHFFFAOYSA-N"},
                 id="SMILES written another way"),
    # Acetate (ChEBI writes the formula without the charge; charge in its own field; common
    # practice). InChIKey from memory of PubChem.
    pytest.param({"smiles": "CC(=O)[O-]", "formula": "C2H3O2", "charge": "-1",
                  "inchikey": "QTBSBXVTEAMEQO-UHFFFAOYSA-M"}, id="acetate, charge apart"),
    pytest.param({"smiles": "CC(=O)[O-]", "formula": "C2H3O2-", "charge": "1-"},
                 id="acetate, charge in the formula and trailing sign"),
    # Water: formula as chemists write it and in Hill order (Hill 1900).
    pytest.param({"smiles": "O", "formula": "H2O", "mass": "18.015"}, id="water"),
    pytest.param({"smiles": "Cl", "formula": "HCl"}, id="hydrogen chloride, H first"),
    pytest.param({"smiles": "[Na+].[Cl-]", "formula": "NaCl", "mass": "58.44", "charge": "0"},
                 id="sodium chloride, handbook formula"),
    pytest.param({"inchi": ETHANOL["inchi"], "inchikey": ETHANOL["inchikey"], "formula": "C2H6O"},
                 id="InChI only"),
    pytest.param({"smiles": "*C(=O)O", "formula": "CHO2R"}, id="class with an R group"),
    pytest.param({}, id="no structure at all"),
]


@pytest.mark.parametrize("props", CONSISTENT)
def test_consistent_term_gives_no_finding(props: dict[str, str]) -> None:
    assert structure_of(ontology(stanza("T:1", props))) == []


# -- InChIKey notes: stereo block and protonation flag -----------------------------------------

def test_stereo_only_difference_is_named() -> None:
    # L-alanine's SMILES with D-alanine's key (both from memory of PubChem).
    onto = ontology(stanza("T:1", {"smiles": "C[C@H](N)C(=O)O",
                                   "inchikey": "QNAYBMKLOCPYGJ-UWTATZPHSA-N"}))
    [finding] = structure_of(onto)
    assert "only the second block" in finding.message
    assert finding.evidence["expected"] == "QNAYBMKLOCPYGJ-REOHCLBHSA-N"


def test_protonation_only_difference_is_named() -> None:
    # Ammonium's SMILES with ammonia's key (from memory): only the final letter differs.
    onto = ontology(stanza("T:1", {"smiles": "[NH4+]", "inchikey": "QGZKDVFQNNGYKY-UHFFFAOYSA-N"}))
    [finding] = structure_of(onto)
    assert "only the protonation flag" in finding.message


def test_unrelated_key_has_no_note() -> None:
    onto = ontology(stanza("T:1", {"smiles": "C", "inchikey": ETHANOL["inchikey"]}))
    [finding] = structure_of(onto)
    assert "second block" not in finding.message and "protonation" not in finding.message


# -- structure-unreadable ----------------------------------------------------------------------

UNREADABLE = [
    pytest.param({"smiles": "C1CC"}, "unclosed ring", id="unclosed ring (RDKit's words)"),
    pytest.param({"smiles": "CN(C)(C)(C)C"}, "Explicit valence", id="valence (RDKit's words)"),
    pytest.param({"smiles": "not a smiles at all"}, "syntax error", id="garbage"),
    pytest.param({"smiles": "C" * 2000}, "limits.max_atoms", id="2,000 atoms"),
    pytest.param({"inchi": "InChI=1S/garbage"}, "Syntax error", id="InChI only, unreadable"),
    # A SMILES that cannot be read is not checked against its annotations.
    pytest.param({**ETHANOL, "smiles": "C1CC"}, "unclosed ring", id="annotations not checked"),
]


@pytest.mark.parametrize(("props", "words"), UNREADABLE)
def test_unreadable_structure(props: dict[str, str], words: str) -> None:
    findings = structure_of(ontology(stanza("T:1", props)))
    assert [f.kind for f in findings] == ["structure-unreadable"]
    assert words in findings[0].message and words in findings[0].evidence["reason"]
    assert len(findings[0].evidence["structure"]) <= 200


def test_obsolete_and_unlisted_terms_are_not_checked() -> None:
    onto = ontology(stanza("T:1", {"smiles": "C1CC"}, extra=("is_obsolete: true",)),
                    stanza("T:2", {"smiles": "C1CC"}))
    assert structure_of(onto, ["T:1", "T:9"]) == []


def test_configured_property_names_are_used() -> None:
    config = Config(structure={"smiles": ("chem:smiles",), "mass": ("chem:mass",)})
    onto = ontology(stanza("T:1", {"chem:smiles": "CCO", "chem:mass": "12.0", "mass": "46.07"}))
    findings = structure_of(onto, config=config)
    assert [(f.kind, f.evidence["found"]) for f in findings] == [("annotation-mismatch", "12.0")]


def test_configured_tolerance_is_used() -> None:
    onto = ontology(stanza("T:1", {"smiles": "CCO", "mass": "46.2"}))
    loose = Config(tolerance=Tolerances(mass=0.5))
    assert structure_of(onto, config=loose) == []
    assert len(structure_of(onto)) == 1


def test_configured_limits_are_used() -> None:
    onto = ontology(stanza("T:1", {"smiles": "c1ccccc1"}))
    [finding] = structure_of(onto, config=Config(limits=Limits(max_atoms=5)))
    assert finding.kind == "structure-unreadable" and "6 > 5" in finding.message


# -- duplicate-structure -----------------------------------------------------------------------

def test_two_listed_terms_with_one_structure() -> None:
    onto = ontology(stanza("T:1", {"smiles": "CCO"}), stanza("T:2", {"smiles": "OCC"}))
    findings = structure_of(onto)
    assert [(f.kind, f.term, f.evidence["others"]) for f in findings] == [
        ("duplicate-structure", "T:1", ["T:2"]), ("duplicate-structure", "T:2", ["T:1"])]
    assert "LFQSCWFLJHTTHZ-UHFFFAOYSA-N" in findings[0].message and "T:2" in findings[0].message


def test_duplicate_of_an_unlisted_term_comes_from_the_index() -> None:
    onto = ontology(stanza("T:1", {"smiles": "CCO"}), stanza("T:2", {"smiles": "OCC"}))
    config = Config()
    facts = structure_facts(onto, onto.terms, config)
    index = inchikey_index(onto, config, facts)
    assert index == {"LFQSCWFLJHTTHZ-UHFFFAOYSA-N": ("T:1", "T:2")}
    [finding] = structure_findings(onto, ["T:2"], config, facts, index)
    assert finding.kind == "duplicate-structure" and finding.evidence["others"] == ["T:1"]
    # Without the index, an unlisted duplicate is not seen.
    assert structure_findings(onto, ["T:2"], config, facts, {}) == []


def test_stereoisomers_are_not_duplicates() -> None:
    # L- and D-alanine differ in the InChIKey's second block (InChI technical manual).
    onto = ontology(stanza("T:1", {"smiles": "C[C@H](N)C(=O)O"}),
                    stanza("T:2", {"smiles": "C[C@@H](N)C(=O)O"}))
    assert structure_of(onto) == []


def test_an_obsolete_twin_is_no_duplicate() -> None:
    onto = ontology(stanza("T:1", {"smiles": "CCO"}),
                    stanza("T:2", {"smiles": "OCC"}, extra=("is_obsolete: true",)))
    assert structure_of(onto) == []
    # Even when the caller's index still names it.
    config = Config()
    facts = structure_facts(onto, ["T:1"], config)
    assert structure_findings(onto, ["T:1"], config, facts,
                              {"LFQSCWFLJHTTHZ-UHFFFAOYSA-N": ("T:1", "T:2")}) == []


def test_index_falls_back_to_the_written_key() -> None:
    onto = ontology(stanza("T:1", {"smiles": "CCO", "inchikey": ETHANOL["inchikey"]}),
                    stanza("T:2", {"smiles": "C", "inchikey": "not a key"}))
    assert inchikey_index(onto, Config(), {}) == {ETHANOL["inchikey"]: ("T:1",)}


# -- facts from the store ----------------------------------------------------------------------

def test_facts_from_the_store_give_the_same_findings() -> None:
    onto = ontology(stanza("T:1", {**ETHANOL, "mass": "50"}), stanza("T:2", {"smiles": "C1CC"}),
                    stanza("T:3", {"inchi": "InChI=1S/CH4/h1H4", "formula": "CH3"}))
    config = Config()
    store = Store(None)
    first = structure_facts(onto, onto.terms, config, store)
    again = structure_facts(onto, onto.terms, config, store)
    assert again == first and store.hits == 3
    with_facts = structure_findings(onto, onto.terms, config, again, {})
    without = structure_findings(onto, onto.terms, config, {}, {})
    assert with_facts == without
    assert [(f.term, f.kind) for f in without] == [
        ("T:1", "annotation-mismatch"), ("T:2", "structure-unreadable"),
        ("T:3", "annotation-mismatch")]


# -- hierarchy ---------------------------------------------------------------------------------

def fg_hierarchy(*extra: str) -> Ontology:
    """RDKit's shipped functional-group hierarchy (via fgbench) as OBO, plus extra stanzas."""
    return Ontology("HEAD", [parse_ontology_text(fgbench.obo_text([]) + "\n" + "\n".join(extra),
                                                 PATH)])


def test_a_well_formed_hierarchy_gives_no_finding() -> None:
    # RDKit's Functional_Group_Hierarchy.txt nests groups by dotted names: a tree.
    onto = fg_hierarchy()
    assert len(onto.terms) > 50
    assert hierarchy_findings(onto, onto.terms) == []


def _group(key: str) -> str:
    return next(g.id for g in fgbench.groups() if g.key == key)


def test_redundant_parent_names_the_parent_that_implies_it() -> None:
    primary = _group("Amine.Primary")
    amine = _group("Amine")
    onto = fg_hierarchy(stanza("T:1", is_a=(primary, amine)))
    [finding] = hierarchy_findings(onto, ["T:1"])
    assert finding.kind == "parent-redundant" and finding.classes == (amine,)
    assert finding.evidence == {"parent": amine, "implied_by": [primary]}
    assert primary in finding.message
    assert (finding.path, finding.line) == (PATH, onto.terms["T:1"].line)


def test_cycle_is_reported_once_for_each_term_on_it() -> None:
    onto = ontology(stanza("T:1", is_a=("T:2",)), stanza("T:2", is_a=("T:3",)),
                    stanza("T:3", is_a=("T:1",)), stanza("T:4", is_a=("T:1",)))
    findings = hierarchy_findings(onto, onto.terms)
    assert [(f.kind, f.term, f.evidence["cycle"]) for f in findings] == [
        ("hierarchy-cycle", "T:1", ["T:1", "T:2", "T:3", "T:1"]),
        ("hierarchy-cycle", "T:2", ["T:2", "T:3", "T:1", "T:2"]),
        ("hierarchy-cycle", "T:3", ["T:3", "T:1", "T:2", "T:3"])]
    assert findings[0].message == "is_a cycle: T:1 -> T:2 -> T:3 -> T:1"
    # Only listed terms are reported.
    assert [f.term for f in hierarchy_findings(onto, ["T:2", "T:4"])] == ["T:2"]


def test_self_loop_is_a_cycle() -> None:
    onto = ontology(stanza("T:1", is_a=("T:1",)))
    [finding] = hierarchy_findings(onto, ["T:1"])
    assert finding.kind == "hierarchy-cycle" and finding.evidence["cycle"] == ["T:1", "T:1"]


def test_two_cycles_through_one_term() -> None:
    onto = ontology(stanza("T:1", is_a=("T:2", "T:3")), stanza("T:2", is_a=("T:1",)),
                    stanza("T:3", is_a=("T:1",)))
    cycles = [f.evidence["cycle"] for f in hierarchy_findings(onto, ["T:1"])]
    assert cycles == [["T:1", "T:2", "T:1"], ["T:1", "T:3", "T:1"]]


def test_parents_on_a_cycle_are_not_called_redundant() -> None:
    onto = ontology(stanza("T:1", is_a=("T:2", "T:3")), stanza("T:2", is_a=("T:3",)),
                    stanza("T:3", is_a=("T:2",)))
    kinds = {f.kind for f in hierarchy_findings(onto, ["T:1"])}
    assert kinds == set()  # T:1 is not on the cycle; T:2 and T:3 imply each other


DANGLING = [
    pytest.param(stanza("T:1", is_a=("T:404",)), "is_a", "T:404", id="is_a target"),
    pytest.param(stanza("T:1", extra=("relationship: part_of T:405",)), "part_of", "T:405",
                 id="relationship target"),
]


@pytest.mark.parametrize(("text", "clause", "target"), DANGLING)
def test_dangling_reference(text: str, clause: str, target: str) -> None:
    [finding] = hierarchy_findings(ontology(text), ["T:1"])
    assert finding.kind == "parent-dangling" and finding.classes == (target,)
    assert finding.evidence == {"clause": clause, "target": target}
    assert f"{clause} {target}" in finding.message


def test_obsolete_parent_names_its_replacement() -> None:
    onto = ontology(stanza("T:1", is_a=("T:2",), extra=("relationship: part_of T:2",)),
                    stanza("T:2", extra=("is_obsolete: true", "replaced_by: T:3")),
                    stanza("T:3"))
    findings = hierarchy_findings(onto, ["T:1"])
    assert [(f.kind, f.evidence["clause"]) for f in findings] == [
        ("parent-obsolete", "is_a"), ("parent-obsolete", "part_of")]
    assert "replaced by T:3" in findings[0].message


def test_obsolete_terms_are_not_checked_for_hierarchy() -> None:
    onto = ontology(stanza("T:1", is_a=("T:404",), extra=("is_obsolete: true",)))
    assert hierarchy_findings(onto, ["T:1"]) == []
