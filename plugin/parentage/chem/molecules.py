"""Facts about one structure (SMILES or InChI), computed by RDKit within size limits.

RDKit writes its complaints to the terminal by default; every call here runs inside
`captured_log`, so those lines become `MolFacts.warnings` (or the error) and nothing is printed.

Conventions of the computed values:
- `formula`: Hill order (E. A. Hill, J. Am. Chem. Soc. 1900, 22, 478): C first, then H, then
  the other symbols alphabetically; with no carbon, every symbol alphabetically, H included
  ("ClH", "H2O4S"). RDKit's `CalcMolFormula` puts H first in carbon-free formulas ("HCl"), so
  its result is re-ordered here. Isotopes count under their element, "*" stands for a dummy
  atom, and a net charge is RDKit's suffix: "+", "-", "+2", "-2".
- `average_mass`: RDKit's `_CalcMolWt` (what `Descriptors.MolWt` calls), from the IUPAC/CIAAW
  standard atomic weights in RDKit's periodic table (g/mol); `monoisotopic_mass`:
  `CalcExactMolWt` (`Descriptors.ExactMolWt`). The functions are called directly because
  importing `rdkit.Chem.Descriptors` also imports numpy and every descriptor (~0.25 s on the
  commit path).
- `inchi` / `inchikey`: standard InChI and InChIKey (InChI Trust library, default options).
- `heavy_atoms`: atoms other than hydrogen; `max_atoms` limits this count.
"""
from __future__ import annotations

import contextlib
import io
import re
import threading
from collections.abc import Iterable, Iterator
from functools import partial
from typing import TYPE_CHECKING, Any, NamedTuple

from parentage.config import Limits

if TYPE_CHECKING:
    from rdkit import Chem

# RDKit is imported inside the functions that compute (0.15-0.2 s): facts read back from the
# store, limits and formulas as written need none of it, so a commit whose structures are all
# known to the store never loads it.
from parentage.progress import progress
from parentage.store import Store

NAMESPACE = "molfacts"
KINDS = ("smiles", "inchi")
DEFAULT_LIMITS = Limits()


class MolFacts(NamedTuple):
    canonical_smiles: str | None = None
    inchi: str | None = None
    inchikey: str | None = None
    formula: str | None = None
    average_mass: float | None = None
    monoisotopic_mass: float | None = None
    charge: int | None = None
    heavy_atoms: int = 0
    error: str | None = None  # why the structure is unreadable, RDKit's own words included
    warnings: tuple[str, ...] = ()  # RDKit log lines seen while reading it

    def to_json(self) -> dict[str, Any]:
        data = self._asdict()
        data["warnings"] = list(self.warnings)
        return data

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> MolFacts:
        values: dict[str, Any] = {name: data.get(name) for name in cls._fields}
        values["heavy_atoms"] = int(values["heavy_atoms"] or 0)
        values["warnings"] = tuple(values["warnings"] or ())
        return cls(**values)


# -- RDKit's log ------------------------------------------------------------------------------

_LOG_LOCK = threading.RLock()
_STAMP = re.compile(r"^\[\d\d:\d\d:\d\d\] ")


@contextlib.contextmanager
def captured_log() -> Iterator[list[str]]:
    """Collect RDKit's log lines in the yielded list (filled on exit); none reach the terminal.

    RDKit is told to write through Python's `sys.stderr`, which is swapped for a buffer while
    the block runs. Routing is set on every entry (it costs well under a microsecond) because
    other code may have pointed RDKit's log elsewhere. The swap is process-wide, hence the lock.
    """
    from rdkit import rdBase

    lines: list[str] = []
    buffer = io.StringIO()
    with _LOG_LOCK:
        rdBase.LogToPythonStderr()
        try:
            with contextlib.redirect_stderr(buffer):
                yield lines
        finally:
            for raw in buffer.getvalue().splitlines():
                text = _STAMP.sub("", raw).strip()
                if text and text != "ERROR:":
                    lines.append(text)


# -- limits -----------------------------------------------------------------------------------

# Heavy-atom tokens of a SMILES: bracket atoms other than hydrogen, and the organic subset.
# Dummy atoms ("*") are not heavy atoms to RDKit, so they are not counted either; the
# character limit bounds them.
_BRACKET = re.compile(r"\[(\d*)([A-Za-z*][a-z]?)[^\]]*\]")
_ORGANIC = re.compile(r"Cl|Br|[BCNOSPFI]|[bcnops]")


def estimate_smiles_atoms(smiles: str) -> int:
    """Heavy atoms a SMILES will have, counted from its text without parsing it."""
    count = 0
    for match in _BRACKET.finditer(smiles):
        if match.group(2) not in ("H", "*"):
            count += 1
    return count + len(_ORGANIC.findall(_BRACKET.sub("", smiles)))


def _estimate_inchi_atoms(inchi: str) -> int:
    layers = inchi.split("/")
    counts = parse_formula(layers[1]) if len(layers) > 1 else None
    if counts is None:
        return 0  # the InChI library will reject it, quickly
    return sum(n for symbol, n in counts[0].items() if symbol != "H")


def _text_problem(text: str, what: str, limits: Limits) -> str | None:
    if not text.strip():
        return f"empty {what}"
    if len(text) > limits.max_structure_chars:
        return (f"{what} has {len(text)} characters, more than the limit of "
                f"{limits.max_structure_chars} (limits.max_structure_chars)")
    return None


_TOO_MANY = "structure has more heavy atoms than the limit"


def _too_many(atoms: int, limits: Limits) -> str | None:
    if atoms > limits.max_atoms:
        return f"{_TOO_MANY}: {atoms} > {limits.max_atoms} (limits.max_atoms)"
    return None


def _limit_problem(text: str, kind: str, limits: Limits) -> str | None:
    """What the size limits say before any parsing (None: go ahead)."""
    if kind == "smiles":
        return _text_problem(text, "SMILES", limits) or _too_many(estimate_smiles_atoms(text), limits)
    return _text_problem(text, "InChI", limits) or _too_many(_estimate_inchi_atoms(text), limits)


# -- parsing ----------------------------------------------------------------------------------

Parsed = tuple["Chem.Mol | None", str | None, tuple[str, ...]]  # (molecule, error, log lines)

def _sanitised(mol: Chem.Mol, what: str) -> str | None:
    from rdkit import Chem

    try:
        Chem.SanitizeMol(mol)
    except (Chem.rdchem.MolSanitizeException, ValueError, RuntimeError) as exc:
        return f"{what} cannot be sanitised: {exc}"
    return None


def parse_smiles(smiles: str, limits: Limits = DEFAULT_LIMITS) -> Parsed:
    """(sanitised molecule or None, error or None, RDKit log lines) for one SMILES."""
    problem = _limit_problem(smiles, "smiles", limits)
    if problem:
        return None, problem, ()
    from rdkit import Chem

    error: str | None = None
    with captured_log() as log:
        mol = Chem.MolFromSmiles(smiles, sanitize=False)
        if mol is not None:
            error = _sanitised(mol, "SMILES")
    if mol is None:
        # RDKit's first line names the problem; the rest draws a caret under the text.
        reason = next((line for line in log if line.startswith("SMILES Parse Error")),
                      log[0] if log else "syntax error")
        error = f"SMILES cannot be parsed: {reason.removeprefix('SMILES Parse Error: ')}"
    if error is None and mol is not None:
        error = _too_many(mol.GetNumHeavyAtoms(), limits)
    return (None if error else mol), error, tuple(log)


def parse_inchi(inchi: str, limits: Limits = DEFAULT_LIMITS) -> Parsed:
    """(sanitised molecule or None, error or None, log lines) for one InChI."""
    problem = _limit_problem(inchi, "inchi", limits)
    if problem:
        return None, problem, ()
    if not inchi.startswith("InChI="):
        return None, "InChI cannot be read: it must start with 'InChI='", ()
    from rdkit import Chem
    from rdkit.Chem import rdinchi

    error: str | None = None
    with captured_log() as log:
        # Sanitised by us, not inside the call, so a valence problem is a message, not a raise.
        mol, code, message, inchi_log = rdinchi.InchiToMol(inchi, False, False)
        if mol is not None:
            error = _sanitised(mol, "InChI")
            if error is None:
                mol = Chem.RemoveHs(mol, sanitize=False)
    notes = tuple(log) + ((message,) if message else ())
    if mol is None:
        last = [line.strip() for line in inchi_log.splitlines() if line.strip()]
        reason = message or (last[-1] if last else f"InChI library return code {code}")
        error = f"InChI cannot be read: {reason}"
    if error is None and mol is not None:
        error = _too_many(mol.GetNumHeavyAtoms(), limits)
    return (None if error else mol), error, notes


def _facts(mol: Chem.Mol, warnings: tuple[str, ...]) -> MolFacts:
    from rdkit import Chem
    from rdkit.Chem import rdinchi, rdMolDescriptors

    with captured_log() as log:
        smiles = Chem.MolToSmiles(mol)
        inchi, code, message, _inchi_log, _aux = rdinchi.MolToInchi(mol, "")
        key = rdinchi.InchiToInchiKey(inchi) if inchi else None
        formula = _hill_order(rdMolDescriptors.CalcMolFormula(mol))
        average = rdMolDescriptors._CalcMolWt(mol)
        mono = rdMolDescriptors.CalcExactMolWt(mol)
        charge = Chem.GetFormalCharge(mol)
    notes = list(warnings) + log
    if message and not any(message in note for note in notes):
        notes.append(message)
    if not inchi:
        notes.append(f"no InChI: {message or f'InChI library return code {code}'}")
    return MolFacts(smiles, inchi or None, key or None, formula, round(average, 5), round(mono, 6),
                    charge, mol.GetNumHeavyAtoms(), None, tuple(notes))


def analyse_smiles(smiles: str, limits: Limits = DEFAULT_LIMITS) -> MolFacts:
    mol, error, warnings = parse_smiles(smiles, limits)
    if mol is None:
        return MolFacts(error=error, warnings=warnings)
    return _facts(mol, warnings)


def analyse_inchi(inchi: str, limits: Limits = DEFAULT_LIMITS) -> MolFacts:
    mol, error, warnings = parse_inchi(inchi, limits)
    if mol is None:
        return MolFacts(error=error, warnings=warnings)
    return _facts(mol, warnings)


def analyse(structure: str, kind: str, limits: Limits = DEFAULT_LIMITS) -> MolFacts:
    if kind == "smiles":
        return analyse_smiles(structure, limits)
    if kind == "inchi":
        return analyse_inchi(structure, limits)
    raise ValueError(f"unknown structure kind {kind!r} (known: {', '.join(KINDS)})")


def analyse_many(structures: Iterable[str], limits: Limits = DEFAULT_LIMITS, store: Store | None = None,
                 kind: str = "smiles") -> dict[str, MolFacts]:
    """Facts for each distinct structure, read from and written to the store when given.

    Results that only the size limits decided are never stored, and cached results are
    checked against the limits again, so changing the limits takes effect at once.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown structure kind {kind!r} (known: {', '.join(KINDS)})")
    wanted = list(dict.fromkeys(structures))
    out: dict[str, MolFacts] = {}
    to_look_up: list[str] = []
    for text in wanted:
        problem = _limit_problem(text, kind, limits)
        if problem:
            out[text] = MolFacts(error=problem)
        else:
            to_look_up.append(text)
    cached = store.get_many(NAMESPACE, (f"{kind}:{t}" for t in to_look_up)) if store else {}
    todo = []
    for text in to_look_up:
        row = cached.get(f"{kind}:{text}")
        if row is None:
            todo.append(text)
            continue
        facts = MolFacts.from_json(row)
        problem = None if facts.error else _too_many(facts.heavy_atoms, limits)
        out[text] = facts._replace(error=problem) if problem else facts
    fresh: dict[str, Any] = {}
    if todo:
        from rdkit import Chem  # noqa: F401 - loaded here once, so every worker inherits it

        from parentage.chem.bounded import bounded_map

        read = partial(_facts_row, kind=kind, limits=limits)
        for index, row, why in progress(bounded_map(read, todo, limits.parse_seconds),
                                        total=len(todo), desc="structures"):
            text = todo[index]
            if row is None:
                # Not stored: another machine, or a larger limit, may read it in time.
                hint = " (limits.parse_seconds)" if why and why.startswith("reading it took") else ""
                out[text] = MolFacts(error=f"structure cannot be read: {why}{hint}")
                continue
            facts = out[text] = MolFacts.from_json(row)
            if not (facts.error and facts.error.startswith(_TOO_MANY)):
                fresh[f"{kind}:{text}"] = row
    if store is not None and fresh:
        store.put_many(NAMESPACE, fresh)
    return out


def _facts_row(text: str, kind: str, limits: Limits) -> dict[str, Any]:
    return analyse(text, kind, limits).to_json()


# -- formulas as written ----------------------------------------------------------------------

# The 118 element symbols of the IUPAC periodic table (2016 names through oganesson), in
# atomic-number order; tests/test_chem.py checks them against RDKit's periodic table. Kept
# here so reading a written formula never loads RDKit.
ELEMENT_SYMBOLS = (  # noqa: SIM905 (a list literal of 118 strings reads worse)
    "H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As "
    "Se Br Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu Gd "
    "Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U Np Pu Am "
    "Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl Mc Lv Ts Og").split()
_ELEMENTS = frozenset(ELEMENT_SYMBOLS)

_ALIASES = {"D": "H", "T": "H", "R": "*"}  # isotopes count as their element; R: any group
_TOKEN = re.compile(r"([A-Z][a-z]?|\*)(\d*)|(\()|(\))(\d*)")
# (pattern, whether the sign comes first); tried in order, the ambiguous form last.
_CHARGE_FORMS = (
    (re.compile(r"\s*\^?\((\d*)([+-])\)$"), False),  # (2-)  ^(1+)
    (re.compile(r"\s+(\d*)([+-])$"), False),  # " 2-": the space keeps it apart from a count
    (re.compile(r"\s*\^?\(?([+-])(\d*)\)?$"), True),  # +  -2  (+2)  ^-  (RDKit's style)
)


def _split_charge(text: str) -> tuple[str, int | None]:
    for form, sign_first in _CHARGE_FORMS:
        match = form.search(text)
        if match:
            first, second = match.groups()
            sign, digits = (first, second) if sign_first else (second, first)
            size = int(digits) if digits else 1
            return text[:match.start()], size if sign == "+" else -size
    return text, None


def _parse_part(text: str) -> dict[str, int] | None:
    stack: list[dict[str, int]] = [{}]
    pos = 0
    while pos < len(text):
        match = _TOKEN.match(text, pos)
        if match is None:
            return None
        pos = match.end()
        symbol, count, opening, _closing, multiplier = match.groups()
        if symbol:
            symbol = _ALIASES.get(symbol, symbol)
            if symbol not in _ELEMENTS and symbol != "*":
                return None
            stack[-1][symbol] = stack[-1].get(symbol, 0) + (int(count) if count else 1)
        elif opening:
            stack.append({})
        else:
            if len(stack) == 1:
                return None
            inner = stack.pop()
            times = int(multiplier) if multiplier else 1
            for sym, n in inner.items():
                stack[-1][sym] = stack[-1].get(sym, 0) + n * times
    return stack[0] if len(stack) == 1 and stack[0] else None


def parse_formula(text: str) -> tuple[dict[str, int], int | None] | None:
    """(element counts, charge or None when not written) of a formula as curators write it.

    Accepts any element order, groups in parentheses, dotted parts with a leading count
    ("CuSO4.5H2O", "2Na.O4S"), D/T for hydrogen isotopes, R or * for an unspecified group,
    and a trailing charge ("+", "-2", "(2-)", " 2-"). None when it cannot be read.
    """
    body, charge = _split_charge(text.strip())
    total: dict[str, int] = {}
    for part in re.split(r"[.·•]", body.replace(" ", "")):
        match = re.match(r"(\d*)(.*)$", part)
        assert match is not None  # the pattern matches any string
        times = int(match.group(1)) if match.group(1) else 1
        counts = _parse_part(match.group(2))
        if counts is None:
            return None
        for symbol, n in counts.items():
            total[symbol] = total.get(symbol, 0) + n * times
    return total, charge


def _hill_order(rdkit_formula: str) -> str:
    parsed = parse_formula(rdkit_formula)
    return hill_formula(*parsed) if parsed is not None else rdkit_formula


def hill_formula(counts: dict[str, int], charge: int | None = None) -> str:
    """Hill order in RDKit's `CalcMolFormula` style (see the module docstring)."""
    def term(symbol: str) -> str:
        n = counts[symbol]
        return symbol if n == 1 else f"{symbol}{n}"

    present = [s for s in counts if counts[s] > 0]
    if "C" in present:
        head = ["C"] + (["H"] if "H" in present else [])
        order = head + sorted(s for s in present if s not in head)
    else:
        order = sorted(present)
    text = "".join(term(s) for s in order)
    if charge:
        sign = "+" if charge > 0 else "-"
        text += sign if abs(charge) == 1 else f"{sign}{abs(charge)}"
    return text
