"""Structure facts against handbook values, the InChI standard and RDKit's own behaviour."""
from __future__ import annotations

import json
import subprocess
import sys

import pytest
from rdkit import Chem
from rdkit.Chem import rdMolDescriptors

from parentage.chem.molecules import (
    ELEMENT_SYMBOLS,
    MolFacts,
    analyse_inchi,
    analyse_many,
    analyse_smiles,
    captured_log,
    estimate_smiles_atoms,
    hill_formula,
    parse_formula,
    parse_smiles,
)
from parentage.config import Limits
from parentage.store import Store

# Formula as the handbook prints it, average molar mass in g/mol.
# Source: CRC Handbook of Chemistry and Physics, "Physical Constants of Organic Compounds" and
# "Physical Constants of Inorganic Compounds" (values from memory; the handbook gives three
# decimals). Tolerance 0.01 g/mol: handbook masses use older atomic weights (H 1.00794,
# C 12.0107) while RDKit uses the IUPAC/CIAAW conventional values (H 1.008, C 12.011), which
# moves a C10 compound by up to ~0.004 g/mol.
HANDBOOK = [
    pytest.param("O", "H2O", 18.015, id="water"),
    pytest.param("C", "CH4", 16.043, id="methane"),
    pytest.param("CCO", "C2H6O", 46.068, id="ethanol"),
    pytest.param("CC(=O)O", "C2H4O2", 60.052, id="acetic acid"),
    pytest.param("CC(C)=O", "C3H6O", 58.079, id="acetone"),
    pytest.param("c1ccccc1", "C6H6", 78.112, id="benzene"),
    pytest.param("Cc1ccccc1", "C7H8", 92.138, id="toluene"),
    pytest.param("c1ccc2ccccc2c1", "C10H8", 128.171, id="naphthalene"),
    pytest.param("OCC1OC(O)C(O)C(O)C1O", "C6H12O6", 180.156, id="glucose"),
    pytest.param("Cn1cnc2c1c(=O)n(C)c(=O)n2C", "C8H10N4O2", 194.191, id="caffeine"),
    pytest.param("CC(=O)Oc1ccccc1C(=O)O", "C9H8O4", 180.158, id="acetylsalicylic acid"),
    pytest.param("NC(N)=O", "CH4N2O", 60.056, id="urea"),
    pytest.param("NCC(=O)O", "C2H5NO2", 75.067, id="glycine"),
    pytest.param("[Na+].[Cl-]", "NaCl", 58.443, id="sodium chloride"),
    pytest.param("OS(=O)(=O)O", "H2SO4", 98.079, id="sulfuric acid"),
    pytest.param("N", "NH3", 17.031, id="ammonia"),
    pytest.param("O=C=O", "CO2", 44.009, id="carbon dioxide"),
]


@pytest.mark.parametrize(("smiles", "handbook_formula", "handbook_mass"), HANDBOOK)
def test_formula_and_average_mass_match_the_handbook(smiles: str, handbook_formula: str,
                                                     handbook_mass: float) -> None:
    facts = analyse_smiles(smiles)
    assert facts.error is None
    parsed = parse_formula(handbook_formula)
    assert parsed is not None
    assert facts.formula == hill_formula(*parsed)
    assert facts.average_mass == pytest.approx(handbook_mass, abs=0.01)
    assert facts.charge == 0


# Monoisotopic masses from the atomic masses of 1H 1.00782503, 12C 12 (exact), 16O 15.99491462
# (AME2020 atomic mass evaluation, from memory), summed by hand.
@pytest.mark.parametrize(("smiles", "expected"), [
    pytest.param("O", 2 * 1.00782503 + 15.99491462, id="water"),
    pytest.param("C", 12 + 4 * 1.00782503, id="methane"),
    pytest.param("c1ccccc1", 6 * 12 + 6 * 1.00782503, id="benzene"),
    pytest.param("O=C=O", 12 + 2 * 15.99491462, id="carbon dioxide"),
])
def test_monoisotopic_mass_from_isotope_masses(smiles: str, expected: float) -> None:
    assert analyse_smiles(smiles).monoisotopic_mass == pytest.approx(expected, abs=1e-5)


# Hill order (E. A. Hill, J. Am. Chem. Soc. 1900, 22, 478): carbon-free formulas are fully
# alphabetical, H included; this is how ChEBI writes them too (from memory: "ClH", "BH3O3").
@pytest.mark.parametrize(("smiles", "hill"), [
    pytest.param("Cl", "ClH", id="hydrogen chloride"),
    pytest.param("B(O)(O)O", "BH3O3", id="boric acid"),
    pytest.param("[Cl-].[NH4+]", "ClH4N", id="ammonium chloride"),
    pytest.param("ClC(Cl)Cl", "CHCl3", id="chloroform, carbon first then hydrogen"),
])
def test_formula_is_in_hill_order(smiles: str, hill: str) -> None:
    assert analyse_smiles(smiles).formula == hill


# Standard InChIKeys (InChI Trust algorithm); the keys are from memory of PubChem records.
@pytest.mark.parametrize(("smiles", "inchikey"), [
    pytest.param("O", "XLYOFNOQVPJJNP-UHFFFAOYSA-N", id="water"),
    pytest.param("C", "VNWKTOKETHGBQD-UHFFFAOYSA-N", id="methane"),
    pytest.param("OCC", "LFQSCWFLJHTTHZ-UHFFFAOYSA-N", id="ethanol"),
    pytest.param("c1ccccc1", "UHOVQNZJYSORNB-UHFFFAOYSA-N", id="benzene"),
    pytest.param("Cn1cnc2c1c(=O)n(C)c(=O)n2C", "RYYVLZVUVIJVGH-UHFFFAOYSA-N", id="caffeine"),
    pytest.param("CC(=O)Oc1ccccc1C(=O)O", "BSYNRYMUTXBXSQ-UHFFFAOYSA-N", id="aspirin"),
    pytest.param("C[C@H](N)C(=O)O", "QNAYBMKLOCPYGJ-REOHCLBHSA-N", id="L-alanine"),
    pytest.param("C[C@@H](N)C(=O)O", "QNAYBMKLOCPYGJ-UWTATZPHSA-N", id="D-alanine"),
    pytest.param("CC(N)C(=O)O", "QNAYBMKLOCPYGJ-UHFFFAOYSA-N", id="alanine, no stereo"),
    pytest.param("[NH4+]", "QGZKDVFQNNGYKY-UHFFFAOYSA-O", id="ammonium, cation"),
    pytest.param("CC(=O)[O-]", "QTBSBXVTEAMEQO-UHFFFAOYSA-M", id="acetate, anion"),
    pytest.param("[Cl-]", "VEXZGXHMUGYJMC-UHFFFAOYSA-M", id="chloride, anion"),
])
def test_standard_inchikey(smiles: str, inchikey: str) -> None:
    assert analyse_smiles(smiles).inchikey == inchikey


def test_stereoisomers_share_the_first_block_only() -> None:
    # InChI technical manual: the first 14 letters hash the connectivity, the second block
    # the remaining layers (stereo, isotopes), the last letter the protonation state.
    left = analyse_smiles("C[C@H](N)C(=O)O").inchikey
    right = analyse_smiles("C[C@@H](N)C(=O)O").inchikey
    assert left is not None and right is not None
    assert left[:14] == right[:14] and left[15:25] != right[15:25]


# Standard InChI strings (from memory of PubChem records).
@pytest.mark.parametrize(("smiles", "inchi"), [
    pytest.param("O", "InChI=1S/H2O/h1H2", id="water"),
    pytest.param("C", "InChI=1S/CH4/h1H4", id="methane"),
    pytest.param("CCO", "InChI=1S/C2H6O/c1-2-3/h3H,2H2,1H3", id="ethanol"),
    pytest.param("C[C@H](N)C(=O)O",
                 "InChI=1S/C3H7NO2/c1-2(4)3(5)6/h2H,4H2,1H3,(H,5,6)/t2-/m0/s1", id="L-alanine"),
])
def test_standard_inchi(smiles: str, inchi: str) -> None:
    assert analyse_smiles(smiles).inchi == inchi


def test_charge_is_the_net_formal_charge() -> None:
    # Common practice: the net charge of a salt sums its ions.
    assert analyse_smiles("CC(=O)[O-]").charge == -1
    assert analyse_smiles("[NH4+]").charge == 1
    assert analyse_smiles("[O-]S(=O)(=O)[O-]").charge == -2
    assert analyse_smiles("[Na+].[Cl-]").charge == 0
    assert analyse_smiles("CC(=O)[O-]").formula == "C2H3O2-"


def test_inchi_input_gives_the_same_facts_as_smiles() -> None:
    from_inchi = analyse_inchi("InChI=1S/C3H7NO2/c1-2(4)3(5)6/h2H,4H2,1H3,(H,5,6)/t2-/m0/s1")
    from_smiles = analyse_smiles("C[C@H](N)C(=O)O")
    assert from_inchi.error is None
    assert from_inchi._replace(warnings=()) == from_smiles._replace(warnings=())


# -- unreadable input: RDKit's reason, no traceback, nothing on the terminal ------------------

@pytest.mark.parametrize(("smiles", "words"), [
    pytest.param("C1CC", "unclosed ring", id="unclosed ring"),
    pytest.param("C(C", "extra open parentheses", id="open branch"),
    pytest.param("this is not chemistry", "syntax error", id="garbage"),
    pytest.param("CN(C)(C)(C)C", "Explicit valence", id="five-valent nitrogen"),
    pytest.param("c1cccc1", "kekulize", id="aromatic ring that cannot be kekulized"),
    pytest.param("   ", "empty SMILES", id="blank"),
])
def test_unreadable_smiles_carries_rdkits_reason(smiles: str, words: str) -> None:
    # The reasons are RDKit's own messages (RDKit SmilesParse and MolOps sanitisation).
    facts = analyse_smiles(smiles)
    assert facts.error is not None and words in facts.error
    assert facts.inchikey is None and facts.formula is None


@pytest.mark.parametrize(("inchi", "words"), [
    pytest.param("InChI=1S/garbage", "Syntax error", id="bad formula layer"),
    pytest.param("CCO", "must start with 'InChI='", id="a SMILES in the InChI field"),
])
def test_unreadable_inchi_carries_the_reason(inchi: str, words: str) -> None:
    facts = analyse_inchi(inchi)
    assert facts.error is not None and words in facts.error


def test_nothing_reaches_the_terminal(capfd: pytest.CaptureFixture[str]) -> None:
    analyse_smiles("C1CC")
    analyse_smiles("CN(C)(C)(C)C")
    analyse_inchi("InChI=1S/garbage")
    facts = analyse_smiles("[CH3]")  # the InChI library warns about carbon with valence 3
    out, err = capfd.readouterr()
    assert out == "" and err == ""
    assert any("valence" in line for line in facts.warnings)


def test_nothing_reaches_stderr_in_a_fresh_process() -> None:
    code = ("from parentage.chem.molecules import analyse_smiles as a\n"
            "print(a('C1CC').error is not None, a('c1cccc1').error is not None, "
            "a('[CH3]').inchikey is not None)")
    done = subprocess.run([sys.executable, "-c", code], check=False, capture_output=True,
                          text=True, timeout=60)
    assert done.returncode == 0
    assert done.stdout.strip() == "True True True"
    assert done.stderr == ""


def test_captured_log_collects_rdkit_lines() -> None:
    with captured_log() as lines:
        assert Chem.MolFromSmiles("C1CC") is None
    assert lines and "unclosed ring" in lines[0]
    assert not lines[0].startswith("[")  # the time stamp is dropped


def test_parse_smiles_returns_a_sanitised_molecule() -> None:
    mol, error, _ = parse_smiles("c1ccccc1O")
    assert error is None and mol is not None
    assert mol.GetAtomWithIdx(0).GetIsAromatic()  # aromaticity is set by sanitisation


# -- limits -----------------------------------------------------------------------------------

def test_two_thousand_atoms_are_refused_before_parsing() -> None:
    facts = analyse_smiles("C" * 2000)
    assert facts.error is not None and "limits.max_atoms" in facts.error
    assert facts.inchi is None


def test_too_many_characters_are_refused() -> None:
    facts = analyse_smiles("C" * 50, Limits(max_structure_chars=40))
    assert facts.error is not None and "limits.max_structure_chars" in facts.error


def test_inchi_atom_limit_uses_the_formula_layer() -> None:
    facts = analyse_inchi("InChI=1S/C10H8/c1-2-6-10-8-4-3-7-9(10)5-1/h1-8H", Limits(max_atoms=9))
    assert facts.error is not None and "limits.max_atoms" in facts.error


def test_inchi_library_limit_becomes_a_warning() -> None:
    # The InChI library reads at most 1024 atoms (its own log says so); past that, the other
    # facts are still computed and the InChI is missing, with the library's reason.
    facts = analyse_smiles("C" * 2000, Limits(max_atoms=5000))
    assert facts.error is None and facts.heavy_atoms == 2000
    assert facts.inchi is None and facts.inchikey is None
    assert any("Too many atoms" in line for line in facts.warnings)
    assert facts.formula == "C2000H4002"


@pytest.mark.parametrize("smiles", ["CCO", "c1ccccc1[N+](=O)[O-]", "[2H]C([2H])([2H])Cl",
                                    "C%10CCCCC%10", "[Na+].[Cl-]", "Brc1ccc(Cl)cc1", "*C(=O)O",
                                    "[*]CC[H]", "[13CH3][Se]C"])
def test_atom_estimate_equals_rdkits_heavy_atom_count(smiles: str) -> None:
    mol = Chem.MolFromSmiles(smiles)
    assert estimate_smiles_atoms(smiles) == mol.GetNumHeavyAtoms()  # RDKit as reference


# -- the store --------------------------------------------------------------------------------

def test_analyse_many_reads_the_store_the_second_time() -> None:
    store = Store(None)
    first = analyse_many(["CCO", "OCC", "CCO", "C1CC"], store=store)
    assert set(first) == {"CCO", "OCC", "C1CC"}
    assert first["CCO"].inchikey == first["OCC"].inchikey
    hits = store.hits
    second = analyse_many(["CCO", "OCC", "C1CC"], store=store)
    assert second == first
    assert store.hits - hits == 3


def test_the_store_key_names_the_kind() -> None:
    store = Store(None)
    analyse_many(["InChI=1S/CH4/h1H4"], store=store, kind="inchi")
    assert store.get("molfacts", "inchi:InChI=1S/CH4/h1H4")["formula"] == "CH4"
    assert store.get("molfacts", "smiles:InChI=1S/CH4/h1H4") is None


def test_changed_limits_apply_to_cached_results() -> None:
    store = Store(None)
    assert analyse_many(["c1ccccc1"], store=store)["c1ccccc1"].error is None
    small = analyse_many(["c1ccccc1"], Limits(max_atoms=3), store)["c1ccccc1"]
    assert small.error is not None and "limits.max_atoms" in small.error
    # A refusal decided by the limits is not cached: a larger limit reads the structure.
    store2 = Store(None)
    analyse_many(["c1ccccc1"], Limits(max_atoms=3), store2)
    assert store2.get("molfacts", "smiles:c1ccccc1") is None


def test_molfacts_survive_json() -> None:
    for facts in (analyse_smiles("CC(=O)[O-]"), analyse_smiles("[CH3]"), analyse_smiles("C1CC")):
        assert MolFacts.from_json(json.loads(json.dumps(facts.to_json()))) == facts


# -- formulas as curators write them ----------------------------------------------------------

# The reference is RDKit's CalcMolFormula of the same substance, put in Hill order.
@pytest.mark.parametrize(("written", "smiles"), [
    pytest.param("OH2", "O", id="any element order"),
    pytest.param("CH3CH2OH", "CCO", id="condensed formula"),
    pytest.param("Ca(OH)2", "[Ca+2].[OH-].[OH-]", id="group in parentheses"),
    pytest.param("CuSO4.5H2O", "[Cu+2].[O-]S(=O)(=O)[O-].O.O.O.O.O", id="hydrate with a dot"),
    pytest.param("2Na.O4S", "[Na+].[Na+].[O-]S(=O)(=O)[O-]", id="InChI-style parts"),
    pytest.param("SO4(2-)", "[O-]S(=O)(=O)[O-]", id="charge in parentheses"),
    pytest.param("SO4 2-", "[O-]S(=O)(=O)[O-]", id="charge after a space"),
    pytest.param("O4S-2", "[O-]S(=O)(=O)[O-]", id="RDKit's charge style"),
    pytest.param("NH4+", "[NH4+]", id="single positive charge"),
    pytest.param("D2O", "[2H]O[2H]", id="deuterium counts as hydrogen"),
    pytest.param("CHO2R", "*C(=O)O", id="R group"),
])
def test_written_formula_reads_as_rdkits(written: str, smiles: str) -> None:
    parsed = parse_formula(written)
    assert parsed is not None
    counts, charge = parsed
    reference = rdMolDescriptors.CalcMolFormula(Chem.MolFromSmiles(smiles))
    ref = parse_formula(reference)
    assert ref is not None
    assert counts == ref[0]
    if charge is not None:
        assert charge == (ref[1] or 0)


@pytest.mark.parametrize("written", ["", "abc", "C2H6O)", "(C2H6O", "Xx2", "C2 H6 O!"])
def test_unreadable_formula(written: str) -> None:
    assert parse_formula(written) is None


def test_element_symbols_are_rdkit_periodic_table() -> None:
    # Reference: RDKit's periodic table (atomic numbers 1-118), as a reference library.
    from rdkit import Chem

    table = Chem.GetPeriodicTable()
    assert ELEMENT_SYMBOLS == [table.GetElementSymbol(n) for n in range(1, 119)]
