"""The hierarchy checks: is each term's place in the is_a hierarchy well formed?

No structure is read here, so a change that only moves classes never loads RDKit.
"""
from __future__ import annotations

from collections import deque
from collections.abc import Iterable

from parentage.findings import Finding
from parentage.snapshot import Ontology, Term
from parentage.tiers import live_terms as _live
from parentage.tiers import term_finding as _finding

# -- hierarchy checks -------------------------------------------------------------------------

def _path_back(ontology: Ontology, start: str, goal: str) -> list[str] | None:
    """Shortest is_a path start -> ... -> goal (breadth first), or None."""
    before: dict[str, str | None] = {start: None}
    queue = deque([start])
    while queue:
        current = queue.popleft()
        if current == goal:
            path = [current]
            while (step := before[path[-1]]) is not None:
                path.append(step)
            return path[::-1]
        term = ontology.terms.get(current)
        for parent in term.parents if term is not None else ():
            if parent not in before:
                before[parent] = current
                queue.append(parent)
    return None


def _cycles(ontology: Ontology, term: Term) -> list[list[str]]:
    """One shortest cycle through `term` for each parent that leads back to it."""
    if term.id not in ontology.ancestors(term.id):
        return []
    found = []
    for parent in dict.fromkeys(term.parents):
        path = [term.id] if parent == term.id else _path_back(ontology, parent, term.id)
        if path is not None:
            found.append([term.id] + path)
    return found


def hierarchy_findings(ontology: Ontology, term_ids: Iterable[str]) -> list[Finding]:
    """Cycles, dangling or obsolete parents, and redundant parents of the listed live terms."""
    out: list[Finding] = []
    terms = ontology.terms
    for term in _live(ontology, term_ids):
        for cycle in _cycles(ontology, term):
            out.append(_finding(ontology, term, "hierarchy-cycle",
                                f"is_a cycle: {' -> '.join(cycle)}", tuple(cycle[1:-1]) or (term.id,),
                                cycle=cycle))
        references = [("is_a", p) for p in term.parents] + list(term.relationships)
        for clause, target in dict.fromkeys(references):
            target_term = terms.get(target)
            if target_term is None:
                out.append(_finding(ontology, term, "parent-dangling",
                                    f"{clause} {target}: {target} is not defined", (target,),
                                    clause=clause, target=target))
            elif target_term.obsolete:
                replacement = target_term.replaced_by or target_term.consider
                hint = f" (replaced by {', '.join(replacement)})" if replacement else ""
                out.append(_finding(ontology, term, "parent-obsolete",
                                    f"{clause} {target}: {target} is obsolete{hint}", (target,),
                                    clause=clause, target=target,
                                    replaced_by=list(target_term.replaced_by)))
        out += _redundant(ontology, term)
    return out


def _redundant(ontology: Ontology, term: Term) -> list[Finding]:
    parents = list(dict.fromkeys(term.parents))
    out = []
    for parent in parents:
        # Parents that imply each other lie on a cycle, which is reported as one.
        by = [other for other in parents if other != parent
              and parent in ontology.ancestors(other) and other not in ontology.ancestors(parent)]
        if by:
            out.append(_finding(ontology, term, "parent-redundant",
                                f"is_a {parent} is already implied by is_a {by[0]}"
                                + (f" (and {', '.join(by[1:])})" if by[1:] else ""),
                                (parent,), parent=parent, implied_by=by))
    return out
