"""OBO Graphs JSON -> our records. Private: only `parse.py` imports it.

The format is plain JSON (nodes, edges, meta), so the standard library reads it; IRIs of the
OBO PURL form become CURIEs (`.../obo/ABC_123` -> `ABC:123`), as the OBO mapping does.
"""
from __future__ import annotations

import hashlib
import json
import re
from typing import Any

from parentage.errors import ParentageError
from parentage.snapshot import Term

_PURL = re.compile(r"^https?://purl\.obolibrary\.org/obo/([A-Za-z][A-Za-z0-9]*)_(\S+)$")
_SCOPES = {"hasExactSynonym": "EXACT", "hasBroadSynonym": "BROAD",
           "hasNarrowSynonym": "NARROW", "hasRelatedSynonym": "RELATED"}
_REPLACED = ("http://purl.obolibrary.org/obo/IAO_0100001", "replaced_by")
_CONSIDER = ("http://www.geneontology.org/formats/oboInOwl#consider", "consider")


def curie(iri: str) -> str:
    found = _PURL.match(iri)
    return f"{found.group(1)}:{found.group(2)}" if found else iri


def _short(pred: str) -> str:
    return curie(pred).rsplit("#", 1)[-1]


def parse_json(text: str, path: str) -> list[Term]:
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ParentageError(f"{path}:{exc.lineno}: malformed OBO Graphs JSON: {exc.msg}") from None
    graphs = data.get("graphs") if isinstance(data, dict) else None
    if not isinstance(graphs, list):
        raise ParentageError(f"{path}: malformed OBO Graphs JSON: no 'graphs' list")
    line_of: dict[str, int] = {}
    for number, line in enumerate(text.splitlines(), 1):
        found = re.search(r'"id"\s*:\s*"([^"]+)"', line)
        if found and found.group(1) not in line_of:
            line_of[found.group(1)] = number
    terms: list[Term] = []
    for graph in graphs:
        if not isinstance(graph, dict):
            continue
        edges: dict[str, list[tuple[str, str]]] = {}
        for edge in graph.get("edges") or []:
            if isinstance(edge, dict) and {"sub", "pred", "obj"} <= edge.keys():
                edges.setdefault(str(edge["sub"]), []).append((str(edge["pred"]), str(edge["obj"])))
        for node in graph.get("nodes") or []:
            if isinstance(node, dict) and node.get("type", "CLASS") == "CLASS" and "id" in node:
                terms.append(_term(node, edges.get(str(node["id"]), []), line_of))
    return terms


def _term(node: dict[str, Any], edges: list[tuple[str, str]], line_of: dict[str, int]) -> Term:
    iri = str(node["id"])
    meta = node.get("meta") or {}
    parents, relationships = [], []
    for pred, obj in edges:
        if pred in ("is_a", "rdfs:subClassOf", "http://www.w3.org/2000/01/rdf-schema#subClassOf"):
            parents.append(curie(obj))
        else:
            relationships.append((_short(pred), curie(obj)))
    synonyms = tuple((str(s.get("val", "")), _SCOPES.get(str(s.get("pred")), "RELATED"),
                      str(s.get("synonymType") or ""), " ".join(map(str, s.get("xrefs") or [])))
                     for s in meta.get("synonyms") or [] if isinstance(s, dict))
    xrefs = tuple(str(x.get("val", "")) for x in meta.get("xrefs") or [] if isinstance(x, dict))
    properties, replaced, consider = [], [], []
    for pv in meta.get("basicPropertyValues") or []:
        if not isinstance(pv, dict):
            continue
        pred, val = str(pv.get("pred", "")), str(pv.get("val", ""))
        if pred in _REPLACED:
            replaced.append(curie(val))
        elif pred in _CONSIDER:
            consider.append(curie(val))
        else:
            properties.append((_short(pred), val))
    other = []
    definition = meta.get("definition")
    if isinstance(definition, dict) and "val" in definition:
        other.append(("def", str(definition["val"])))
    raw = json.dumps([node, sorted(edges)], sort_keys=True)
    digest = hashlib.blake2b(raw.encode(), digest_size=16).hexdigest()
    line = line_of.get(iri, 0)
    return Term(curie(iri), node.get("lbl"), tuple(parents), tuple(relationships), (),
                bool(meta.get("deprecated", False)), tuple(replaced), tuple(consider), synonyms,
                xrefs, tuple(properties), tuple(other), line, line, digest)
