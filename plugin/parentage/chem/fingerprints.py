"""Fingerprints for the model tier, from RDKit's generator API, cached in the store.

A fingerprint here is the sorted array of set bit positions (uint32) of a folded count
fingerprint: the model learns from presence, not counts (measured: presence scores higher on the
functional-group benchmark, see tests/benchmarks/bench_model.py). Arrays are stored as raw bytes
under `fp:<settings>`, keyed by the SMILES text as written: a hit then skips RDKit parsing, which
costs about three times the fingerprint itself on this machine.
"""
from __future__ import annotations

import hashlib
from collections.abc import Callable, Iterable, Sequence
from functools import partial
from typing import Any

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdFingerprintGenerator as generators

from parentage.chem import bounded
from parentage.chem.molecules import captured_log, parse_smiles
from parentage.config import Limits, ModelSettings
from parentage.errors import ParentageError
from parentage.store import Store

DEFAULT_LIMITS = Limits()
KINDS = ("morgan", "featmorgan", "atompair", "torsion")
MORGAN = ("morgan", "featmorgan")  # the kinds with a radius
Bits = np.ndarray  # sorted uint32 bit positions


def settings_key(settings: ModelSettings) -> str:
    """What determines a fingerprint: kind, radius (where it applies) and size."""
    radius = f"-r{settings.radius}" if any(k in MORGAN for k in _kinds(settings)) else ""
    return f"{settings.fingerprint}{radius}-s{settings.size}"


def _kinds(settings: ModelSettings) -> list[str]:
    """The parts of `settings.fingerprint`, checked: one kind, or distinct kinds joined by `+`."""
    kinds = settings.kinds
    unknown = [k for k in kinds if k not in KINDS]
    if unknown or len(set(kinds)) != len(kinds):
        raise ParentageError(f"model.fingerprint: {settings.fingerprint!r} is not one kind or distinct "
                             f"kinds joined by '+' (known: {', '.join(KINDS)})")
    return kinds


class Generator:
    """RDKit generators of each part of a (possibly combined) fingerprint kind.

    Part k folds into its own range of `settings.part_size` bits from k * part_size, so the
    parts never share a bit and the first part's bits can be read alone (the model tier's
    similarity to training members is Tanimoto over them: Morgan bits by default).
    """

    def __init__(self, settings: ModelSettings) -> None:
        if not 64 <= settings.size <= 1 << 24:
            raise ParentageError(f"model.size must be between 64 and {1 << 24}, not {settings.size}")
        self.kinds = _kinds(settings)
        self.part_size = settings.part_size
        self.parts = [_part(kind, settings.radius, self.part_size) for kind in self.kinds]

    def place(self, part: int, bits: Iterable[int]) -> list[int]:
        """Where part `part`'s own bit positions land in the combined fingerprint."""
        offset = part * self.part_size
        return [offset + b for b in bits]

    def bits(self, mol: Chem.Mol) -> Bits:
        found: list[int] = []
        for i, generator in enumerate(self.parts):
            found += self.place(i, generator.GetCountFingerprint(mol).GetNonzeroElements())
        return np.array(sorted(found), dtype=np.uint32)


def _part(kind: str, radius: int, size: int) -> Any:
    if kind == "morgan":
        return generators.GetMorganGenerator(radius=radius, fpSize=size)
    if kind == "featmorgan":
        invariants = generators.GetMorganFeatureAtomInvGen()
        return generators.GetMorganGenerator(radius=radius, fpSize=size, atomInvariantsGenerator=invariants)
    if kind == "atompair":
        return generators.GetAtomPairGenerator(fpSize=size)
    return generators.GetTopologicalTorsionGenerator(fpSize=size)


def fingerprint_bits(smiles: Sequence[str], settings: ModelSettings, limits: Limits = DEFAULT_LIMITS,
                     wrap: Callable[[Iterable[Any]], Iterable[Any]] | None = None) -> list[Bits | None]:
    """Set bits of each structure; None where the SMILES is unreadable, over the limits, or
    out of time (`limits.parse_seconds`). A large batch is read by one forked worker per core,
    each structure bounded in time (see chem/bounded.py); a small one (a review's handful,
    already read within the bound by the structure tier) in this process. `wrap` may decorate
    the progress through the batch (a progress bar)."""
    generator = Generator(settings)
    out: list[Bits | None] = [None] * len(smiles)
    if len(smiles) >= bounded.SPLIT_AT:
        # Forked workers inherit the generator; each sends its bits back as a list.
        read = partial(_bits_list, generator=generator, limits=limits)
        results: Iterable[Any] = bounded.bounded_map(read, smiles, limits.parse_seconds)
        for index, row, _why in (wrap(results) if wrap is not None else results):
            out[index] = None if row is None else np.array(row, dtype=np.uint32)
        return out
    for index, text in enumerate(wrap(smiles) if wrap is not None else smiles):
        out[index] = _bits_or_none(text, generator, limits)
    return out


def _bits_or_none(text: str, generator: Generator, limits: Limits) -> Bits | None:
    with captured_log():
        mol, error, _ = parse_smiles(text, limits)
        return None if mol is None or error else generator.bits(mol)


def _bits_list(text: str, generator: Generator, limits: Limits) -> list[int] | None:
    bits = _bits_or_none(text, generator, limits)
    return None if bits is None else bits.tolist()


def _key(smiles: str) -> str:
    # Long SMILES would bloat the index; a digest is as good a key.
    return smiles if len(smiles) <= 200 else "sha256:" + hashlib.sha256(smiles.encode()).hexdigest()


_UNREADABLE = b"\xff"  # an unreadable structure is remembered too, so it is not re-parsed


def cached_bits(smiles: Sequence[str], settings: ModelSettings, store: Store,
                limits: Limits = DEFAULT_LIMITS,
                wrap: Callable[[Iterable[Any]], Iterable[Any]] | None = None) -> list[Bits | None]:
    """`fingerprint_bits` through the store: each distinct SMILES is computed once.

    `wrap` may decorate the iteration over structures still to compute (a progress bar).
    """
    namespace = "fp:" + settings_key(settings)
    distinct = list(dict.fromkeys(smiles))
    keys = {s: _key(s) for s in distinct}
    known: dict[str, Bits | None] = {}
    for text in distinct:
        raw = store.get_bytes(namespace, keys[text])
        if raw is not None:
            known[text] = None if raw == _UNREADABLE else np.frombuffer(raw, dtype=np.uint32)
    missing = [s for s in distinct if s not in known]
    if missing:
        computed = fingerprint_bits(missing, settings, limits, wrap)
        known.update(zip(missing, computed))
        store.put_many_bytes(namespace, ((keys[s], _UNREADABLE if b is None else b.tobytes())
                                         for s, b in zip(missing, computed)))
    return [known[s] for s in smiles]


def bit_atoms(smiles: str, settings: ModelSettings, bits: Iterable[int],
              limits: Limits = DEFAULT_LIMITS) -> dict[int, list[int]]:
    """For each wanted bit, the atoms (0-based indices) of the environments that set it.

    Morgan bits name a centre atom and a radius; the atoms are that environment's atoms. Other
    kinds report the atoms RDKit's AdditionalOutput assigns to each bit. Each part of a
    combined kind reports the bits it sets, where they land in the combined fingerprint.
    """
    wanted = {int(b) for b in bits}
    with captured_log():
        mol, error, _ = parse_smiles(smiles, limits)
        if mol is None or error:
            return {}
        combined = Generator(settings)
        found: dict[int, set[int]] = {}
        for part, (kind, generator) in enumerate(zip(combined.kinds, combined.parts)):
            for bit, atoms in _part_atoms(mol, kind, generator).items():
                (landed,) = combined.place(part, (bit,))
                if landed in wanted:
                    found.setdefault(landed, set()).update(atoms)
    return {bit: sorted(atoms) for bit, atoms in found.items()}


def _part_atoms(mol: Chem.Mol, kind: str, generator: Any) -> dict[int, set[int]]:
    """One part's own bit positions and the atoms that set them."""
    extra = generators.AdditionalOutput()
    morgan = kind in MORGAN
    if morgan:
        extra.AllocateBitInfoMap()
    else:
        extra.AllocateAtomToBits()
    generator.GetCountFingerprint(mol, additionalOutput=extra)
    found: dict[int, set[int]] = {}
    if morgan:
        for bit, places in extra.GetBitInfoMap().items():
            atoms = found.setdefault(bit, set())
            for centre, radius in places:
                atoms.add(centre)
                for bond_idx in Chem.FindAtomEnvironmentOfRadiusN(mol, radius, centre):
                    bond = mol.GetBondWithIdx(bond_idx)
                    atoms.update((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
    else:
        for atom, atom_bits in enumerate(extra.GetAtomToBits()):
            for bit in atom_bits:
                found.setdefault(bit, set()).add(atom)
    return found
