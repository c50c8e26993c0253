"""SMARTS for the rule tier: compile once, screen cheaply, match within bounds.

Screens are derived from each pattern and are sound: they only reject a structure that the
pattern cannot match. A pattern atom (or bond) whose query fixes its element and aromaticity
(or its bond type) needs that many such atoms (bonds) in the structure; a recursive
`$(...)` that every match must satisfy adds the needs of its own pattern. Anything the screen
does not understand counts as "could be anything", which keeps it sound.

Every search is bounded: RDKit's `maxMatches` per search, and `limits.rule_seconds` per
structure. RDKit cannot be interrupted from Python, so the matching runs in a forked worker
process that is killed when one structure takes too long; that structure is reported as
timed out and the worker starts again after it.

What a search costs is mostly RDKit's fixed cost per call (about as much for a one-atom
query that matches nothing as for a recursive one), so the work saved is calls not made:
screens in bulk, one quick search of a skeleton that several patterns share, one search
that stops at the first match where no atoms are asked for, and one RDKit call to read a
short SMILES in a worker.

Rule proposal helpers live here too (they need RDKit): atom environments written as SMARTS
and a bounded maximum common substructure.
"""
from __future__ import annotations

import functools
import gc
import heapq
import json
import multiprocessing
import os
import re
import sys
import time
from collections.abc import Callable, Iterable, Mapping, Sequence
from multiprocessing.connection import wait
from typing import Any, NamedTuple

import numpy as np
from rdkit import Chem, rdBase
from rdkit.Chem import rdFMCS, rdMolDescriptors

from parentage._collection import collector_paused
from parentage.chem.molecules import captured_log, parse_smiles
from parentage.config import Limits
from parentage.errors import ParentageError

Atoms = tuple[int, ...]
DEFAULT_LIMITS = Limits()

# -- what a query atom or bond can be ------------------------------------------------------

# Atom-type keys: 2 * atomic number + aromatic flag; bond keys: RDKit's BondType numbers.
_ATOM_KEYS = frozenset(range(2 * 119))
_BOND_KEYS = frozenset(int(k) for k in Chem.BondType.values)
_AROMATIC = frozenset(k for k in _ATOM_KEYS if k % 2)
_ALIPHATIC = _ATOM_KEYS - _AROMATIC
_BOND_PAIRS = {"SingleOrAromaticBond": frozenset({1, 12}), "SingleOrDoubleBond": frozenset({1, 2}),
               "DoubleOrAromaticBond": frozenset({2, 12})}
_MAX_RECURSION = 3  # nesting depth of $() whose needs are followed
_CHUNK = 64  # structures read and screened together
_SKELETON_SHARE = 2  # patterns that must share a skeleton before it is searched first
_PARALLEL_FROM = 256  # structures from which the matching is split over several workers


class _Node(NamedTuple):
    label: str
    children: tuple[_Node, ...]


def _describe_tree(text: str) -> _Node:
    """RDKit's `DescribeQuery` text (two spaces of indent per level) as a tree."""
    rows = [(len(line) - len(line.lstrip(" ")), line.strip()) for line in text.splitlines() if line.strip()]

    def build(pos: int) -> tuple[_Node, int]:
        indent, label = rows[pos]
        kids: list[_Node] = []
        pos += 1
        while pos < len(rows) and rows[pos][0] > indent:
            kid, pos = build(pos)
            kids.append(kid)
        return _Node(label, tuple(kids)), pos

    return build(0)[0] if rows else _Node("AtomNull", ())


def _negated(label: str) -> bool:
    return " != val" in label or " not in " in label


def _atom_set(node: _Node) -> tuple[frozenset[int], bool]:
    """(atom-type keys the query can match, whether that set is exact)."""
    name, *args = node.label.split()
    if name in ("AtomAnd", "AtomOr") and node.children and not _negated(node.label):
        parts = [_atom_set(c) for c in node.children]
        sets = [p[0] for p in parts]
        merged = frozenset.intersection(*sets) if name == "AtomAnd" else frozenset.union(*sets)
        return merged, all(p[1] for p in parts)
    if name == "AtomNull":
        return _ATOM_KEYS, True
    exact: frozenset[int] | None = None
    if name == "AtomType" and args and args[0].lstrip("-").isdigit():
        value = int(args[0])
        exact = frozenset({2 * (value - 1000) + 1}) if value >= 1000 else frozenset({2 * value})
    elif name == "AtomAtomicNum" and args and args[0].isdigit():
        z = int(args[0])
        exact = frozenset({2 * z, 2 * z + 1})
    elif name == "AtomIsAromatic" and args[:1] == ["1"]:
        exact = _AROMATIC
    elif name == "AtomIsAliphatic" and args[:1] == ["1"]:
        exact = _ALIPHATIC
    if exact is None:
        return _ATOM_KEYS, False  # H count, degree, charge, ring, recursion...: not a type
    return (_ATOM_KEYS - exact, True) if _negated(node.label) else (exact & _ATOM_KEYS, True)


def _bond_set(node: _Node) -> tuple[frozenset[int], bool]:
    name, *args = node.label.split()
    if name in ("BondAnd", "BondOr") and node.children and not _negated(node.label):
        parts = [_bond_set(c) for c in node.children]
        sets = [p[0] for p in parts]
        merged = frozenset.intersection(*sets) if name == "BondAnd" else frozenset.union(*sets)
        return merged, all(p[1] for p in parts)
    if name == "BondNull":
        return _BOND_KEYS, True
    exact: frozenset[int] | None = None
    if name == "BondOrder" and args and args[0].isdigit():
        exact = frozenset({int(args[0])})
    elif name in _BOND_PAIRS and args[:1] == ["1"]:
        exact = _BOND_PAIRS[name]
    if exact is None:
        return _BOND_KEYS, False
    return (_BOND_KEYS - exact, True) if _negated(node.label) else (exact, True)


def _atom_groups(atom_smarts: str) -> list[tuple[bool, list[str]]] | None:
    """A bracket atom's SMARTS split at the lowest-precedence `;` into groups, each with
    whether it is a plain conjunction (no `,`) and its `&`/`,`-separated parts."""
    if not (atom_smarts.startswith("[") and atom_smarts.endswith("]")):
        return None
    inner = atom_smarts[1:-1]
    units: list[str] = []
    ops: list[str] = []
    depth, start = 0, 0
    for pos, char in enumerate(inner):
        if char in "([":
            depth += 1
        elif char in ")]":
            depth -= 1
        elif depth == 0 and char in ";,&":
            units.append(inner[start:pos])
            ops.append(char)
            start = pos + 1
    units.append(inner[start:])
    if depth != 0:
        return None
    groups: list[tuple[bool, list[str]]] = [(True, [])]
    for index, unit in enumerate(units):
        before = ops[index - 1] if index else ""
        if before == ";":
            groups.append((True, []))
        plain, parts = groups[-1]
        groups[-1] = (plain and before != ",", parts + [unit])
    return groups


def _is_recursion(unit: str) -> bool:
    body = unit.removeprefix("!")
    return body.startswith("$(") and body.endswith(")") and _balanced(body[2:-1])


def _required_recursions(atom_smarts: str) -> list[str]:
    """The `$(...)` parts of one atom's SMARTS that every match must satisfy.

    Only a part that stands alone in a plain conjunction counts (not under `!`, not one of
    several `,` alternatives); anything less plain is left out, which keeps the screen sound.
    """
    out = []
    for plain, parts in _atom_groups(atom_smarts) or ():
        if plain:
            out += [u[2:-1] for u in parts if u.startswith("$(") and _is_recursion(u)]
    return out


def _without_recursions(atom_smarts: str) -> str:
    """The atom's SMARTS with each `$(...)` / `!$(...)` conjunct dropped: a looser atom."""
    groups = _atom_groups(atom_smarts)
    if groups is None:
        return atom_smarts
    kept: list[str | None] = []
    for plain, parts in groups:
        if plain:
            parts = [u for u in parts if not _is_recursion(u)]
            if parts:
                kept.append("&".join(parts))
        else:
            kept.append(None)
    if None in kept:
        return atom_smarts  # alternatives: rebuilding them is not worth the risk
    return "[" + ";".join(k for k in kept if k) + "]" if any(kept) else "*"


def skeleton_smarts(query: Chem.Mol) -> str | None:
    """The pattern with recursive conjuncts dropped from its atoms, or None when that
    changes nothing. It matches wherever the pattern does, usually far faster."""
    rw = Chem.RWMol(query)
    changed = False
    for atom in query.GetAtoms():
        if not atom.HasQuery():
            continue
        text = atom.GetSmarts()
        looser = _without_recursions(text)
        if looser != text:
            replacement = Chem.AtomFromSmarts(looser)
            if replacement is None:
                return None
            rw.ReplaceAtom(atom.GetIdx(), replacement)
            changed = True
    return Chem.MolToSmarts(rw) if changed else None


def _balanced(text: str) -> bool:
    depth = 0
    for char in text:
        depth += char in "(["
        depth -= char in ")]"
        if depth < 0:
            return False
    return depth == 0


Need = tuple[frozenset[int], int]  # (keys, how many atoms or bonds of those keys)


class Screen(NamedTuple):
    atoms: int  # pattern atoms: a structure needs at least as many
    atom_needs: tuple[Need, ...]
    bond_needs: tuple[Need, ...]


def _needs(sets: list[frozenset[int]], universe: frozenset[int]) -> list[Need]:
    out = []
    for chosen in set(sets):
        if chosen == universe:
            continue
        out.append((chosen, sum(1 for s in sets if s <= chosen)))
    return out


def _screen(query: Chem.Mol, depth: int = 0) -> Screen:
    atom_sets: list[frozenset[int]] = []
    extra_atoms: list[Need] = []
    extra_bonds: list[Need] = []
    for atom in query.GetAtoms():
        if not atom.HasQuery():
            atom_sets.append(frozenset({2 * atom.GetAtomicNum() + int(atom.GetIsAromatic())}))
            continue
        atom_sets.append(_atom_set(_describe_tree(atom.DescribeQuery()))[0])
        if depth < _MAX_RECURSION:
            for text in _required_recursions(atom.GetSmarts()):
                sub = Chem.MolFromSmarts(text)
                if sub is not None:
                    inner = _screen(sub, depth + 1)
                    extra_atoms += inner.atom_needs
                    extra_bonds += inner.bond_needs
    bond_sets = [_bond_set(_describe_tree(b.DescribeQuery()))[0] if b.HasQuery()
                 else frozenset({int(b.GetBondType())}) for b in query.GetBonds()]
    atom_needs = _needs(atom_sets, _ATOM_KEYS) + extra_atoms
    bond_needs = _needs(bond_sets, _BOND_KEYS) + extra_bonds
    # Most selective first: an empty or tiny key set usually rejects at once.
    atom_needs.sort(key=lambda n: len(n[0]))
    bond_needs.sort(key=lambda n: len(n[0]))
    return Screen(query.GetNumAtoms(), tuple(atom_needs), tuple(bond_needs))


def _useful_skeleton(query: Chem.Mol) -> str | None:
    """`skeleton_smarts`, unless the screens already decide it (one atom of a plain type)."""
    text = skeleton_smarts(query)
    if text is None:
        return None
    loose = Chem.MolFromSmarts(text)
    if loose is None:
        return None
    if loose.GetNumAtoms() == 1:
        atom = loose.GetAtomWithIdx(0)
        if not atom.HasQuery() or _atom_set(_describe_tree(atom.DescribeQuery()))[1]:
            return None
    return text


# -- what one pattern implies of another -----------------------------------------------------
#
# When every match of pattern P is also a match of Q (P implies Q), a structure that Q does not
# match cannot match P either, so P is not searched. The proof here is deliberately narrow and
# reads the queries as RDKit writes them back (explicit `&`, `;` and `,`): Q's atoms and bonds
# are P's first atoms and bonds in the same order, and each of Q's atoms (bonds) is implied by
# P's atom (bond) of the same index; a match of P, read through the same atom indices, is then
# a match of Q. An atom query implies another when each conjunct of the other is one of its
# own, or fixes only atom types that it already restricts the atom to, or is a recursion that
# one of its own recursions implies (the same proof, rooted at the same atom), or is a negated
# recursion whose root can never be this atom. Anything else is not proved, which only means a
# search that could have been skipped.

_MAX_IMPLIED = 512  # patterns beyond which implications are not looked for (pairs grow squared)


def _split_top(text: str, sep: str) -> list[str] | None:
    """`text` split at each `sep` outside brackets and parentheses; None if they do not balance."""
    parts: list[str] = []
    depth, start = 0, 0
    for pos, char in enumerate(text):
        if char in "([":
            depth += 1
        elif char in ")]":
            depth -= 1
        elif depth == 0 and char == sep:
            parts.append(text[start:pos])
            start = pos + 1
    parts.append(text[start:])
    return parts if depth == 0 else None


def _conjuncts(smarts: str) -> tuple[str, ...] | None:
    """An atom's (or bond's) SMARTS as the parts that must all hold: the `;` groups, each
    split further at `&` unless it holds `,` alternatives (then it stays whole)."""
    inner = smarts[1:-1] if smarts.startswith("[") and smarts.endswith("]") else smarts
    groups = _split_top(inner, ";")
    if groups is None:
        return None
    out: list[str] = []
    for group in groups:
        alternatives = _split_top(group, ",")
        if alternatives is None:
            return None
        parts = _split_top(group, "&") if len(alternatives) == 1 else [group]
        if parts is None:
            return None
        out += parts
    return tuple(out)


@functools.lru_cache(maxsize=4096)
def _conjunct_atom_types(conjunct: str) -> tuple[frozenset[int], bool]:
    """(atom-type keys, exact) of one conjunct standing alone."""
    with captured_log():
        query = Chem.MolFromSmarts(f"[*;{conjunct}]")
    if query is None or query.GetNumAtoms() != 1:
        return _ATOM_KEYS, False
    return _atom_set(_describe_tree(query.GetAtomWithIdx(0).DescribeQuery()))


@functools.lru_cache(maxsize=1024)
def _conjunct_bond_types(conjunct: str) -> tuple[frozenset[int], bool]:
    """(bond-type keys, exact) of one bond conjunct standing alone ("" is single or aromatic)."""
    with captured_log():
        query = Chem.MolFromSmarts(f"*{conjunct}*")
    if query is None or query.GetNumBonds() != 1:
        return _BOND_KEYS, False
    return _bond_set(_describe_tree(query.GetBondWithIdx(0).DescribeQuery()))


class _Part(NamedTuple):
    smarts: str  # as RDKit writes it back
    conjuncts: tuple[str, ...] | None
    keys: frozenset[int]  # atom (bond) types it can match: a superset


class _Shape(NamedTuple):
    atoms: tuple[_Part, ...]
    bonds: dict[tuple[int, int], _Part]  # (lower, higher atom index) -> bond


def _positive_recursion(conjunct: str) -> str | None:
    return conjunct[2:-1] if conjunct.startswith("$(") and _is_recursion(conjunct) else None


def _negated_recursion(conjunct: str) -> str | None:
    return conjunct[3:-1] if conjunct.startswith("!$(") and _is_recursion(conjunct) else None


@functools.lru_cache(maxsize=4096)
def _shape(smarts: str, depth: int = 0) -> _Shape | None:
    """The pattern's atoms and bonds as `_Part`s; None for what the proof leaves alone (a
    pattern that does not compile, or with `.`, whose parts may share a component)."""
    if "." in smarts:
        return None
    with captured_log():
        query = Chem.MolFromSmarts(smarts)
    if query is None or query.GetNumAtoms() == 0:
        return None
    atoms = []
    for atom in query.GetAtoms():
        text = atom.GetSmarts()
        conjuncts = _conjuncts(text)
        keys = (_atom_set(_describe_tree(atom.DescribeQuery()))[0] if atom.HasQuery()
                else frozenset({2 * atom.GetAtomicNum() + int(atom.GetIsAromatic())}))
        # A recursion every match must satisfy is rooted at this atom: its root's types bound it.
        for conjunct in (conjuncts or ()) if depth < _MAX_RECURSION else ():
            body = _positive_recursion(conjunct)
            inner = _shape(body, depth + 1) if body is not None else None
            if inner is not None:
                keys &= inner.atoms[0].keys
        atoms.append(_Part(text, conjuncts, keys))
    bonds = {}
    for bond in query.GetBonds():
        text = bond.GetSmarts()  # type: ignore[call-arg]  # RDKit's stubs want an argument
        keys = (_bond_set(_describe_tree(bond.DescribeQuery()))[0] if bond.HasQuery()
                else frozenset({int(bond.GetBondType())}))
        ends = sorted((bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()))
        bonds[(ends[0], ends[1])] = _Part(text, _conjuncts(text), keys)
    return _Shape(tuple(atoms), bonds)


def _atom_implies(mine: _Part, other: _Part, depth: int) -> bool:
    if mine.smarts == other.smarts:
        return True
    if mine.conjuncts is None or other.conjuncts is None:
        return False
    for conjunct in other.conjuncts:
        if conjunct in mine.conjuncts:
            continue
        keys, exact = _conjunct_atom_types(conjunct)
        if exact and mine.keys <= keys:
            continue  # it only fixes the type, and this atom can only be of those types
        if depth < _MAX_RECURSION:
            body = _positive_recursion(conjunct)
            if body is not None and any(
                    _implies(own, body, depth + 1) for own in map(_positive_recursion, mine.conjuncts)
                    if own is not None):
                continue
            body = _negated_recursion(conjunct)
            if body is not None:
                root = _shape(body, depth + 1)
                if root is not None and not mine.keys & root.atoms[0].keys:
                    continue  # the recursion's root can never be this atom
                if any(_implies(body, own, depth + 1) for own in map(_negated_recursion, mine.conjuncts)
                       if own is not None):
                    continue  # not(own) implies not(body) when body implies own
        return False
    return True


def _bond_implies(mine: _Part, other: _Part) -> bool:
    if mine.smarts == other.smarts:
        return True
    if mine.conjuncts is None or other.conjuncts is None:
        return False
    for conjunct in other.conjuncts:
        if conjunct in mine.conjuncts:
            continue
        keys, exact = _conjunct_bond_types(conjunct)
        if not (exact and mine.keys <= keys):
            return False
    return True


@functools.lru_cache(maxsize=65536)
def _implies(smarts: str, other: str, depth: int = 0) -> bool:
    """True only when every match of `smarts` is a match of `other` (see above)."""
    mine, theirs = _shape(smarts, depth), _shape(other, depth)
    if mine is None or theirs is None or len(theirs.atoms) > len(mine.atoms):
        return False
    if not all(_atom_implies(a, b, depth) for a, b in zip(mine.atoms, theirs.atoms)):
        return False
    return all(ends in mine.bonds and _bond_implies(mine.bonds[ends], bond)
               for ends, bond in theirs.bonds.items())


def implies(pattern: Pattern, other: Pattern) -> bool:
    """True only when every structure `pattern` matches is matched by `other` too."""
    return _implies(pattern.text, other.text)


def search_order(patterns: Sequence[Pattern]) -> tuple[list[int], list[tuple[int, ...]]]:
    """An order to search the patterns in, and for each pattern the ones searched before it
    that it implies: when one of those does not match, neither does the pattern.

    Patterns that others imply come first (ties in index order)."""
    order, before = _search_order(tuple(p.text for p in patterns))
    return list(order), list(before)


# A review matches the same rules at its base and at its head: the proofs are made once.
@functools.lru_cache(maxsize=4)
def _search_order(texts: tuple[str, ...]) -> tuple[tuple[int, ...], tuple[tuple[int, ...], ...]]:
    count = len(texts)
    implied: list[list[int]] = [[] for _ in range(count)]
    if 1 < count <= _MAX_IMPLIED:
        shapes = [_shape(t) for t in texts]
        for i, mine in enumerate(shapes):
            if mine is None:
                continue
            # A cheap first look (skipping a pair only forgoes a skip): the proofs found in
            # practice have the other pattern no longer and its first atom of types that
            # include this one's.
            implied[i] = [j for j, theirs in enumerate(shapes) if i != j and theirs is not None
                          and len(theirs.atoms) <= len(mine.atoms)
                          and mine.atoms[0].keys <= theirs.atoms[0].keys
                          and _implies(texts[i], texts[j])]
    # Kahn's algorithm over "j before i when i implies j"; of two equivalent patterns the
    # later one waits for the earlier.
    waits = [[j for j in implied[i] if not (i in implied[j] and i < j)] for i in range(count)]
    waiting_on = [len(w) for w in waits]
    freed: list[list[int]] = [[] for _ in range(count)]
    for i, w in enumerate(waits):
        for j in w:
            freed[j].append(i)
    ready = [i for i in range(count) if not waiting_on[i]]
    heapq.heapify(ready)
    order: list[int] = []
    while ready:
        j = heapq.heappop(ready)
        order.append(j)
        for i in freed[j]:
            waiting_on[i] -= 1
            if not waiting_on[i]:
                heapq.heappush(ready, i)
    # A cycle of one-way proofs (each pattern then equivalent to the others) waits for nothing.
    order += [i for i in range(count) if waiting_on[i]]
    position = {p: k for k, p in enumerate(order)}
    return tuple(order), tuple(tuple(j for j in implied[i] if position[j] < position[i]) for i in range(count))


# -- patterns ---------------------------------------------------------------------------------

class Pattern:
    """One compiled SMARTS with its screen. Opaque outside this module."""

    __slots__ = ("query", "screen", "skeleton", "text")

    def __init__(self, text: str, query: Chem.Mol, screen: Screen) -> None:
        self.text = text
        self.query = query
        self.screen = screen
        self.skeleton = _useful_skeleton(query)

    def __repr__(self) -> str:
        return f"Pattern({self.text!r})"


def compile_smarts(text: str) -> Pattern:
    """Compile one SMARTS; a bad one raises ParentageError with RDKit's reason."""
    if not isinstance(text, str):
        raise ParentageError("empty SMARTS")
    return _compiled(text)


# Patterns are never changed once made: a rule file's SMARTS, checked when the file is read,
# are compiled once for the rules that use them and for both ends of a review.
@functools.lru_cache(maxsize=4096)
def _compiled(text: str) -> Pattern:
    if not text.strip():
        raise ParentageError("empty SMARTS")
    with captured_log() as log:
        query = Chem.MolFromSmarts(text)
    if query is None or query.GetNumAtoms() == 0:
        reason = next((line.removeprefix("SMARTS Parse Error: ") for line in log
                       if line.startswith("SMARTS Parse Error")), "syntax error")
        raise ParentageError(f"not a valid SMARTS {text!r}: {reason}")
    return Pattern(text, query, _screen(query))


def is_valid_smarts(text: str) -> bool:
    try:
        compile_smarts(text)
    except ParentageError:
        return False
    return True


# -- structures -------------------------------------------------------------------------------

_SYMBOLS = tuple(Chem.GetPeriodicTable().GetElementSymbol(z) for z in range(119))
ELEMENT_SYMBOLS = frozenset(_SYMBOLS[1:])


class Facts(NamedTuple):
    """What the screens and the rules' extra constraints read from one structure."""

    atoms: int
    atom_counts: dict[int, int]  # 2 * atomic number + aromatic -> atoms (an upper bound)
    bond_counts: dict[int, int]  # bond type -> bonds (an upper bound); others: at most `bonds`
    charge: int
    elements: frozenset[str]
    bonds: int  # bonds in all


_FORMULA_PART = re.compile(r"([A-Z][a-z]?|\*)(\d*)")
_FORMULA_CHARGE = re.compile(r"[+-]\d*$")  # RDKit writes a net charge last: "+", "-2"
_Z_OF = {**{s: z for z, s in enumerate(_SYMBOLS) if z}, "*": 0}
_DROP_LOWER = str.maketrans("", "", "abcdefghijklmnopqrstuvwxyz")
_NUMBERED_ATOM = re.compile(r"\[[^\]]*#")  # "[#6]": an atom given by its atomic number
_MAX_NEED_ELEMENTS = 16  # a need spread over more elements than this screens little; dropped
_BOND_QUERIES = {2: Chem.MolFromSmarts("*=*"), 3: Chem.MolFromSmarts("*#*")}
_ANY_AROMATIC = Chem.MolFromSmarts("a")


def _formula_counts(mol: Chem.Mol) -> dict[int, int] | None:
    """Atomic number -> atoms from RDKit's formula (hydrogen: the total, implicit ones too)."""
    counts: dict[int, int] = {}
    formula = rdMolDescriptors.CalcMolFormula(mol)
    for symbol, digits in _FORMULA_PART.findall(_FORMULA_CHARGE.sub("", formula)):
        z = _Z_OF.get(symbol)
        if z is None:
            return None
        counts[z] = counts.get(z, 0) + (int(digits) if digits else 1)
    return counts


def _text_bonds(smiles: str) -> dict[int, int]:
    """Bond type -> at most this many bonds, read from a SMILES text.

    A double bond is written '=' or comes from kekulising atoms written aromatic (lower
    case), so '=' plus the lower-case letters bounds the double bonds; a triple bond is
    always written '#' (which may also start an atomic number in brackets: more, not fewer).
    """
    text = smiles.split()[0] if smiles.strip() else ""
    lower = len(text) - len(text.translate(_DROP_LOWER))
    return {2: text.count("=") + lower, 3: text.count("#")}


def _text_atoms(text: str, zs: Iterable[int]) -> dict[int, int]:
    """Atomic number -> at most this many atoms, for the elements `zs`, from a SMILES text.

    Every atom is written with its element's symbol, capitalised or (aromatic) in lower case,
    so counting both spellings can only count too many: "Cl" counts towards C as well, "[Sc]"
    towards S and aromatic c. The caller makes sure no atom is written by number ("[#6]").
    """
    counts = {}
    for z in zs:
        symbol = _SYMBOLS[z]
        n = text.count(symbol) + text.count(symbol.lower()) if z else text.count("*")
        if n:
            counts[z] = n
    return counts


def _maybe_aromatic(mol: Chem.Mol, text: str | None) -> bool:
    """False only when the molecule has no aromatic atom. A text with a lower-case organic
    letter is taken to have one without asking RDKit (a looser screen, never a wrong one)."""
    if text is not None and any(letter in text for letter in "bcnops"):
        return True
    return rdMolDescriptors.CalcNumAromaticRings(mol) > 0 or mol.HasSubstructMatch(_ANY_AROMATIC)


def facts_of(mol: Chem.Mol, smiles: str | None = None, bond_types: Iterable[int] = (2, 3),
             elements_of: Iterable[int] | None = None) -> Facts:
    """Screen facts of one structure; every count is at least the true count.

    Element counts come from RDKit's formula (one call, exact), or from the atoms where the
    formula has a symbol we do not know. Given `elements_of` (atomic numbers) and the SMILES
    text, only those elements are counted, from the text, and `elements` is left empty: the
    quick form for screens when no rule asks which elements are present. Aromatic and
    aliphatic atoms of an element are each bounded by the element's count, aromatic ones only
    where the molecule may have any. Bond types in `bond_types` are bounded by the SMILES
    text the molecule was read from, or counted by search; every other type is bounded by the
    number of bonds.
    """
    atoms = mol.GetNumAtoms()
    text = (smiles.split()[0] if smiles.strip() else "") if smiles else None
    if elements_of is not None and text is not None and not ("#" in text and _NUMBERED_ATOM.search(text)):
        counts: dict[int, int] = _text_atoms(text, elements_of)
        exact = False
    else:
        formula, exact = _formula_counts(mol), True
        if formula is not None and sum(n for z, n in formula.items() if z > 1) == mol.GetNumHeavyAtoms():
            counts = formula
        else:
            counts = {}
            for atom in mol.GetAtoms():
                z = atom.GetAtomicNum()
                counts[z] = counts.get(z, 0) + 1
            hydrogens = sum(a.GetTotalNumHs() for a in mol.GetAtoms())
            if hydrogens:
                counts[1] = counts.get(1, 0) + hydrogens
    aromatic = _maybe_aromatic(mol, text)
    keys: dict[int, int] = {}
    for z, n in counts.items():
        keys[2 * z] = min(n, atoms)
        if aromatic:
            keys[2 * z + 1] = min(n, atoms)
    total = mol.GetNumBonds()
    bonds: dict[int, int] = {}
    from_text = _text_bonds(text) if text is not None else None
    for kind in bond_types:
        if from_text is not None and kind in from_text:
            bonds[kind] = min(total, from_text[kind])
        elif kind in _BOND_QUERIES and total:
            bonds[kind] = len(mol.GetSubstructMatches(_BOND_QUERIES[kind], uniquify=True,
                                                      maxMatches=total))
    elements = frozenset(_SYMBOLS[z] for z, n in counts.items() if n) if exact else frozenset()
    return Facts(atoms, keys, bonds, Chem.GetFormalCharge(mol), elements, total)


# Counts and their sums are whole numbers far below 2**24, exact in float32, whose matrix
# products numpy hands to BLAS (integer products run in a plain loop, several times slower).
_COUNT = np.float32


class ScreenTable:
    """The screens of many patterns, checked together on one structure with numpy.

    Needs shared by several patterns are counted once per structure.
    """

    def __init__(self, patterns: Sequence[Pattern]) -> None:
        atom_needs: dict[Need, int] = {}
        bond_needs: dict[Need, int] = {}
        uses: list[tuple[list[int], list[int]]] = []
        for pattern in patterns:
            # Dropping a need only lets more through: the screen stays sound.
            a = [atom_needs.setdefault(n, len(atom_needs)) for n in pattern.screen.atom_needs
                 if len({k // 2 for k in n[0]}) <= _MAX_NEED_ELEMENTS]
            b = [bond_needs.setdefault(n, len(bond_needs)) for n in pattern.screen.bond_needs]
            uses.append((a, b))
        # Only the atom (bond) types some need counts get a column.
        self.atom_column = {k: c for c, k in enumerate(sorted({k for keys, _ in atom_needs for k in keys}))}
        self.atom_matrix = np.zeros((len(self.atom_column), len(atom_needs)), dtype=_COUNT)
        self.atom_least = np.array([n for _, n in atom_needs], dtype=_COUNT)
        for (keys, _), col in atom_needs.items():
            self.atom_matrix[[self.atom_column[k] for k in keys], col] = 1
        self.bond_column = {k: c for c, k in enumerate(sorted({k for keys, _ in bond_needs for k in keys}))}
        self.bond_matrix = np.zeros((len(self.bond_column), len(bond_needs)), dtype=_COUNT)
        self.bond_least = np.array([n for _, n in bond_needs], dtype=_COUNT)
        for (keys, _), col in bond_needs.items():
            self.bond_matrix[[self.bond_column[k] for k in keys], col] = 1
        # Which needs each pattern has: a (needs x patterns) 0/1 matrix.
        self.atom_uses = np.zeros((len(atom_needs), len(patterns)), dtype=_COUNT)
        self.bond_uses = np.zeros((len(bond_needs), len(patterns)), dtype=_COUNT)
        for p, (a, b) in enumerate(uses):
            self.atom_uses[a, p] = 1
            self.bond_uses[b, p] = 1
        self.sizes = np.array([p.screen.atoms for p in patterns], dtype=np.int32)
        # Shared skeletons: one quick search that, when it fails, rules out several patterns.
        texts = [p.skeleton for p in patterns]
        shared = {t for t in texts if t is not None and texts.count(t) >= _SKELETON_SHARE}
        order = sorted(shared)
        self.skeletons = [Chem.MolFromSmarts(t) for t in order]
        self.skeleton_of = [order.index(t) if t in shared else None for t in texts]
        # Elements some need counts: the only ones a quick screen must count.
        self.elements_of = tuple(sorted({k // 2 for keys, _ in atom_needs for k in keys}))
        # Bond types worth counting: those some need is made of alone.
        self.bond_types = tuple(sorted({k for keys, _ in bond_needs for k in keys
                                        if keys <= _BOND_QUERIES.keys()}))

    def passing(self, many: Sequence[Facts]) -> np.ndarray:
        """(structures x patterns) booleans: False only where the pattern cannot match."""
        atoms = _counts([f.atom_counts for f in many], self.atom_column)
        bonds = _counts([f.bond_counts for f in many], self.bond_column, [f.bonds for f in many])
        atom_short = (atoms @ self.atom_matrix < self.atom_least).astype(_COUNT)
        bond_short = (bonds @ self.bond_matrix < self.bond_least).astype(_COUNT)
        failed = atom_short @ self.atom_uses + bond_short @ self.bond_uses
        sizes = np.array([f.atoms for f in many], dtype=np.int32)
        return (failed == 0) & (self.sizes[None, :] <= sizes[:, None])


def _counts(rows: Sequence[Mapping[int, int]], column_of: Mapping[int, int],
            otherwise: Sequence[int] | None = None) -> np.ndarray:
    """A (rows x columns) matrix of the counts whose keys have a column (others are dropped);
    a column a row has no count for holds 0, or that row's value in `otherwise`."""
    where: list[int] = []
    columns: list[int] = []
    counts: list[int] = []
    for row, found in enumerate(rows):
        for key, count in found.items():
            column = column_of.get(key)
            if column is not None:
                where.append(row)
                columns.append(column)
                counts.append(count)
    out = np.zeros((len(rows), len(column_of)), dtype=_COUNT)
    if otherwise is not None:
        out[:] = np.asarray(otherwise, dtype=_COUNT)[:, None]
    out[where, columns] = counts
    return out


def passes(pattern: Pattern, mol: Chem.Mol) -> bool:
    """The screen of one pattern on one structure (False: it cannot match)."""
    return bool(ScreenTable([pattern]).passing([facts_of(mol)])[0, 0])


def _params(limits: Limits) -> Chem.SubstructMatchParameters:
    params = Chem.SubstructMatchParameters()
    params.maxMatches = max(1, limits.max_matches)  # type: ignore[assignment]
    params.uniquify = True  # type: ignore[assignment]  # RDKit's stubs mistype these
    params.numThreads = 1  # type: ignore[assignment]
    return params


def find(pattern: Pattern, mol: Chem.Mol, limits: Limits = DEFAULT_LIMITS,
         screen: bool = True) -> tuple[Atoms, ...]:
    """Every match (up to `limits.max_matches`) of one pattern, in this process, unbounded in time."""
    if screen and not passes(pattern, mol):
        return ()
    return tuple(tuple(m) for m in mol.GetSubstructMatches(pattern.query, _params(limits)))


# A hydrogen written as an atom ("[H]", "[2H]", "[H+]"; not He, Hf, Hg, Ho, Hs): RDKit's
# MolFromSmiles removes such atoms (bar a few it must keep), which changes degrees (D) and
# explicit connections (X) that patterns may ask about.
_HYDROGEN_ATOM = re.compile(r"\[\d*H(?![a-z])")


def read_structure(item: str | Chem.Mol, limits: Limits) -> tuple[Chem.Mol | None, str | None]:
    """The structure as patterns are matched against it: RDKit's MolFromSmiles molecule (the
    reference), read carefully first for the size limits and a message when it fails."""
    if isinstance(item, Chem.Mol):
        return item, None
    mol, error, _log = parse_smiles(item, limits)
    if mol is not None and _HYDROGEN_ATOM.search(item):
        with captured_log():
            plain = Chem.MolFromSmiles(item)
        if plain is not None:  # the careful parse keeps hydrogen atoms; MolFromSmiles does not
            mol = plain
    return mol, error


def _read_quickly(item: str | Chem.Mol, limits: Limits) -> tuple[Chem.Mol | None, str | None]:
    """`read_structure` with the fewest RDKit calls for the common case, in a worker whose
    RDKit log goes nowhere. A text no longer than `limits.max_atoms` characters cannot hold
    more heavy atoms than that (each takes at least one character), so no count is needed
    first; any text that fails, or may be over a limit, takes the careful path for its message.

    Without hydrogen atoms in the text, MolFromSmiles is a parse and a sanitisation (the
    careful parse's own two calls) and then a perception of stereochemistry, which only
    chirality-aware matching would read (ours is not: `_params`); it is left out.
    """
    if isinstance(item, Chem.Mol):
        return item, None
    if item.strip() and len(item) <= min(limits.max_atoms, limits.max_structure_chars):
        if _HYDROGEN_ATOM.search(item) is not None:
            mol = Chem.MolFromSmiles(item)
            if mol is not None:
                return mol, None
        else:
            mol = Chem.MolFromSmiles(item, sanitize=False)
            if mol is not None:
                try:
                    Chem.SanitizeMol(mol)
                    return mol, None
                except (ValueError, RuntimeError):  # RDKit's sanitisation errors are ValueErrors
                    pass
    return read_structure(item, limits)


# -- bounded matching of many patterns over many structures ----------------------------------

class Outcome(NamedTuple):
    """The matches of the wanted patterns on one structure, or why there are none."""

    hits: frozenset[int]  # the pattern indices that match
    checked: frozenset[int]  # the pattern indices that were looked at
    charge: int = 0
    elements: frozenset[str] = frozenset()
    error: str | None = None  # unreadable structure, time limit, or a matching failure
    matches: Mapping[int, Sequence[Sequence[int]]] = {}  # atoms of each hit, when evidence was asked
    evidence: bool = False  # whether `matches` holds the atoms of every hit


def _failed(error: str, evidence: bool = False) -> Outcome:
    return Outcome(frozenset(), frozenset(), error=error, evidence=evidence)


def _prepare(item: str | Chem.Mol, limits: Limits, table: ScreenTable, quick: bool,
             elements: bool) -> tuple[Chem.Mol | None, Facts | None, str | None]:
    try:
        mol, error = _read_quickly(item, limits) if quick else read_structure(item, limits)
        if mol is None:
            return None, None, error or "structure unreadable"
        return mol, facts_of(mol, item if isinstance(item, str) else None, table.bond_types,
                             None if elements else table.elements_of), None
    except Exception as exc:  # noqa: BLE001 - one bad structure must not stop the rest
        return None, None, f"structure unreadable: {type(exc).__name__}: {exc}"


class _Search:
    """What every structure's search shares: queries, screens, search order, limits, what to
    keep. Made once by `match_many`, before the workers are forked (they inherit it)."""

    def __init__(self, patterns: Sequence[Pattern], limits: Limits, evidence: bool) -> None:
        self.queries = [p.query for p in patterns]
        self.table = ScreenTable(patterns)
        order, self.implied = search_order(patterns)
        self.order = np.array(order, dtype=np.intp)
        self.evidence = evidence
        self.all_params = _params(limits)
        self.one_params = _params(Limits(max_matches=1))
        self._wanted: dict[int, tuple[Any, np.ndarray]] = {}  # id of a wanted set -> (it, mask)

    def mask(self, wanted: Iterable[int]) -> np.ndarray:
        """The wanted patterns as a row of booleans; structures mostly share one object."""
        known = self._wanted.get(id(wanted))
        if known is None or known[0] is not wanted:
            row = np.zeros(len(self.queries), dtype=bool)
            row[sorted(set(wanted))] = True
            known = self._wanted[id(wanted)] = (wanted, row)
        return known[1]

    def row(self, index: int, mol: Chem.Mol, facts: Facts, candidates: list[int],
            possible: list[bool]) -> list[Any]:
        """The structure's result as plain values (hits, atoms or None, charge, elements).

        `candidates`: the wanted patterns its screens let through, in search order;
        `possible[p]`: False once pattern p is known not to match (by its screen, or searched),
        which rules out every pattern that implies p.
        """
        hits: list[int] = []
        atoms: list[Any] = []
        skeletons: dict[int, bool] = {}
        table, implied, queries = self.table, self.implied, self.queries
        try:
            for p in candidates:
                found: Any = all(map(possible.__getitem__, implied[p]))
                s = table.skeleton_of[p]
                if found and s is not None:
                    found = skeletons.get(s)
                    if found is None:
                        found = skeletons[s] = mol.HasSubstructMatch(table.skeletons[s], self.one_params)
                if found:
                    if self.evidence:
                        found = mol.GetSubstructMatches(queries[p], self.all_params)
                        if found:
                            atoms.append(found)  # tuples travel as JSON lists
                    else:
                        found = mol.HasSubstructMatch(queries[p], self.one_params)
                if found:
                    hits.append(p)
                else:
                    possible[p] = False
        except Exception as exc:  # noqa: BLE001 - reported for this structure only
            return [index, [], None, 0, "", f"matching failed: {type(exc).__name__}: {exc}"]
        return [index, hits, atoms if self.evidence else None, facts.charge,
                ",".join(sorted(facts.elements)), None]


def _run(todo: Sequence[int], items: Sequence[str | Chem.Mol], search: _Search,
         wanted: Sequence[Iterable[int]], limits: Limits, progress: Any,
         send: Callable[[list[list[Any]]], None], quick: bool = False, elements: bool = True) -> None:
    """Match in chunks: read a chunk, screen it at once, then search each structure.

    `progress` holds (index, start time) of the structure being worked on; its time carries
    over from reading to searching, so one bound covers both. With the search's `evidence`,
    every match of each matching pattern is kept (up to `limits.max_matches`); without, one
    is enough. Without `elements`, which elements a structure has is not found out.
    """
    table = search.table
    for at in range(0, len(todo), _CHUNK):
        chunk = todo[at:at + _CHUNK]
        ready: list[tuple[int, Chem.Mol, Facts, float]] = []
        rows: list[list[Any]] = []
        for index in chunk:
            started = time.monotonic()
            # Time first, then index: the parent reads index then time, so it never pairs a
            # new index with an old start time.
            progress[2] = 0.0  # reading
            progress[1] = started
            progress[0] = float(index)
            mol, facts, error = _prepare(items[index], limits, table, quick, elements)
            if mol is None or facts is None:
                rows.append([index, [], None, 0, "", error])
            else:
                ready.append((index, mol, facts, time.monotonic() - started))
        possible: list[list[bool]] = [[] for _ in ready]
        chosen = np.zeros((len(ready), 0), dtype=bool)
        if ready and search.queries:
            screened = table.passing([r[2] for r in ready])
            possible = screened.tolist()
            # The wanted patterns that pass, columns in search order.
            chosen = (screened & np.stack([search.mask(wanted[r[0]]) for r in ready]))[:, search.order]
        for row, (index, mol, facts, spent) in enumerate(ready):
            progress[2] = 1.0  # searching
            progress[1] = time.monotonic() - spent
            progress[0] = float(index)
            candidates = search.order[chosen[row]].tolist()
            rows.append(search.row(index, mol, facts, candidates, possible[row]))
        send(rows)


class _Decoder:
    """Rows from a worker as Outcomes; the sets most structures share are made once."""

    def __init__(self, wanted: Sequence[Iterable[int]], evidence: bool) -> None:
        self.wanted, self.evidence = wanted, evidence
        self._checked: dict[int, tuple[Any, frozenset[int]]] = {}
        self._elements: dict[str, frozenset[str]] = {}

    def __call__(self, row: list[Any]) -> tuple[int, Outcome]:
        index, hits, atoms, charge, elements, error = row
        asked = self.wanted[index]
        known = self._checked.get(id(asked))
        if known is None or known[0] is not asked:
            known = self._checked[id(asked)] = (asked, frozenset(asked))
        symbols = self._elements.get(elements)
        if symbols is None:
            symbols = self._elements[elements] = frozenset(elements.split(",")) - {""}
        matches = dict(zip(hits, atoms)) if atoms is not None else {}
        return index, Outcome(frozenset(hits), known[1], charge, symbols, error, matches, self.evidence)


class _Quiet:
    """A stderr that drops what is written: a worker's RDKit log lines are not wanted."""

    def write(self, text: str) -> int:
        return len(text)

    def flush(self) -> None:
        pass


def _worker(todo: list[int], items: Sequence[str | Chem.Mol], search: _Search,
            wanted: Sequence[Iterable[int]], limits: Limits, elements: bool,
            progress: Any, conn: Any) -> None:
    # The forked worker shares the parent's heap; a cyclic collection would walk (and so
    # copy) all of it, and the worker's own garbage is freed by reference counting.
    gc.disable()
    # RDKit logs through Python's stderr, dropped here; the careful parse that explains a
    # bad structure captures its own lines.
    rdBase.LogToPythonStderr()
    sys.stderr = _Quiet()  # type: ignore[assignment]
    # Rows hold no cycles; not checking for them saves a third of the encoding.
    encode = json.JSONEncoder(check_circular=False, separators=(",", ":")).encode
    _run(todo, items, search, wanted, limits, progress,
         lambda rows: conn.send_bytes(encode(rows).encode()), True, elements)
    conn.send_bytes(encode([None]).encode())
    conn.close()


def _fork_context() -> Any:
    try:
        return multiprocessing.get_context("fork")
    except ValueError:  # pragma: no cover - platforms without fork
        return None


class _Lane:
    """One worker process and the structures it still owes; restarted after a stuck one."""

    def __init__(self, ctx: Any, todo: list[int], job: tuple[Any, ...], bound: float) -> None:
        self.ctx, self.todo, self.job, self.bound = ctx, todo, job, bound
        self.decode = _Decoder(job[2], job[4])
        self.done = not todo
        if todo:
            self._start()

    def _start(self) -> None:
        self.progress = self.ctx.RawArray("d", [-1.0, time.monotonic(), 0.0])
        self.receiver, sender = self.ctx.Pipe(duplex=False)
        items, search, wanted, limits, _evidence, elements = self.job
        self.proc = self.ctx.Process(target=_worker, daemon=True,
                                     args=(self.todo, items, search, wanted, limits,
                                           elements, self.progress, sender))
        self.proc.start()
        sender.close()

    def handles(self) -> list[Any]:
        return [] if self.done else [self.receiver, self.proc.sentinel]

    def step(self, ready: Sequence[Any], results: dict[int, Outcome]) -> None:
        """Take a message if one is waiting; otherwise see whether the worker is stuck or gone."""
        if self.done:
            return
        finished = False
        stuck: tuple[int, str] | None = None
        if self.receiver in ready or self.receiver.poll():
            try:
                rows = json.loads(self.receiver.recv_bytes())
            except (EOFError, OSError):
                rows = [None]
            for row in rows:
                if row is None:
                    finished = True
                else:
                    index, outcome = self.decode(row)
                    results[index] = outcome
        elif self.proc.sentinel in ready:
            stuck = (int(self.progress[0]), "matching failed: the matching process stopped unexpectedly")
        else:
            current, started = int(self.progress[0]), self.progress[1]
            if current >= 0 and current not in results and time.monotonic() - started > self.bound:
                doing = "searching it" if self.progress[2] else "reading the structure"
                stuck = (current, (f"time limit: reading and searching one structure may take "
                                  f"{self.bound:g} s (limits.rule_seconds); stopped while {doing}"))
        if not finished and stuck is None:
            return
        self.stop()
        if stuck is not None and stuck[0] >= 0 and stuck[0] not in results:
            results[stuck[0]] = _failed(stuck[1], self.job[4])
        self.todo = [i for i in self.todo if i not in results]
        if self.todo and stuck is None:  # pragma: no cover - ended without every result
            for i in self.todo:
                results[i] = _failed("matching failed: no result", self.job[4])
            self.todo = []
        if self.todo:
            self._start()
        else:
            self.done = True

    def stop(self) -> None:
        if self.proc.is_alive():
            self.proc.kill()
        self.proc.join()
        self.receiver.close()


def default_workers(structures: int) -> int:
    """Worker processes for this many structures: one per CPU (at most 4), one for few."""
    return 1 if structures < _PARALLEL_FROM else max(1, min(4, os.cpu_count() or 1))


def match_many(patterns: Sequence[Pattern], items: Sequence[str | Chem.Mol],
               wanted: Sequence[Iterable[int]], limits: Limits = DEFAULT_LIMITS,
               workers: int | None = None, evidence: bool = True,
               elements: bool = True) -> list[Outcome]:
    """For each structure (SMILES or molecule), the matches of the patterns `wanted[i]` names.

    A structure whose reading and searching together take longer than `limits.rule_seconds`
    gets an Outcome with an error and no matches. `workers` processes share the structures
    (default: `default_workers`). With `evidence`, each hit's matched atoms are kept;
    without, only which patterns match (each search stops at its first match). Without
    `elements`, each Outcome's `elements` is left empty (no rule asks), which saves a step.
    """
    if len(items) != len(wanted):
        raise ValueError("one set of wanted patterns per structure")
    results: dict[int, Outcome] = {}
    todo = list(range(len(items)))
    ctx = _fork_context()
    search = _Search(patterns, limits, evidence)
    if ctx is None or not todo:  # pragma: no cover - no fork: in process, maxMatches only
        decode = _Decoder(wanted, evidence)
        _run(todo, items, search, wanted, limits, [0.0, 0.0, 0.0],
             lambda rows: results.update(decode(r) for r in json.loads(json.dumps(rows))),
             False, elements)  # through JSON as from a worker: atoms as lists
        return [results[i] for i in range(len(items))]
    bound = max(0.01, float(limits.rule_seconds))
    count = max(1, min(workers or default_workers(len(todo)), len(todo)))
    job = (items, search, wanted, limits, evidence, elements)
    # Every count-th structure to each worker: neighbours in a list are often alike (one
    # source after another), so contiguous halves can leave one worker with the heavy end.
    lanes = [_Lane(ctx, todo[k::count], job, bound) for k in range(count)]
    try:
        with collector_paused():  # an Outcome per structure, decoded as rows arrive
            while not all(lane.done for lane in lanes):
                handles = [h for lane in lanes for h in lane.handles()]
                ready = wait(handles, timeout=min(0.05, bound / 4))
                for lane in lanes:
                    lane.step(ready, results)
    finally:
        for lane in lanes:
            if not lane.done:
                lane.stop()
    return [results[i] for i in range(len(items))]


# -- helpers for proposing rules --------------------------------------------------------------

_BOND_SYMBOL = {1: "-", 2: "=", 3: "#", 12: ":"}


def atom_environments(mol: Chem.Mol) -> set[str]:
    """SMARTS for each atom's surroundings, at several levels of detail.

    Each is rooted at one atom, written in detail (element, aromaticity, H count, degree,
    charge), and adds: one neighbour at a time (plain: element and aromaticity; detailed; or
    detailed with its own other neighbours, plain), or all neighbours at once in each of
    those forms. The root's degree fixes its neighbour count, so the all-neighbour forms
    describe the whole surroundings. Equal surroundings give equal text.
    """
    plain: list[str] = []
    detailed: list[str] = []
    for atom in mol.GetAtoms():
        z, aromatic = atom.GetAtomicNum(), "a" if atom.GetIsAromatic() else "A"
        charge = atom.GetFormalCharge()
        plain.append(f"[#{z};{aromatic}]")
        detailed.append(f"[#{z};{aromatic};H{atom.GetTotalNumHs()};D{atom.GetDegree()};"
                        f"{'+' if charge >= 0 else '-'}{abs(charge)}]")
    links: list[list[tuple[str, int, int]]] = [[] for _ in plain]  # (bond symbol, other, bond)
    for bond in mol.GetBonds():
        i, j = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        symbol = _BOND_SYMBOL.get(int(bond.GetBondType()), "~")
        index = bond.GetIdx()
        links[i].append((symbol, j, index))
        links[j].append((symbol, i, index))
    out: set[str] = set()
    for root, neighbours in enumerate(links):
        head = detailed[root]
        out.add(head)
        forms: tuple[list[str], list[str], list[str]] = ([], [], [])
        for symbol, other, via in neighbours:
            beyond = sorted(f"({s}{plain[o]})" for s, o, b in links[other] if b != via)
            branches = (symbol + plain[other], symbol + detailed[other],
                        symbol + detailed[other] + "".join(beyond))
            for form, branch in zip(forms, branches):
                form.append(branch)
                out.add(f"{head}({branch})")
        if neighbours:
            for form in forms:
                out.add(head + "".join(f"({b})" for b in sorted(form)))
    return out


def environments_of(items: Sequence[str | Chem.Mol], limits: Limits = DEFAULT_LIMITS) -> list[set[str] | None]:
    """`atom_environments` of each structure; None where it cannot be read."""
    out: list[set[str] | None] = []
    for item in items:
        mol, _error = read_structure(item, limits)
        out.append(atom_environments(mol) if mol is not None else None)
    return out


def common_substructure(items: Sequence[str | Chem.Mol], seconds: float, threshold: float = 1.0,
                        limits: Limits = DEFAULT_LIMITS) -> str | None:
    """SMARTS of a maximum common substructure of the structures (RDKit's FMCS), or None.

    `threshold` is the fraction of structures it must occur in; the search stops after
    `seconds` and returns the best found so far.
    """
    mols = [m for m in (read_structure(i, limits)[0] for i in items) if m is not None]
    if len(mols) < 2:
        return None
    with captured_log():
        result = rdFMCS.FindMCS(mols, timeout=max(1, int(seconds)), threshold=threshold,
                                ringMatchesRingOnly=True, completeRingsOnly=True,
                                atomCompare=rdFMCS.AtomCompare.CompareElements,
                                bondCompare=rdFMCS.BondCompare.CompareOrder)
    if result.numAtoms < 2 or not result.smartsString:
        return None
    return result.smartsString if is_valid_smarts(result.smartsString) else None
