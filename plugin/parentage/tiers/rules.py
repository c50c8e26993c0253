"""The rule tier: curators' substructure rules, their meaning, and how well they fit.

A rule names a class, a kind and conditions: `any_of` (at least one SMARTS matches),
`all_of` (every one matches), `none_of` (none matches), and optionally `net_charge` (the
structure's net formal charge is one of these), `has_elements` and `lacks_elements` (element
symbols). A rule *holds* for a structure when every condition it gives holds.

- defining: holds for every member, and holding implies membership;
- necessary: holds for every member (of the class and of all its descendants);
- sufficient: holding implies membership of the class and of its ancestors.

A term's verdict for a class C that has rules: `opposes` when C is among the classes the term
belongs to (asserted, or implied by a sufficient rule) and a necessary or defining rule of C
fails; `supports` when a sufficient or defining rule of C holds, or when C is among the
term's classes and its necessary rules hold. A class without rules that a holding sufficient
rule implies (an ancestor of its class) is supported too, with `implied_by` in the evidence.
No verdict otherwise ("no rule").
"""
from __future__ import annotations

import hashlib
import json
from collections.abc import Iterable, Mapping, Sequence
from typing import Any, NamedTuple

import yaml

from parentage._collection import collector_paused
from parentage.chem.smarts import (
    DEFAULT_LIMITS,
    ELEMENT_SYMBOLS,
    Outcome,
    Pattern,
    compile_smarts,
    match_many,
)
from parentage.config import Config, Limits
from parentage.errors import ParentageError
from parentage.snapshot import Ontology, read_structure
from parentage.tiers import Verdict
from parentage.yamlnodes import compose
from parentage.yamlnodes import scalar as _scalar

KINDS = ("defining", "necessary", "sufficient")
SMARTS_KEYS = ("any_of", "all_of", "none_of")
CONSTRAINT_KEYS = ("net_charge", "has_elements", "lacks_elements")
KEYS = ("class", "kind", *SMARTS_KEYS, *CONSTRAINT_KEYS)
_NECESSARY = ("defining", "necessary")
_SUFFICIENT = ("defining", "sufficient")


class RuleFileError(ParentageError):
    """A rule file that cannot be used; the message names the first problem as file:line."""

    def __init__(self, problems: Sequence[str]) -> None:
        more = f" (and {len(problems) - 1} more problems)" if len(problems) > 1 else ""
        super().__init__(problems[0] + more)
        self.problems = tuple(problems)


class Rule(NamedTuple):
    cls: str
    kind: str
    any_of: tuple[str, ...] = ()
    all_of: tuple[str, ...] = ()
    none_of: tuple[str, ...] = ()
    net_charge: tuple[int, ...] = ()  # allowed net charges; empty: any
    has_elements: tuple[str, ...] = ()
    lacks_elements: tuple[str, ...] = ()
    path: str = ""
    line: int = 0

    @property
    def where(self) -> str:
        return f"{self.path}:{self.line}" if self.path else ""

    @property
    def smarts(self) -> tuple[str, ...]:
        return self.any_of + self.all_of + self.none_of

    def content(self) -> dict[str, Any]:
        """What the rule says, without where it is written."""
        data: dict[str, Any] = {"class": self.cls, "kind": self.kind}
        for key in SMARTS_KEYS + CONSTRAINT_KEYS:
            value = getattr(self, key)
            if value:
                data[key] = list(value)
        return data


class Holds(NamedTuple):
    """Whether one rule holds for one structure, and why."""

    holds: bool
    smarts: tuple[str, ...] = ()  # the patterns that matched (holds) or that decided (fails)
    atoms: tuple[Sequence[int], ...] = ()
    reason: str = ""  # why it fails


class _Entry(NamedTuple):
    """One verdict on a structure less its atoms: the rule that decided it, the SMARTS that
    matched or decided, and the patterns whose matched atoms make its evidence."""

    cls: str
    opinion: str
    rule: int
    smarts: tuple[str, ...]
    sources: tuple[int, ...]
    reason: str
    implied_by: str | None  # the class of the sufficient rule that implies this class


# -- loading ----------------------------------------------------------------------------------

def _line(node: yaml.Node) -> int:
    return node.start_mark.line + 1


def _strings(node: yaml.Node) -> list[tuple[Any, yaml.Node]]:
    if isinstance(node, yaml.SequenceNode):
        return [(_scalar(item), item) for item in node.value]
    return [(_scalar(node), node)]


def _rule_from(path: str, node: yaml.Node, problems: list[str]) -> Rule | None:
    where = f"{path}:{_line(node)}"
    if not isinstance(node, yaml.MappingNode):
        problems.append(f"{where}: each rule must be a mapping with 'class' and 'kind'")
        return None
    values: dict[str, Any] = {}
    given: set[str] = set()
    for knode, vnode in node.value:
        key = _scalar(knode)
        at = f"{path}:{_line(knode)}"
        given.add(str(key))
        if key not in KEYS:
            problems.append(f"{at}: unknown key {key!r} (known: {', '.join(KEYS)})")
            continue
        if key in ("class", "kind"):
            value = _scalar(vnode)
            if not isinstance(value, str) or not value.strip():
                problems.append(f"{at}: {key} must be a non-empty string")
                continue
            values[key] = value.strip()
        elif key in SMARTS_KEYS:
            texts = []
            for text, item in _strings(vnode):
                spot = f"{path}:{_line(item)}"
                if not isinstance(text, str):
                    problems.append(f"{spot}: {key} must list SMARTS strings")
                    continue
                try:
                    compile_smarts(text)
                except ParentageError as exc:
                    problems.append(f"{spot}: {key}: {exc}")
                    continue
                texts.append(text)
            values[key] = tuple(texts)
        elif key == "net_charge":
            charges = []
            for value, item in _strings(vnode):
                if not isinstance(value, int) or isinstance(value, bool):
                    problems.append(f"{path}:{_line(item)}: net_charge must be an integer or a list of integers")
                    continue
                charges.append(value)
            values[key] = tuple(charges)
        else:
            symbols = []
            for value, item in _strings(vnode):
                if value not in ELEMENT_SYMBOLS:
                    problems.append(f"{path}:{_line(item)}: {key}: {value!r} is not an element symbol")
                    continue
                symbols.append(value)
            values[key] = tuple(symbols)
    for required in ("class", "kind"):
        if required not in given:
            problems.append(f"{where}: rule has no '{required}'")
    kind = values.get("kind")
    if kind is not None and kind not in KINDS:
        problems.append(f"{where}: kind {kind!r} must be one of {', '.join(KINDS)}")
        return None
    if not any(values.get(k) for k in SMARTS_KEYS + CONSTRAINT_KEYS) and "class" in values:
        problems.append(f"{where}: rule for {values['class']} gives no condition "
                        f"(any of {', '.join(SMARTS_KEYS + CONSTRAINT_KEYS)})")
        return None
    if "class" not in values or kind is None:
        return None
    return Rule(values["class"], kind, any_of=values.get("any_of", ()), all_of=values.get("all_of", ()),
                none_of=values.get("none_of", ()), net_charge=values.get("net_charge", ()),
                has_elements=values.get("has_elements", ()), lacks_elements=values.get("lacks_elements", ()),
                path=path, line=_line(node))


def parse_rule_file(path: str, text: str | bytes, problems: list[str]) -> list[Rule]:
    """The rules of one file; problems (file:line: what) are appended to `problems`."""
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError as exc:
            problems.append(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})")
            return []
    try:
        root = compose(text, path)
    except ParentageError as exc:
        problems.append(str(exc))
        return []
    if root is None:
        return []
    if not isinstance(root, yaml.SequenceNode):
        problems.append(f"{path}:{_line(root)}: a rule file is a list of rules")
        return []
    rules = []
    for node in root.value:
        rule = _rule_from(path, node, problems)
        if rule is not None:
            rules.append(rule)
    return rules


def load_rules(files: Iterable[tuple[str, str | bytes]], ontology: Ontology | None) -> tuple[RuleSet, list[str]]:
    """(rules of every file, warnings). Bad SMARTS, unknown keys or bad values raise
    RuleFileError; a rule whose class the ontology lacks (or has obsoleted) is dropped with a
    warning, so a rule can be written before its class."""
    problems: list[str] = []
    rules: list[Rule] = []
    for path, text in files:
        rules += parse_rule_file(path, text, problems)
    if problems:
        raise RuleFileError(problems)
    warnings: list[str] = []
    kept = []
    for rule in rules:
        term = ontology.terms.get(rule.cls) if ontology is not None else None
        if ontology is not None and term is None:
            warnings.append(f"{rule.where}: class {rule.cls} is not in the ontology; rule ignored")
        elif term is not None and term.obsolete:
            warnings.append(f"{rule.where}: class {rule.cls} is obsolete; rule ignored")
        else:
            kept.append(rule)
    return RuleSet(kept), warnings


# -- evaluation -------------------------------------------------------------------------------

_CACHE_LIMIT = 500_000  # (structure, SMARTS) results kept between calls, e.g. base and head


class RuleSet:
    """Compiled rules with a result cache per (structure text, SMARTS)."""

    def __init__(self, rules: Iterable[Rule]) -> None:
        self.rules = tuple(rules)
        self.by_class: dict[str, tuple[int, ...]] = {}
        for index, rule in enumerate(self.rules):
            self.by_class[rule.cls] = self.by_class.get(rule.cls, ()) + (index,)
        texts = list(dict.fromkeys(t for r in self.rules for t in r.smarts))
        self.patterns: list[Pattern] = [compile_smarts(t) for t in texts]
        self.pattern_of = {t: i for i, t in enumerate(texts)}
        self.texts = texts
        self._rule_patterns = [frozenset(self.pattern_of[t] for t in r.smarts) for r in self.rules]
        self._parts = [tuple(tuple(self.pattern_of[t] for t in getattr(r, k)) for k in SMARTS_KEYS)
                       for r in self.rules]
        self.triggers = tuple(i for i, r in enumerate(self.rules) if r.kind in _SUFFICIENT)
        # Per class: its necessary-or-defining, sufficient-or-defining and necessary rules.
        self._kinds = {cls: tuple(tuple(i for i in indices if self.rules[i].kind in kinds)
                                  for kinds in (_NECESSARY, _SUFFICIENT, ("necessary",)))
                       for cls, indices in self.by_class.items()}
        self._cache: dict[Limits, dict[str, Outcome]] = {}  # limits -> SMILES text -> outcome
        self.workers: int | None = None  # matching processes; None: one per CPU for big jobs
        self._elements = any(r.has_elements or r.lacks_elements for r in self.rules)
        self._charges = any(r.net_charge for r in self.rules)
        self._where = [r.where for r in self.rules]
        self._kind_of = [r.kind for r in self.rules]

    def __len__(self) -> int:
        return len(self.rules)

    def classes(self) -> list[str]:
        return sorted(self.by_class)

    def rules_for(self, cls: str) -> tuple[Rule, ...]:
        return tuple(self.rules[i] for i in self.by_class.get(cls, ()))

    def digest(self, cls: str) -> str:
        """Changes when what the class's rules say changes (not when they move in a file)."""
        contents = sorted(json.dumps(r.content(), sort_keys=True) for r in self.rules_for(cls))
        return hashlib.sha256(json.dumps(contents).encode()).hexdigest()

    # -- matching ---------------------------------------------------------------------------
    def outcomes(self, structures: Sequence[Any], wanted_rules: Sequence[Iterable[int]],
                 limits: Limits, evidence: bool = True) -> list[Outcome]:
        """Matches of the patterns of the wanted rules on each structure.

        Results for SMILES texts are kept, so a structure seen before (at the other end of a
        review, or by an earlier call) is only searched for patterns not yet tried. Without
        `evidence` only which patterns match is found, not their atoms.
        """
        results: list[Outcome | None] = [None] * len(structures)
        todo: list[int] = []
        need: list[frozenset[int]] = []
        # Most terms share one set of rules (the same object): its patterns are found once.
        by_object: dict[int, tuple[Any, frozenset[int]]] = {}
        by_content: dict[frozenset[int], frozenset[int]] = {}
        cache = self._cache.setdefault(limits, {})
        for i, (item, rules) in enumerate(zip(structures, wanted_rules)):
            known = by_object.get(id(rules))
            if known is None or known[0] is not rules:
                key = frozenset(rules)
                if key not in by_content:
                    by_content[key] = frozenset().union(*(self._rule_patterns[r] for r in key))
                known = by_object[id(rules)] = (rules, by_content[key])
            wanted = known[1]
            hit = cache.get(item) if isinstance(item, str) else None
            if hit is not None and evidence and not hit.evidence and hit.error is None:
                hit = None  # found without atoms: search again for them
            missing = wanted - hit.checked if hit is not None else wanted
            if hit is not None and (hit.error is not None or not missing):
                results[i] = hit
            else:
                todo.append(i)
                need.append(missing)
        if todo:
            if sum(len(kept) for kept in self._cache.values()) > _CACHE_LIMIT:
                self._cache.clear()
                cache = self._cache.setdefault(limits, {})
            fresh = match_many(self.patterns, [structures[i] for i in todo], need, limits, self.workers,
                               evidence, self._elements)
            for i, outcome in zip(todo, fresh):
                item = structures[i]
                old = cache.get(item) if isinstance(item, str) else None
                if old is not None and outcome.error is None and old.evidence >= outcome.evidence:
                    outcome = outcome._replace(hits=old.hits | outcome.hits,
                                               matches={**old.matches, **outcome.matches},
                                               checked=old.checked | outcome.checked,
                                               evidence=old.evidence and outcome.evidence)
                if isinstance(item, str):
                    cache[item] = outcome
                results[i] = outcome
        return [r for r in results if r is not None]

    def holds_quickly(self, index: int, outcome: Outcome) -> bool:
        """`holds(index, outcome).holds`, without gathering the evidence."""
        any_of, all_of, none_of = self._parts[index]
        hits = outcome.hits
        if any_of and hits.isdisjoint(any_of):
            return False
        if not hits.issuperset(all_of) or not hits.isdisjoint(none_of):
            return False
        rule = self.rules[index]
        if rule.net_charge and outcome.charge not in rule.net_charge:
            return False
        return all(e in outcome.elements for e in rule.has_elements) and \
            not any(e in outcome.elements for e in rule.lacks_elements)

    def holds_table(self, outcomes: Sequence[Outcome]) -> Any:
        """(structures x rules) booleans: `holds_quickly` of every rule on every outcome."""
        import numpy as np

        hit = np.zeros((len(outcomes), len(self.patterns)), dtype=bool)
        for row, outcome in enumerate(outcomes):
            if outcome.hits:
                hit[row, list(outcome.hits)] = True
        charges = np.array([o.charge for o in outcomes], dtype=np.int64)
        symbols = {e for r in self.rules for e in r.has_elements + r.lacks_elements}
        present = {e: np.array([e in o.elements for o in outcomes], dtype=bool) for e in symbols}
        out = np.ones((len(outcomes), len(self.rules)), dtype=bool)
        for index, rule in enumerate(self.rules):
            any_of, all_of, none_of = (list(part) for part in self._parts[index])
            column = out[:, index]
            if any_of:
                column &= hit[:, any_of].any(axis=1)
            if all_of:
                column &= hit[:, all_of].all(axis=1)
            if none_of:
                column &= ~hit[:, none_of].any(axis=1)
            if rule.net_charge:
                column &= np.isin(charges, rule.net_charge)
            for symbol in rule.has_elements:
                column &= present[symbol]
            for symbol in rule.lacks_elements:
                column &= ~present[symbol]
        return out

    def _holds(self, index: int, outcome: Outcome) -> tuple[bool, tuple[str, ...], tuple[int, ...], str]:
        """(holds, the SMARTS that matched or decided, the patterns whose matched atoms are the
        evidence, why it fails): `holds` without reading the atoms."""
        rule = self.rules[index]
        any_of, all_of, none_of = self._parts[index]
        hits, texts = outcome.hits, self.texts
        sources: list[int] = []
        if any_of:
            sources = [p for p in any_of if p in hits]
            if not sources:
                return False, rule.any_of, (), "no any_of pattern matches"
        for p in all_of:
            if p not in hits:
                return False, (texts[p],), (), "an all_of pattern does not match"
            sources.append(p)
        for p in none_of:
            if p in hits:
                return False, (texts[p],), (p,), "a none_of pattern matches"
        if rule.net_charge and outcome.charge not in rule.net_charge:
            return False, (), (), f"net charge {outcome.charge} is not {' or '.join(str(c) for c in rule.net_charge)}"
        for symbol in rule.has_elements:
            if symbol not in outcome.elements:
                return False, (), (), f"has no {symbol}"
        for symbol in rule.lacks_elements:
            if symbol in outcome.elements:
                return False, (), (), f"has {symbol}"
        return True, tuple(texts[p] for p in sources), tuple(sources), ""

    def holds(self, index: int, outcome: Outcome) -> Holds:
        """Whether rule `index` holds, given the structure's matches."""
        holds, smarts, sources, reason = self._holds(index, outcome)
        matches = outcome.matches
        return Holds(holds, smarts, tuple(m for p in sources for m in matches.get(p, ())), reason)

    # -- verdicts ---------------------------------------------------------------------------
    def _key(self, outcome: Outcome) -> tuple[Any, ...] | None:
        """What the rules' verdicts on a structure depend on, less the matched atoms: its hits,
        and its net charge and elements where a rule asks. None for an unread structure."""
        if outcome.error is not None:
            return None
        return (outcome.hits, outcome.charge if self._charges else 0,
                outcome.elements if self._elements else frozenset())

    def _plans(self, ontology: Ontology, outcomes: Sequence[Outcome]) -> tuple[
            list[tuple[Any, ...] | None], dict[tuple[Any, ...], tuple[list[bool], dict[str, int]]]]:
        """Each outcome's `_key`, and for each key: whether each rule holds, and the classes a
        holding sufficient rule implies (class -> the first such rule). Terms mostly share keys."""
        import numpy as np

        keys = [self._key(o) for o in outcomes]
        firsts: dict[tuple[Any, ...], Outcome] = {}
        for key, outcome in zip(keys, outcomes):
            if key is not None and key not in firsts:
                firsts[key] = outcome
        table = self.holds_table(list(firsts.values()))
        triggers = np.zeros(len(self.rules), dtype=bool)
        triggers[list(self.triggers)] = True
        plans: dict[tuple[Any, ...], tuple[list[bool], dict[str, int]]] = {}
        for row, key in enumerate(firsts):
            found: dict[str, int] = {}
            for r in np.flatnonzero(table[row] & triggers).tolist():
                cls = self.rules[r].cls
                for implied in (cls, *ontology.ancestors(cls)):
                    found.setdefault(implied, r)
            plans[key] = (table[row].tolist(), found)
        return keys, plans

    def verdicts(self, ontology: Ontology, term_ids: Iterable[str], structures: Mapping[str, Any],
                 limits: Limits = DEFAULT_LIMITS,
                 also: Mapping[str, Iterable[str]] | None = None) -> dict[str, list[Verdict]]:
        """Rule verdicts for each term that has a structure (SMILES text or molecule).

        Classes judged: the term's asserted ancestors, the classes a holding sufficient rule
        implies, and `also[term]` with their ancestors (e.g. classes another tier proposes, so
        that a defining rule that fails can say no).
        """
        with collector_paused():  # thousands of outcomes and verdicts are built
            return self._verdicts(ontology, term_ids, structures, limits, also)

    def _verdicts(self, ontology: Ontology, term_ids: Iterable[str], structures: Mapping[str, Any],
                  limits: Limits, also: Mapping[str, Iterable[str]] | None) -> dict[str, list[Verdict]]:
        ids = [t for t in term_ids if t in structures]
        lineage = {t: ontology.ancestors(t) for t in ids}
        for t, proposed in (also or {}).items():
            if t in lineage:
                wanted = set(proposed)
                lineage[t] = lineage[t].union(wanted, *(ontology.ancestors(c) for c in wanted))
        per_lineage: dict[frozenset[str], set[int]] = {}
        for t in ids:
            if lineage[t] not in per_lineage:
                per_lineage[lineage[t]] = set(self.triggers).union(
                    *(self.by_class.get(c, ()) for c in lineage[t]))
        first = [per_lineage[lineage[t]] for t in ids]
        items = [structures[t] for t in ids]
        outcomes = self.outcomes(items, first, limits)
        keys, plans = self._plans(ontology, outcomes)
        # Classes a holding sufficient rule implies may bring necessary rules not yet matched.
        implied = [plans[k][1] if k is not None else {} for k in keys]
        extras: dict[tuple[int, int], set[int]] = {}
        second: list[set[int]] = []
        for found, done in zip(implied, first):
            extra = extras.get((id(found), id(done)))
            if extra is None:
                extra = {r for c in found for r in self.by_class.get(c, ())} - done if found else set()
                extras[(id(found), id(done))] = extra
            second.append(extra)
        if any(second):
            outcomes = self.outcomes(items, [a | b for a, b in zip(first, second)], limits)
            keys, plans = self._plans(ontology, outcomes)
        out: dict[str, list[Verdict]] = {}
        judged: dict[tuple[Any, ...], list[_Entry]] = {}
        for t, outcome, key, found in zip(ids, outcomes, keys, implied):
            if key is None:
                out[t] = [Verdict(t, "", "rule", "abstains", {"reason": outcome.error})]
                continue
            # The implied classes follow from the key, so (lineage, key) decides the entries.
            entries = judged.get((lineage[t], key))
            if entries is None:
                entries = judged[(lineage[t], key)] = self._judge(lineage[t], found, outcome, plans[key][0])
            out[t] = self._fill(t, entries, outcome.matches)
        return out

    def _judge(self, lineage: frozenset[str], implied: Mapping[str, int], outcome: Outcome,
               holding: Sequence[bool]) -> list[_Entry]:
        """The verdicts on one structure, less its atoms; `holding[i]`: whether rule i holds."""
        out = []
        kinds = self._kinds
        for cls in sorted(lineage.union(implied)):
            split = kinds.get(cls)
            if split is None:
                if cls in implied:
                    r = implied[cls]
                    _, smarts, sources, reason = self._holds(r, outcome)
                    out.append(_Entry(cls, "supports", r, smarts, sources, reason, self.rules[r].cls))
                continue
            must, enough, only_necessary = split
            failed = [i for i in must if not holding[i]]
            decided = failed or [i for i in enough if holding[i]] or [i for i in only_necessary if holding[i]]
            if decided:
                chosen = decided[0]
                _, smarts, sources, reason = self._holds(chosen, outcome)
                out.append(_Entry(cls, "opposes" if failed else "supports", chosen, smarts, sources, reason, None))
        return out

    def _fill(self, term: str, entries: Sequence[_Entry], matches: Mapping[int, Sequence[Any]]) -> list[Verdict]:
        """The verdicts of `_judge`'s entries, with the structure's matched atoms."""
        out = []
        where, kinds = self._where, self._kind_of
        for cls, opinion, rule, smarts, sources, reason, implied_by in entries:
            if len(sources) == 1:
                atoms = list(matches.get(sources[0], ()))
            else:
                atoms = [m for p in sources for m in matches.get(p, ())]
            evidence: dict[str, Any] = {"rule": where[rule], "kind": kinds[rule], "smarts": list(smarts),
                                        "atoms": atoms}
            if reason:
                evidence["reason"] = reason
            if implied_by is not None:
                evidence["implied_by"] = implied_by
            out.append(Verdict(term, cls, "rule", opinion, evidence))
        return out


# -- agreement with the curation (`parentage rules test`) -------------------------------------

def _scores(counts: Any) -> tuple[float, float, float]:
    """Precision, recall and F1 of a rule against the curation, from its match counts."""
    found = counts.matched_inside + counts.matched_outside
    precision = counts.matched_inside / found if found else 0.0
    recall = counts.matched_inside / counts.members if counts.members else 0.0
    f1 = 2 * precision * recall / (precision + recall) if precision + recall else 0.0
    return precision, recall, f1


class Agreement(NamedTuple):
    """How one rule fits the asserted classification over every structured term."""

    rule: Rule
    members: int  # structured terms filed under the class
    matched_inside: int
    matched_outside: int
    missed_inside: int
    examples_outside: tuple[str, ...]
    examples_missed: tuple[str, ...]

    @property
    def precision(self) -> float:
        return _scores(self)[0]

    @property
    def recall(self) -> float:
        return _scores(self)[1]

    @property
    def f1(self) -> float:
        return _scores(self)[2]

    def to_json(self) -> dict[str, Any]:
        return {"rule": self.rule.where, "class": self.rule.cls, "kind": self.rule.kind,
                "members": self.members, "matched_inside": self.matched_inside,
                "matched_outside": self.matched_outside, "missed_inside": self.missed_inside,
                "precision": round(self.precision, 4), "recall": round(self.recall, 4),
                "f1": round(self.f1, 4), "examples_outside": list(self.examples_outside),
                "examples_missed": list(self.examples_missed)}


class AgreementReport(NamedTuple):
    revision: str
    structured: int  # terms with a SMILES that were checked
    unchecked: tuple[tuple[str, str], ...]  # (term, why): unreadable or over the time limit
    rules: tuple[Agreement, ...]
    warnings: tuple[str, ...] = ()


def structured_terms(ontology: Ontology, config: Config) -> dict[str, str]:
    """Live term id -> SMILES, for every term that has one."""
    out = {}
    for term in ontology.terms.values():
        if term.obsolete:
            continue
        smiles = read_structure(term, config.structure).smiles
        if smiles:
            out[term.id] = smiles
    return out


def rule_agreement(ruleset: RuleSet, ontology: Ontology, config: Config, examples: int = 3,
                   warnings: Sequence[str] = ()) -> AgreementReport:
    """Every rule over every structured term, against the asserted classification.

    Only whether each pattern matches is searched for (no atoms), and the counts are taken
    over a (terms x rules) table at once.
    """
    import numpy as np

    smiles = structured_terms(ontology, config)
    ids = sorted(smiles)
    everything = range(len(ruleset))
    outcomes = ruleset.outcomes([smiles[t] for t in ids], [everything] * len(ids), config.limits,
                                evidence=False)
    unchecked = tuple((t, o.error) for t, o in zip(ids, outcomes) if o.error is not None)
    good = [(t, o) for t, o in zip(ids, outcomes) if o.error is None]
    holds = ruleset.holds_table([o for _, o in good])
    column = {cls: k for k, cls in enumerate(ruleset.classes())}
    inside_class = np.zeros((len(good), len(column)), dtype=bool)
    for row, (t, _) in enumerate(good):
        for cls in ontology.ancestors(t):
            k = column.get(cls)
            if k is not None:
                inside_class[row, k] = True
    good_ids = [t for t, _ in good]
    rows = []
    for index, rule in enumerate(ruleset.rules):
        inside, hit = inside_class[:, column[rule.cls]], holds[:, index]
        outside_hit = np.flatnonzero(hit & ~inside)
        inside_miss = np.flatnonzero(inside & ~hit)
        matched_inside = int((hit & inside).sum())
        rows.append(Agreement(rule, matched_inside + len(inside_miss), matched_inside, len(outside_hit),
                              len(inside_miss), tuple(good_ids[i] for i in outside_hit[:examples]),
                              tuple(good_ids[i] for i in inside_miss[:examples])))
    return AgreementReport(ontology.revision, len(good), unchecked, tuple(rows), tuple(warnings))


# -- proposing rules (`parentage rules propose`) -------------------------------------------

class Candidate(NamedTuple):
    """A proposed rule and how it fits the ontology it was learned from."""

    rule: Rule
    source: str  # how it was found: "atom environments" or "common substructure"
    members: int
    matched_inside: int
    matched_outside: int

    @property
    def precision(self) -> float:
        return _scores(self)[0]

    @property
    def recall(self) -> float:
        return _scores(self)[1]

    @property
    def f1(self) -> float:
        return _scores(self)[2]


class Proposal(NamedTuple):
    cls: str
    name: str
    members: int
    candidates: tuple[Candidate, ...]  # best (by F1 on the ontology) first; may be empty
    note: str = ""


_MAX_ANY_OF = 8
_MAX_NONE_OF = 3
_MIN_GAIN = 0.002  # smallest F1 gain worth one more pattern
_SHORTLIST = 300  # environments considered per class after the first ranking
_MCS_SAMPLE = 12


def _f1(tp: int, found: int, members: int) -> float:
    return 2 * tp / (found + members) if found + members else 0.0


def _learn(members: Any, masks: dict[str, Any], by_term: Sequence[set[str] | None],
           deadline: float) -> tuple[list[str], list[str]]:
    """Greedy any_of, then none_of, over environment masks, to the best F1 on the members."""
    import time

    import numpy as np

    n_pos = int(members.sum())
    counts: dict[str, int] = {}
    for index in np.flatnonzero(members):
        for env in by_term[int(index)] or ():
            counts[env] = counts.get(env, 0) + 1
    least = max(2, int(0.02 * n_pos))
    ranked = []
    for env, tp in counts.items():
        if tp >= least:
            found = int(masks[env].sum())
            ranked.append((_f1(tp, found, n_pos), tp / found, env))
    ranked.sort(reverse=True)
    shortlist = [env for _, _, env in ranked[:_SHORTLIST]]
    chosen: list[str] = []
    current = np.zeros_like(members)
    best = 0.0
    while len(chosen) < _MAX_ANY_OF and time.monotonic() < deadline:
        scored = []
        for env in shortlist:
            if env in chosen:
                continue
            union = current | masks[env]
            scored.append((_f1(int((union & members).sum()), int(union.sum()), n_pos), env))
        if not scored:
            break
        score, env = max(scored)
        if score < best + _MIN_GAIN:
            break
        chosen.append(env)
        current = current | masks[env]
        best = score
    excluded: list[str] = []
    while chosen and len(excluded) < _MAX_NONE_OF and time.monotonic() < deadline:
        wrong = current & ~members
        seen: dict[str, int] = {}
        for index in np.flatnonzero(wrong):
            for env in by_term[int(index)] or ():
                seen[env] = seen.get(env, 0) + 1
        options = sorted(seen, key=seen.__getitem__, reverse=True)[:_SHORTLIST]
        scored = []
        for env in options:
            kept = current & ~masks[env]
            scored.append((_f1(int((kept & members).sum()), int(kept.sum()), n_pos), env))
        if not scored:
            break
        score, env = max(scored)
        if score < best + _MIN_GAIN:
            break
        excluded.append(env)
        current = current & ~masks[env]
        best = score
    return chosen, excluded


def _kind_for(candidate: Candidate) -> str:
    if candidate.precision >= 0.95 and candidate.recall >= 0.95:
        return "defining"
    return "sufficient" if candidate.precision >= candidate.recall else "necessary"


def propose_rules(ontology: Ontology, config: Config, ruleset: RuleSet | None = None,
                  classes: Iterable[str] = (), seconds_per_class: float = 10.0,
                  seed: int = 0) -> list[Proposal]:
    """Candidate rules for classes with at least `model.min_members` structured members and
    no rule (or for the named `classes`), learned from the ontology's own structures.

    Two sources of candidates: atom environments frequent among the members and rare
    outside (combined greedily into any_of / none_of lists), and a maximum common
    substructure of a sample of members. Every candidate is then matched with RDKit over
    all structured terms, and its figures are what that matching gives.
    """
    import random
    import time

    import numpy as np

    from parentage.chem.smarts import common_substructure, environments_of

    smiles = structured_terms(ontology, config)
    ids = sorted(smiles)
    named = list(dict.fromkeys(classes))
    for cls in named:
        if cls not in ontology.terms:
            raise ParentageError(f"class {cls} is not in the ontology")
    lineage = [ontology.ancestors(t) for t in ids]
    member_count: dict[str, int] = {}
    for above in lineage:
        for cls in above:
            member_count[cls] = member_count.get(cls, 0) + 1
    ruled = set(ruleset.classes()) if ruleset is not None else set()
    if named:
        targets = named
    else:
        targets = sorted(c for c, n in member_count.items() if n >= config.model.min_members
                         and c not in ruled and c in ontology.terms and not ontology.terms[c].obsolete)
    if not targets:
        return []
    by_term = environments_of([smiles[t] for t in ids], config.limits)
    postings: dict[str, list[int]] = {}
    for index, envs in enumerate(by_term):
        for env in envs or ():
            postings.setdefault(env, []).append(index)
    masks: dict[str, Any] = {}
    for env, where in postings.items():
        if len(where) >= 2:
            mask = np.zeros(len(ids), dtype=bool)
            mask[where] = True
            masks[env] = mask
    by_term = [{e for e in envs if e in masks} if envs is not None else None for envs in by_term]
    rng = random.Random(seed)
    drafts: list[tuple[str, str, Rule]] = []  # (class, source, rule without kind decided)
    notes: dict[str, str] = {}
    for cls in targets:
        deadline = time.monotonic() + seconds_per_class
        members = np.array([cls in above for above in lineage], dtype=bool)
        if members.sum() < max(2, min(config.model.min_members, len(ids))) and cls not in named:
            continue
        if not members.any():
            notes[cls] = "no structured members"
            continue
        any_of, none_of = _learn(members, masks, by_term, deadline)
        if any_of:
            drafts.append((cls, "atom environments", Rule(cls, "sufficient", tuple(any_of), (), tuple(none_of))))
        left = deadline - time.monotonic()
        member_ids = [ids[i] for i in np.flatnonzero(members)]
        sample = rng.sample(member_ids, min(_MCS_SAMPLE, len(member_ids)))
        if left >= 1.0:
            common = common_substructure([smiles[t] for t in sample], min(left, 5.0), 0.8, config.limits)
            if common:
                drafts.append((cls, "common substructure", Rule(cls, "sufficient", (common,))))
        if not any(d[0] == cls for d in drafts):
            notes[cls] = "no pattern found that is frequent among the members"
    scored = _score(drafts, ids, lineage, [smiles[t] for t in ids], config.limits)
    out = []
    for cls in targets:
        mine = sorted((c for c in scored if c.rule.cls == cls), key=lambda c: -c.f1)
        mine = [c._replace(rule=c.rule._replace(kind=_kind_for(c))) for c in mine]
        term = ontology.terms.get(cls)
        out.append(Proposal(cls, (term.name if term is not None else None) or "", member_count.get(cls, 0),
                            tuple(mine), notes.get(cls, "")))
    return out


def _score(drafts: Sequence[tuple[str, str, Rule]], ids: Sequence[str], lineage: Sequence[frozenset[str]],
           structures: Sequence[str], limits: Limits) -> list[Candidate]:
    """Figures of each draft rule from RDKit matching over every structured term."""
    if not drafts:
        return []
    ruleset = RuleSet(rule for _, _, rule in drafts)
    # First the any_of patterns everywhere, then the none_of patterns where those matched.
    any_patterns = sorted({ruleset.pattern_of[t] for r in ruleset.rules for t in r.any_of})
    outcomes = match_many(ruleset.patterns, list(structures), [any_patterns] * len(structures), limits,
                          evidence=False, elements=False)
    need: list[set[int]] = []
    for outcome in outcomes:
        extra: set[int] = set()
        for rule in ruleset.rules:
            if rule.none_of and any(ruleset.pattern_of[t] in outcome.hits for t in rule.any_of):
                extra.update(ruleset.pattern_of[t] for t in rule.none_of)
        need.append(extra)
    if any(need):
        more = match_many(ruleset.patterns, list(structures), need, limits, evidence=False, elements=False)
        outcomes = [o._replace(hits=o.hits | m.hits) for o, m in zip(outcomes, more)]
    out = []
    for index, (cls, source, rule) in enumerate(drafts):
        inside = outside = members = 0
        for outcome, above in zip(outcomes, lineage):
            member = cls in above
            members += member
            if outcome.error is None and ruleset.holds_quickly(index, outcome):
                inside += member
                outside += not member
        out.append(Candidate(rule, source, members, inside, outside))
    return out
