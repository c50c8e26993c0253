"""Fingerprints of the model tier, checked against RDKit's generator API used directly."""
from __future__ import annotations

import pytest
from rdkit import Chem
from rdkit.Chem import rdFingerprintGenerator as generators

from parentage.chem.fingerprints import Generator, bit_atoms, fingerprint_bits, settings_key
from parentage.config import ModelSettings
from parentage.errors import ParentageError

SMILES = "O=[N+]([O-])c1ccc(CC(N)C(=O)O)cc1"  # 4-nitrophenylalanine


def rdkit_bits(kind: str, size: int) -> set[int]:
    """One kind's set bits, straight from RDKit's generators (radius 2)."""
    mol = Chem.MolFromSmiles(SMILES)
    extra = {"atomInvariantsGenerator": generators.GetMorganFeatureAtomInvGen()} if kind == "featmorgan" else {}
    gen = generators.GetMorganGenerator(radius=2, fpSize=size, **extra)
    return set(gen.GetCountFingerprint(mol).GetNonzeroElements())


def test_one_kind_is_rdkits_fingerprint() -> None:
    for kind in ("morgan", "featmorgan"):
        (bits,) = fingerprint_bits([SMILES], ModelSettings(fingerprint=kind, size=2048))
        assert bits is not None and set(bits.tolist()) == rdkit_bits(kind, 2048)


def test_combined_kinds_are_the_union_of_their_parts() -> None:
    settings = ModelSettings(fingerprint="morgan+featmorgan", size=2048)
    (bits,) = fingerprint_bits([SMILES], settings)
    # Each part folds into its own half: Morgan bits below 1024, feature-Morgan bits above.
    want = rdkit_bits("morgan", 1024) | {1024 + b for b in rdkit_bits("featmorgan", 1024)}
    assert bits is not None and set(bits.tolist()) == want
    assert settings.part_size == 1024
    assert settings_key(settings) == "morgan+featmorgan-r2-s2048"


def test_atoms_of_a_combined_fingerprints_bits() -> None:
    """Each bit's atoms are the environments RDKit reports for the part that set it."""
    settings = ModelSettings(fingerprint="morgan+featmorgan", size=2048)
    (bits,) = fingerprint_bits([SMILES], settings)
    assert bits is not None
    found = bit_atoms(SMILES, settings, bits.tolist())
    assert set(found) == set(bits.tolist())
    mol = Chem.MolFromSmiles(SMILES)
    place = Generator(settings).place
    for part, kind in enumerate(("morgan", "featmorgan")):
        extra = generators.AdditionalOutput()
        extra.AllocateBitInfoMap()
        options = {"atomInvariantsGenerator": generators.GetMorganFeatureAtomInvGen()} if part else {}
        generator = generators.GetMorganGenerator(radius=2, fpSize=1024, **options)
        generator.GetCountFingerprint(mol, additionalOutput=extra)
        for bit, places in extra.GetBitInfoMap().items():
            (landed,) = place(part, [bit])
            for centre, radius in places:
                env = {centre}
                for bond in Chem.FindAtomEnvironmentOfRadiusN(mol, radius, centre):
                    b = mol.GetBondWithIdx(bond)
                    env |= {b.GetBeginAtomIdx(), b.GetEndAtomIdx()}
                assert env <= set(found[landed]), (kind, bit)


@pytest.mark.parametrize("kind", ["morgan+morgan", "morgan+circles", "", "morgan+"])
def test_bad_kinds_are_one_clear_error(kind: str) -> None:
    with pytest.raises(ParentageError, match="model.fingerprint") as caught:
        fingerprint_bits([SMILES], ModelSettings(fingerprint=kind))
    assert "\n" not in str(caught.value)
