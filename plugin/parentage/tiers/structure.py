"""The structure tier: does each structured term agree with its own annotations, and is its
place in the is_a hierarchy well formed? Pure functions from records to `Finding`s."""
from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping

from parentage.chem.molecules import MolFacts, analyse, analyse_many, hill_formula, parse_formula
from parentage.config import Config, Limits
from parentage.findings import Finding
from parentage.snapshot import Ontology, Structure, Term, read_structure
from parentage.store import Store
from parentage.tiers import live_terms as _live
from parentage.tiers import term_finding as _finding

_KEY_SHAPE = re.compile(r"^[A-Z]{14}-[A-Z]{10}-[A-Z]$")


def _source(structure: Structure) -> tuple[str, str] | None:
    """(kind, text) the structure is read from: the SMILES, else the InChI."""
    if structure.smiles is not None:
        return "smiles", structure.smiles
    if structure.inchi is not None:
        return "inchi", structure.inchi
    return None


def structure_texts(ontology: Ontology, term_ids: Iterable[str], config: Config) -> dict[str, list[str]]:
    """The structure text each listed live term is read from, by kind (SMILES, or InChI
    where a term gives no SMILES)."""
    wanted: dict[str, list[str]] = {"smiles": [], "inchi": []}
    for term in _live(ontology, term_ids):
        source = _source(read_structure(term, config.structure))
        if source is not None:
            wanted[source[0]].append(source[1])
    return wanted


def structure_facts(ontology: Ontology, term_ids: Iterable[str], config: Config,
                    store: Store | None = None) -> dict[str, MolFacts]:
    """`MolFacts` for the structure of each listed live term, keyed by the text as written."""
    facts: dict[str, MolFacts] = {}
    for kind, texts in structure_texts(ontology, term_ids, config).items():
        facts.update(analyse_many(texts, config.limits, store, kind))
    return facts


def _facts_of(source: tuple[str, str], facts: Mapping[str, MolFacts], limits: Limits) -> MolFacts:
    known = facts.get(source[1])
    return known if known is not None else analyse(source[1], source[0], limits)


def inchikey_index(ontology: Ontology, config: Config,
                   facts: Mapping[str, MolFacts]) -> dict[str, tuple[str, ...]]:
    """Standard InChIKey -> ids of the live structured terms that have it.

    A term whose structure is not in `facts` is indexed by its written InChIKey: reading
    every structure of a large ontology for this index would cost more than the review.
    """
    index: dict[str, list[str]] = {}
    for term in ontology.merged.live():
        structure = read_structure(term, config.structure)
        source = _source(structure)
        if source is None:
            continue
        known = facts.get(source[1])
        key = known.inchikey if known is not None else structure.inchikey
        if key and _KEY_SHAPE.match(key):
            index.setdefault(key, []).append(term.id)
    return {k: tuple(v) for k, v in index.items()}


# -- annotation checks ------------------------------------------------------------------------

Mismatch = tuple[str, str, object, str]  # (field, message, expected, found)


def _mismatch(field: str, expected: object, found: str, message: str) -> Mismatch:
    return field, message, expected, found


def _key_note(expected: str, found: str) -> str:
    if expected[:14] != found[:14]:
        return ""
    stereo = expected[15:25] != found[15:25]
    flag = expected[26:] != found[26:]
    if stereo and flag:
        return " (same skeleton; the stereo block and the protonation flag differ)"
    if stereo:
        return " (same skeleton; only the second block, stereo and isotopes, differs)"
    return " (only the protonation flag differs)"


def _number(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _charge(text: str) -> int | None:
    match = re.fullmatch(r"([+-]?)(\d+)([+-]?)", text.strip())
    if match is None or (match.group(1) and match.group(3)):
        return None
    size = int(match.group(2))
    return -size if "-" in (match.group(1), match.group(3)) else size


def _check_fields(structure: Structure, facts: MolFacts, kind: str,
                  config: Config) -> list[Mismatch]:
    """A `Mismatch` for every written annotation that disagrees with the structure."""
    out = []
    if (kind == "smiles" and structure.inchi is not None and facts.inchi is not None
            and structure.inchi != facts.inchi):
        out.append(_mismatch("inchi", facts.inchi, structure.inchi,
                             f"InChI {structure.inchi} is not the standard InChI of the "
                             f"structure, {facts.inchi}"))
    if structure.inchikey is not None and facts.inchikey is not None:
        found = structure.inchikey
        if not _KEY_SHAPE.match(found):
            out.append(_mismatch("inchikey", facts.inchikey, found,
                                 f"InChIKey {found!r} is not a valid InChIKey (14-10-1 capital "
                                 f"letters); the structure gives {facts.inchikey}"))
        elif found != facts.inchikey:
            out.append(_mismatch("inchikey", facts.inchikey, found,
                                 f"InChIKey {found} is not the standard InChIKey of the "
                                 f"structure, {facts.inchikey}{_key_note(facts.inchikey, found)}"))
    if structure.formula is not None and facts.formula is not None:
        out += _check_formula(structure.formula, facts)
    for field, expected, tolerance in (
            ("mass", facts.average_mass, config.tolerance.mass),
            ("monoisotopic_mass", facts.monoisotopic_mass, config.tolerance.monoisotopic_mass)):
        written = getattr(structure, field)
        if written is None or expected is None:
            continue
        label = "average mass" if field == "mass" else "monoisotopic mass"
        value = _number(written)
        if value is None:
            out.append(_mismatch(field, expected, written,
                                 f"{label} {written!r} is not a number; the structure gives "
                                 f"{expected:.4f}"))
        elif abs(value - expected) > tolerance:
            out.append(_mismatch(field, expected, written,
                                 f"{label} {written} differs from the structure's {expected:.4f} "
                                 f"by {abs(value - expected):.4f} (tolerance {tolerance})"))
    if structure.charge is not None and facts.charge is not None:
        value_c = _charge(structure.charge)
        if value_c is None:
            out.append(_mismatch("charge", facts.charge, structure.charge,
                                 f"charge {structure.charge!r} is not an integer; the structure's "
                                 f"net formal charge is {facts.charge}"))
        elif value_c != facts.charge:
            out.append(_mismatch("charge", facts.charge, structure.charge,
                                 f"charge {structure.charge} differs from the structure's net "
                                 f"formal charge, {facts.charge}"))
    return out


def _check_formula(written: str, facts: MolFacts) -> list[Mismatch]:
    # The written formula is put in Hill order first, so "OH2" and "H2O" agree. A formula
    # written without a charge is compared on its elements alone: the charge has its own field.
    assert facts.formula is not None
    parsed = parse_formula(written)
    if parsed is None:
        return [_mismatch("formula", facts.formula, written,
                          f"formula {written!r} cannot be read; the structure gives {facts.formula}")]
    counts, charge = parsed
    computed = parse_formula(facts.formula)
    assert computed is not None  # RDKit's own formula always reads back
    expected = hill_formula(computed[0], computed[1] if charge is not None else None)
    found = hill_formula(counts, charge)
    if found == expected:
        return []
    shown = written if found == written else f"{written} ({found} in Hill order)"
    return [_mismatch("formula", expected, written,
                      f"formula {shown} differs from the structure's {expected}")]


def structure_findings(ontology: Ontology, term_ids: Iterable[str], config: Config,
                       facts: Mapping[str, MolFacts],
                       other_keys: Mapping[str, tuple[str, ...]]) -> list[Finding]:
    """Unreadable structures, annotation mismatches and duplicate structures of the listed
    live structured terms. `facts` may lack some structures (they are read here);
    `other_keys` is an `inchikey_index` of the terms not listed (listed ones may be in it)."""
    out: list[Finding] = []
    keys: dict[str, list[str]] = {}
    checked: list[tuple[Term, str]] = []
    for term in _live(ontology, term_ids):
        structure = read_structure(term, config.structure)
        source = _source(structure)
        if source is None:
            continue
        molfacts = _facts_of(source, facts, config.limits)
        what = "SMILES" if source[0] == "smiles" else "InChI"
        if molfacts.error is not None:
            out.append(_finding(ontology, term, "structure-unreadable",
                                f"{what} cannot be used: {molfacts.error}",
                                source=source[0], structure=source[1][:200],
                                reason=molfacts.error))
            continue
        for field, message, expected, found in _check_fields(structure, molfacts, source[0], config):
            out.append(_finding(ontology, term, "annotation-mismatch", message,
                                field=field, expected=expected, found=found))
        if molfacts.inchikey is not None:
            keys.setdefault(molfacts.inchikey, []).append(term.id)
            checked.append((term, molfacts.inchikey))
    for term, key in checked:
        others = set(keys[key]).union(other_keys.get(key, ()))
        others.discard(term.id)
        # An id the caller's index knows but that is obsolete here is no duplicate.
        others = {o for o in others if not (o in ontology.terms and ontology.terms[o].obsolete)}
        if others:
            names = sorted(others)
            out.append(_finding(ontology, term, "duplicate-structure",
                                f"same standard InChIKey {key} as {', '.join(names)}",
                                inchikey=key, others=names))
    return out
