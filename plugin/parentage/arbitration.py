"""Turn the tiers' verdicts on one term into findings.

The rules, in order of authority:
1. A rule verdict outranks a model verdict. A necessary or defining rule of an asserted class
   (or any of its ancestors) that the structure fails is `rule-violated`.
2. A model verdict counts only for classes whose cross-validated trust F1 reaches
   `model.min_f1` (the caller passes the figures; see `ClassFigures.trust_f1`).
3. `parent-unsupported`: an asserted parent that no rule supports and that the trusted model is
   confidently against, itself or through an ancestor that no rule supports (a member of a
   class is a member of its ancestors; a rule that opposes is already `rule-violated`).
4. `tiers-disagree`: a rule supports a class the trusted model is confidently against (the
   rule wins; the note says so). Where a rule says no, it has already decided.
5. `parent-suggested`: the most specific classes that a sufficient/defining rule or the
   trusted model supports (a necessary rule that holds is no evidence), that the asserted parents do not already imply, that no rule
   opposes and that no disjointness axiom forbids — at most `max_suggestions`, rule-backed
   first, then by probability.
"""
from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from parentage.findings import Finding
from parentage.snapshot import Ontology
from parentage.tiers import Verdict


def _name(ontology: Ontology, tid: str) -> str:
    term = ontology.terms.get(tid)
    return f"{tid} ({term.name})" if term is not None and term.name else tid


def disjoint_findings(ontology: Ontology, term_ids: Iterable[str]) -> list[Finding]:
    """`disjoint-violated`: a term that is (or descends from) both sides of a disjoint_from."""
    out = []
    for tid in term_ids:
        term = ontology.terms.get(tid)
        if term is None or term.obsolete:
            continue
        lineage = ontology.ancestors(tid) | {tid}
        seen: set[tuple[str, str]] = set()
        for cls in sorted(lineage):
            for other in ontology.disjoint_of(cls):
                pair = (min(cls, other), max(cls, other))
                if other in lineage and pair not in seen:
                    seen.add(pair)
                    out.append(Finding(
                        "disjoint-violated", tid,
                        f"is a member of {_name(ontology, pair[0])} and of {_name(ontology, pair[1])}, "
                        "which are declared disjoint",
                        classes=pair, tiers=("structure",),
                        evidence={"axiom_on": cls}, path=ontology.path_of.get(tid, ""),
                        line=term.line))
    return out


def _evidence(**verdicts: Verdict | None) -> dict[str, Any]:
    """Each speaking tier's evidence under its name; silent tiers are left out."""
    return {tier: dict(v.evidence) for tier, v in verdicts.items() if v is not None}


def _sufficient(verdict: Verdict) -> bool:
    """A supporting rule verdict that implies the class (sufficient, defining, or implied)."""
    return verdict.evidence.get("kind") in ("sufficient", "defining") or "implied_by" in verdict.evidence


def _against_ancestor(ontology: Ontology, cls: str, rules: Mapping[str, Verdict],
                      model: Mapping[str, Verdict]) -> Verdict | None:
    """The trusted model's most confident opposition to an ancestor of `cls` that no rule
    supports: a member of a class is a member of its ancestors."""
    against = [v for a, v in model.items() if v.opinion == "opposes" and a in ontology.ancestors(cls)
               and (a not in rules or rules[a].opinion != "supports")]
    return min(against, key=lambda v: (v.evidence.get("probability", 0.0), v.cls)) if against else None


def arbitrate(ontology: Ontology, tid: str, rule_verdicts: Iterable[Verdict],
              model_verdicts: Iterable[Verdict], class_f1: Mapping[str, float],
              min_f1: float, max_suggestions: int) -> list[Finding]:
    term = ontology.terms[tid]
    path, line = ontology.path_of.get(tid, ""), term.line
    lineage = ontology.ancestors(tid)
    asserted = set(term.parents)
    rules: dict[str, Verdict] = {}
    for v in rule_verdicts:
        # An opposing rule outranks a supporting one for the same class.
        if v.cls not in rules or v.opinion == "opposes":
            rules[v.cls] = v
    model: dict[str, Verdict] = {v.cls: v for v in model_verdicts
                                 if v.cls and v.opinion in ("supports", "opposes")
                                 and class_f1.get(v.cls, 0.0) >= min_f1}
    out: list[Finding] = []

    def finding(kind: str, classes: tuple[str, ...], tiers: tuple[str, ...], message: str,
                evidence: dict[str, Any]) -> None:
        out.append(Finding(kind, tid, message, classes, tiers, evidence, path, line))

    for cls in sorted(lineage):
        rule = rules.get(cls)
        if rule is not None and rule.opinion == "opposes":
            finding("rule-violated", (cls,), ("rule",),
                    f"is filed under {_name(ontology, cls)} but fails its "
                    f"{rule.evidence.get('kind', '')} rule".replace("  ", " "),
                    _evidence(rule=rule, model=model.get(cls)))
    for cls in sorted(asserted):
        rule, guess = rules.get(cls), model.get(cls)
        if rule is not None:
            continue
        where = ""
        if guess is None or guess.opinion != "opposes":
            guess = _against_ancestor(ontology, cls, rules, model)
            if guess is None:
                continue
            where = f" to its ancestor {_name(ontology, guess.cls)}"
        finding("parent-unsupported", (cls,), ("model",),
                f"is filed under {_name(ontology, cls)}, but no rule supports it and the "
                f"model is confident it does not belong{where} "
                f"(p={guess.evidence.get('probability', 0):.2f})",
                _evidence(model=guess))
    for cls in sorted(set(rules) & set(model)):
        rule, guess = rules[cls], model[cls]
        # Only a rule that says yes against a model that says no is worth a note: where a
        # rule says no, the rule has already decided (rule-violated, or no suggestion).
        if rule.opinion != "supports" or guess.opinion != "opposes":
            continue
        finding("tiers-disagree", (cls,), ("rule", "model"),
                f"the rule tier supports {_name(ontology, cls)} but the model opposes it "
                f"(p={guess.evidence.get('probability', 0):.2f}); the rule decides",
                _evidence(rule=rule, model=guess))
    # Suggestions: supported, not implied, not forbidden.
    forbidden: set[str] = set()
    for cls in lineage | {tid}:
        forbidden.update(ontology.disjoint_of(cls))
    candidates: dict[str, tuple[int, float]] = {}
    for cls in set(rules) | set(model):
        if cls == tid or cls in lineage or cls in forbidden or cls not in ontology.terms:
            continue
        if ontology.terms[cls].obsolete:
            continue
        rule, guess = rules.get(cls), model.get(cls)
        if rule is not None and rule.opinion == "opposes":
            continue
        # A necessary rule that holds is consistent with the class, not evidence for it.
        rule_backed = rule is not None and rule.opinion == "supports" and _sufficient(rule)
        model_backed = guess is not None and guess.opinion == "supports"
        if rule_backed or model_backed:
            prob = float(guess.evidence.get("probability", 0.0)) if guess is not None else 0.0
            candidates[cls] = (0 if rule_backed else 1, -prob)
    # Only the most specific: drop a candidate that is an ancestor of another candidate, or of
    # the term's own classes' suggestions.
    specific = [c for c in candidates
                if not any(c in ontology.ancestors(o) for o in candidates if o != c)]
    specific.sort(key=lambda c: (candidates[c], c))
    for cls in specific[:max_suggestions]:
        rule, guess = rules.get(cls), model.get(cls)
        tiers = tuple(t for t, v in (("rule", rule), ("model", guess))
                      if v is not None and v.opinion == "supports" and (t == "model" or _sufficient(v)))
        finding("parent-suggested", (cls,), tiers,
                f"its structure supports the more specific class {_name(ontology, cls)} "
                f"({' and '.join(tiers)}), which its parents do not imply",
                _evidence(rule=rule, model=guess))
    return out
