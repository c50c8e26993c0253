"""Build a benchmark repository: a synthetic chemical ontology and one change to it.

    python tests/benchmarks/generate.py SIZE CHANGE OUT [--cache DIR] [--jobs N]

SIZE is the number of structured terms (``300``, ``10k``, ``50k``, ``200k``); CHANGE is the
number of terms the change edits or adds (``1``, ``10``, ``1000``); OUT is a new folder that
becomes a git repository: the base on ``main``, the change as one commit on branch ``change``.

Structures are real: RDKit's shipped molecules (`tests/fgbench.py`) and analogues enumerated
from them by atom edits (a substituent put in place of a hydrogen on carbon, an aromatic CH
turned into a ring nitrogen), each sanitised by RDKit and kept only when its canonical SMILES
and standard InChIKey are new. Annotations (InChI, InChIKey, formula, masses, charge) are
RDKit's own values for each structure.

Shape: a root; element classes (organohalogen, organosulfur... compounds); the functional-group
classes of RDKit's hierarchy, nested as the file nests them; one "series" class per shipped
molecule with analogues, filed under the seed's most specific functional groups; compounds
filed under their series (or the seed's groups) and their element classes. Class sizes run
from a handful (series) to thousands (groups, elements).

Enumerated structures are cached under ``--cache`` (default /tmp/parentage-bench/cache), so
a second run of any size is fast. All generated ids use the invented prefix ``BENCH``.
"""
from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
from collections.abc import Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor
from typing import NamedTuple

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))  # tests/, for fgbench

PREFIX = "BENCH"
DEFAULT_CACHE = "/tmp/parentage-bench/cache"
CACHE_LAYOUT = "v1"
CHUNK = 25  # seeds per cached chunk
MAX_ANALOGUES = 60  # per seed, over both rounds
MAX_HEAVY_ATOMS = 100
RESERVE_EVERY = 9  # every 9th analogue is held back from the base for the change to add

SUBSTITUENTS = ("F", "Cl", "C", "OC", "C#N", "O", "N", "Br", "C(F)(F)F", "C(=O)O", "S(C)(=O)=O",
                "CC")
ELEMENT_CLASSES = (  # (id number, name, elements)
    (10, "organohalogen compound", ("F", "Cl", "Br", "I")),
    (11, "organosulfur compound", ("S",)),
    (12, "organophosphorus compound", ("P",)),
    (13, "organoboron compound", ("B",)),
)
ROOT = f"{PREFIX}:0000001"
ION_CLASS = f"{PREFIX}:0000014"


class Entry(NamedTuple):
    smiles: str
    inchi: str
    inchikey: str
    formula: str
    mass: float
    monoisotopic_mass: float
    charge: int


class Compound(NamedTuple):
    seed: int  # position of the seed molecule in the shuffled seed list
    entry: Entry


# -- structures (worker side) -------------------------------------------------------------------

def _analogues(smiles: str, limit: int, salt: int) -> list[str]:
    """Up to `limit` distinct canonical SMILES: the molecule itself, then single-edit analogues."""
    from rdkit import Chem

    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return []
    out = [Chem.MolToSmiles(mol)]
    seen = set(out)
    sites = [a.GetIdx() for a in mol.GetAtoms()
             if a.GetSymbol() == "C" and a.GetTotalNumHs() > 0 and a.GetNumExplicitHs() == 0
             and not a.GetNoImplicit()]
    edits = [(site, sub) for site in sites for sub in SUBSTITUENTS]
    edits += [(site, "ring-n") for site in sites if mol.GetAtomWithIdx(site).GetIsAromatic()]
    random.Random(salt).shuffle(edits)
    for site, sub in edits:
        if len(out) >= limit:
            break
        edited = _edit(mol, site, sub)
        if edited is not None and edited not in seen:
            seen.add(edited)
            out.append(edited)
    return out


def _edit(mol: object, site: int, sub: str) -> str | None:
    from rdkit import Chem

    try:
        if sub == "ring-n":
            rw = Chem.RWMol(mol)
            rw.GetAtomWithIdx(site).SetAtomicNum(7)
        else:
            frag = Chem.MolFromSmiles(sub)
            rw = Chem.RWMol(Chem.CombineMols(mol, frag))
            rw.AddBond(site, mol.GetNumAtoms(), Chem.BondType.SINGLE)  # type: ignore[attr-defined]
        new = rw.GetMol()
        Chem.SanitizeMol(new)
        text = Chem.MolToSmiles(new)
        again = Chem.MolFromSmiles(text)  # the written SMILES must read back
        return Chem.MolToSmiles(again) if again is not None else None
    except Exception:  # noqa: BLE001 - an invalid edit is simply skipped
        return None


def _entry(smiles: str) -> Entry | None:
    from rdkit import Chem
    from rdkit.Chem import Descriptors, rdMolDescriptors

    mol = Chem.MolFromSmiles(smiles)
    if mol is None or mol.GetNumHeavyAtoms() > MAX_HEAVY_ATOMS:
        return None
    inchi = Chem.MolToInchi(mol)
    if not inchi:
        return None
    key = Chem.InchiToInchiKey(inchi)
    if not key:
        return None
    return Entry(smiles, inchi, key, rdMolDescriptors.CalcMolFormula(mol),
                 round(Descriptors.MolWt(mol), 4), round(Descriptors.ExactMolWt(mol), 6),
                 Chem.GetFormalCharge(mol))


def _chunk_job(args: tuple[list[tuple[int, str, int]], list[tuple[str, str]]]) -> dict[str, object]:
    """Entries for each (seed position, SMILES, limit), and each seed's direct groups."""
    from rdkit import Chem, RDLogger

    RDLogger.DisableLog("rdApp.*")
    seeds, groups = args
    patterns = [(gid, Chem.MolFromSmarts(smarts)) for gid, smarts in groups]
    entries: dict[str, list[list[object]]] = {}
    matched: dict[str, list[str]] = {}
    for pos, smiles, limit in seeds:
        rows = []
        for smi in _analogues(smiles, limit, pos):
            entry = _entry(smi)
            if entry is not None:
                rows.append(list(entry))
        entries[str(pos)] = rows
        mol = Chem.MolFromSmiles(smiles)
        matched[str(pos)] = [gid for gid, patt in patterns
                             if mol is not None and patt is not None and mol.HasSubstructMatch(patt)]
    return {"entries": entries, "groups": matched}


# -- the structure pool (cached) --------------------------------------------------------------

class Pool:
    """Seeds in a fixed shuffled order, their analogues and groups, computed chunk by chunk."""

    def __init__(self, cache: str, jobs: int) -> None:
        import fgbench

        self.cache = os.path.join(cache, f"{CACHE_LAYOUT}-{CHUNK}")
        os.makedirs(self.cache, exist_ok=True)
        self.jobs = jobs
        mols = list(fgbench.molecules())
        random.Random(7).shuffle(mols)
        self.seeds = [m.smiles for m in mols]
        self.names = [m.source for m in mols]
        rng = random.Random(11)
        # Round-one analogues per seed: heavy tailed, from none to dozens.
        self.quota = [rng.choice((0, 0, 1, 2, 3, 5, 8, 10, 12, 15, 20, 25, 30, 45, 59))
                      for _ in self.seeds]
        self.groups = fgbench.groups()
        self._loaded: dict[tuple[int, int], dict[str, object]] = {}

    def _limit(self, pos: int, round_: int) -> int:
        return 1 + self.quota[pos] if round_ == 1 else MAX_ANALOGUES + 1

    def _path(self, round_: int, chunk: int) -> str:
        return os.path.join(self.cache, f"chunk-r{round_}-{chunk:04d}.json")

    def prepare(self, round_: int, chunks: Sequence[int]) -> None:
        """Compute (in parallel) the chunks not cached yet."""
        missing = [c for c in chunks if (round_, c) not in self._loaded
                   and not os.path.exists(self._path(round_, c))]
        if not missing:
            return
        groups = [(g.id, g.smarts) for g in self.groups]
        work = []
        for c in missing:
            span = range(c * CHUNK, min((c + 1) * CHUNK, len(self.seeds)))
            work.append(([(p, self.seeds[p], self._limit(p, round_)) for p in span], groups))
        print(f"enumerating structures: {len(missing)} chunk(s) of {CHUNK} seeds, round {round_}",
              file=sys.stderr)
        with ProcessPoolExecutor(self.jobs) as ex:
            for c, result in zip(missing, ex.map(_chunk_job, work)):
                tmp = self._path(round_, c) + ".tmp"
                with open(tmp, "w", encoding="utf-8") as handle:
                    json.dump(result, handle)
                os.replace(tmp, self._path(round_, c))

    def chunk(self, round_: int, c: int) -> dict[str, object]:
        loaded = self._loaded.get((round_, c))
        if loaded is None:
            self.prepare(round_, [c])
            with open(self._path(round_, c), encoding="utf-8") as handle:
                loaded = json.load(handle)
            self._loaded[(round_, c)] = loaded
        return loaded

    def entries(self, round_: int, pos: int) -> list[Entry]:
        rows = self.chunk(round_, pos // CHUNK)["entries"][str(pos)]  # type: ignore[index]
        return [Entry(*row) for row in rows]

    def seed_groups(self, pos: int) -> list[str]:
        return list(self.chunk(1, pos // CHUNK)["groups"][str(pos)])  # type: ignore[index]

    def walk(self) -> Iterator[tuple[int, int, Entry]]:
        """(round, seed position, entry) in the fixed order; round 2 adds later analogues."""
        total = (len(self.seeds) + CHUNK - 1) // CHUNK
        for round_ in (1, 2):
            ahead = self.jobs
            for c in range(total):
                if c % ahead == 0:
                    self.prepare(round_, range(c, min(c + ahead, total)))
                for pos in range(c * CHUNK, min((c + 1) * CHUNK, len(self.seeds))):
                    # Round two repeats round one's entries first; the caller skips them.
                    for entry in self.entries(round_, pos):
                        yield round_, pos, entry


def select(pool: Pool, size: int, reserve: int) -> tuple[list[Compound], list[Compound]]:
    """`size` base compounds and up to `reserve` held-back analogues of base series."""
    base: list[Compound] = []
    held: list[Compound] = []
    smiles: set[str] = set()
    keys: set[str] = set()
    analogues = 0
    for _round, pos, entry in pool.walk():
        if entry.smiles in smiles or entry.inchikey in keys:
            continue
        is_seed = entry.smiles == pool.entries(1, pos)[0].smiles if _round == 1 else False
        if not is_seed:
            analogues += 1
            if analogues % RESERVE_EVERY == 0:
                if len(held) < reserve:
                    smiles.add(entry.smiles)
                    keys.add(entry.inchikey)
                    held.append(Compound(pos, entry))
                continue
        if len(base) >= size:
            if len(held) >= reserve:
                break
            continue
        smiles.add(entry.smiles)
        keys.add(entry.inchikey)
        base.append(Compound(pos, entry))
    if len(base) < size:
        raise SystemExit(f"only {len(base)} distinct structures could be made; asked for {size}")
    return base, held


# -- the ontology -----------------------------------------------------------------------------

def _quote(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _elements(formula: str) -> set[str]:
    import re

    return set(re.findall(r"[A-Z][a-z]?", formula))


class Ontology:
    """Stanzas by id, in file order."""

    def __init__(self, pool: Pool, base: list[Compound]) -> None:
        self.pool = pool
        self.stanzas: dict[str, str] = {}
        self.series_of: dict[int, str] = {}
        self.compounds: list[str] = []
        self.class_ids: list[str] = []
        self.next_number = 0
        header = ["format-version: 1.2", "data-version: benchmark", "ontology: bench",
                  "default-namespace: bench", 'remark: "synthetic benchmark ontology"']
        self.header = "\n".join(header) + "\n"
        self._class(ROOT, "chemical entity", [])
        for number, name, _elements in ELEMENT_CLASSES:
            self._class(f"{PREFIX}:{number:07d}", name, [ROOT])
        self._class(ION_CLASS, "ion", [ROOT])
        self.group_id = {}
        for n, group in enumerate(pool.groups):
            self.group_id[group.id] = f"{PREFIX}:{100 + n:07d}"
        for group in pool.groups:
            parent = self.group_id.get(group.parent, ROOT)
            self._class(self.group_id[group.id], f"{group.label} compound", [parent],
                        synonym=group.key)
        for compound in base:
            self.add(compound)

    def _class(self, cid: str, name: str, parents: list[str], synonym: str | None = None) -> None:
        lines = ["[Term]", f"id: {cid}", f"name: {name}"]
        if synonym:
            lines.append(f"synonym: {_quote(synonym)} RELATED []")
        lines += [f"is_a: {p}" for p in parents]
        self.stanzas[cid] = "\n".join(lines) + "\n"
        self.class_ids.append(cid)

    def most_specific_groups(self, pos: int) -> list[str]:
        import fgbench

        found = set(self.pool.seed_groups(pos))
        implied = {a for g in found for a in fgbench.ancestors_of(g)}
        return sorted(self.group_id[g] for g in found if g not in implied)

    def series(self, pos: int) -> str | None:
        if self.pool.quota[pos] == 0:
            return None
        sid = self.series_of.get(pos)
        if sid is None:
            sid = f"{PREFIX}:{1000000 + pos:07d}"
            self._class(sid, f"{self.pool.names[pos]} series", self.most_specific_groups(pos) or [ROOT],
                        synonym=f"analogues of {self.pool.names[pos]}")
            self.series_of[pos] = sid
        return sid

    def compound_parents(self, compound: Compound) -> list[str]:
        series = self.series(compound.seed)
        parents = [series] if series else (self.most_specific_groups(compound.seed) or [ROOT])
        elements = _elements(compound.entry.formula)
        parents += [f"{PREFIX}:{number:07d}" for number, _name, wanted in ELEMENT_CLASSES
                    if elements & set(wanted)]
        if compound.entry.charge:
            parents.append(ION_CLASS)
        return parents

    def add(self, compound: Compound, parents: list[str] | None = None) -> str:
        cid = f"{PREFIX}:{2000000 + self.next_number:07d}"
        self.next_number += 1
        self.stanzas[cid] = compound_stanza(cid, f"compound {self.next_number}", compound.entry,
                                            parents or self.compound_parents(compound))
        self.compounds.append(cid)
        return cid

    def text(self) -> str:
        return self.header + "".join("\n" + s for s in self.stanzas.values())


def compound_stanza(cid: str, name: str, entry: Entry, parents: list[str],
                    synonyms: Sequence[str] = ()) -> str:
    lines = ["[Term]", f"id: {cid}", f"name: {name}",
             'def: "A benchmark compound." []']
    lines += [f"synonym: {_quote(s)} EXACT []" for s in synonyms]
    lines += [f"is_a: {p}" for p in parents]
    lines += [f"property_value: smiles {_quote(entry.smiles)} xsd:string",
              f"property_value: inchi {_quote(entry.inchi)} xsd:string",
              f"property_value: inchikey {_quote(entry.inchikey)} xsd:string",
              f"property_value: formula {_quote(entry.formula)} xsd:string",
              f'property_value: mass "{entry.mass:.4f}" xsd:decimal',
              f'property_value: monoisotopic_mass "{entry.monoisotopic_mass:.6f}" xsd:decimal',
              f'property_value: charge "{entry.charge}" xsd:integer']
    return "\n".join(lines) + "\n"


# -- the change -------------------------------------------------------------------------------

def apply_change(onto: Ontology, base: list[Compound], held: list[Compound], count: int,
                 seed: int) -> dict[str, int]:
    """Edit or add `count` terms in place; returns how many of each kind."""
    rng = random.Random(seed)
    by_id = dict(zip(onto.compounds, base))
    if count == 1:
        plan = ["add"]
    else:
        plan = (["add"] * (count * 4 // 10) + ["parents"] * (count * 3 // 10)
                + ["structure"] * (count * 2 // 10))
        plan += ["name"] * (count - len(plan))
    rng.shuffle(plan)
    targets = rng.sample(onto.compounds, min(len(onto.compounds), sum(1 for k in plan if k != "add")))
    spare = list(held)
    groups = [g for g in onto.group_id.values()]
    tally: dict[str, int] = {}
    for kind in plan:
        if kind in ("add", "structure") and not spare:
            kind = "name"  # too few held-back structures at this size
        if kind != "add" and not targets:
            break  # a tiny ontology has fewer terms than the change asks for
        tally[kind] = tally.get(kind, 0) + 1
        if kind == "add":
            onto.add(spare.pop(0))
            continue
        cid = targets.pop()
        compound = by_id[cid]
        if kind == "structure":
            # A corrected structure: a held-back analogue of the same series where there is one.
            pick = next((i for i, c in enumerate(spare) if c.seed == compound.seed), 0)
            compound = Compound(compound.seed, spare.pop(pick).entry)
        parents = onto.compound_parents(compound)
        name = f"compound {int(cid.split(':')[1]) - 2000000 + 1}"
        entry = compound.entry
        synonyms: list[str] = []
        if kind == "parents":
            extra = rng.choice(groups)
            parents = parents + [extra] if rng.random() < 0.7 else [extra] + parents[1:]
        elif kind == "name":
            name = f"{name} (renamed)"
            synonyms = [f"BENCH compound {cid.split(':')[1]}"]
        onto.stanzas[cid] = compound_stanza(cid, name, entry, parents, synonyms)
    return tally


# -- the repository ---------------------------------------------------------------------------

CONFIG = """\
ontologies: [src/compounds.obo]
rules: [rules/*.yaml]
"""


def rules_text(onto: Ontology) -> str:
    """One sufficient rule per functional-group class: the hierarchy's own SMARTS."""
    lines = ["# Functional-group rules from RDKit's Functional_Group_Hierarchy.txt."]
    for group in onto.pool.groups:
        lines += [f"- class: {onto.group_id[group.id]}", "  kind: sufficient",
                  f"  any_of: [{json.dumps(group.smarts)}]"]
    return "\n".join(lines) + "\n"


def _git(out: str, *args: str) -> None:
    env = {**os.environ, "GIT_CONFIG_NOSYSTEM": "1", "GIT_AUTHOR_NAME": "Benchmark",
           "GIT_AUTHOR_EMAIL": "bench@example.invalid", "GIT_COMMITTER_NAME": "Benchmark",
           "GIT_COMMITTER_EMAIL": "bench@example.invalid"}
    subprocess.run(["git", *args], cwd=out, env=env, check=True, capture_output=True)


def write(out: str, files: dict[str, str]) -> None:
    for rel, text in files.items():
        full = os.path.join(out, rel)
        os.makedirs(os.path.dirname(full), exist_ok=True)
        with open(full, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)


def parse_size(text: str) -> int:
    text = text.strip().lower()
    scale = 1000 if text.endswith("k") else 1
    return int(float(text.rstrip("k")) * scale)


def build(size: int, change: int, out: str, cache: str = DEFAULT_CACHE,
          jobs: int | None = None) -> dict[str, object]:
    if os.path.exists(out) and os.listdir(out):
        raise SystemExit(f"{out}: exists and is not empty")
    pool = Pool(cache, jobs or os.cpu_count() or 1)
    base, held = select(pool, size, reserve=change)
    onto = Ontology(pool, base)
    base_text = onto.text()
    os.makedirs(out, exist_ok=True)
    _git(out, "init", "-q", "-b", "main")
    _git(out, "config", "commit.gpgsign", "false")
    write(out, {".parentage.yaml": CONFIG, "rules/groups.yaml": rules_text(onto),
                "src/compounds.obo": base_text})
    _git(out, "add", "-A")
    _git(out, "commit", "-q", "-m", f"Benchmark ontology: {size} structured terms")
    tally = apply_change(onto, base, held, change, seed=change)
    write(out, {"src/compounds.obo": onto.text()})
    _git(out, "checkout", "-q", "-b", "change")
    _git(out, "add", "-A")
    _git(out, "commit", "-q", "-m", f"Change {change} term(s): {json.dumps(tally, sort_keys=True)}")
    _git(out, "checkout", "-q", "main")
    summary = {"size": size, "change": change, "classes": len(onto.class_ids),
               "base_bytes": len(base_text.encode()), "tally": tally,
               "obo": os.path.join(out, "src", "compounds.obo")}
    with open(os.path.join(out, ".git", "bench.json"), "w", encoding="utf-8") as handle:
        json.dump(summary, handle)
    return summary


def main(argv: Sequence[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n", 1)[0])
    p.add_argument("size", help="structured terms in the base: 300, 10k, 50k, 200k")
    p.add_argument("change", type=int, help="terms the change edits or adds: 1, 10, 1000")
    p.add_argument("out", help="new folder for the repository")
    p.add_argument("--cache", default=DEFAULT_CACHE, help=f"structure cache (default {DEFAULT_CACHE})")
    p.add_argument("--jobs", type=int, default=None, help="worker processes (default: CPU count)")
    args = p.parse_args(argv)
    summary = build(parse_size(args.size), args.change, args.out, args.cache, args.jobs)
    print(json.dumps(summary))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
