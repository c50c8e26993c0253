"""Snapshots: OBO and OBO Graphs JSON into our records, line spans, dangling references, cycles,
malformed input, and the incremental build."""
from __future__ import annotations

import json
from collections.abc import Callable

import fastobo
import pytest

from parentage import parse
from parentage.errors import ParentageError
from parentage.parse import parse_ontology_text
from parentage.snapshot import Snapshot, Term

DOC = """\
format-version: 1.4
ontology: qqx
remark: invented for tests

[Term]
id: QQX:0000001
name: chemical entity

[Term]
id: QQX:0000002
name: carboxylic acid
is_a: QQX:0000001
disjoint_from: QQX:0000004

[Term]
id: QQX:0000003
name: acetic acid
is_a: QQX:0000002
is_a: QQX:0000009
synonym: "ethanoic acid" EXACT []
xref: CAS:64-19-7
property_value: QQX:smiles "CC(=O)O" xsd:string
relationship: QQX:has_role QQX:0000005
comment: a curated example

[Typedef]
id: QQX:has_role
name: has role

[Term]
id: QQX:0000004
name: alcohol
is_a: QQX:0000001

[Term]
id: QQX:0000005
name: old solvent
is_obsolete: true
replaced_by: QQX:0000003
consider: QQX:0000004
"""


def line_of(text: str, needle: str) -> int:
    """1-based number of the first line that equals `needle` (a plain line scan)."""
    return text.split("\n").index(needle) + 1


def line_containing(text: str, needle: str) -> int:
    return next(n for n, line in enumerate(text.split("\n"), 1) if needle in line)


def full(text: str, path: str = "qqx.obo") -> Snapshot:
    return parse_ontology_text(text, path)


def test_terms_become_records() -> None:
    snap = full(DOC)
    assert list(snap.terms) == [f"QQX:000000{n}" for n in range(1, 6)]
    acid = snap.terms["QQX:0000003"]
    assert acid.name == "acetic acid"
    assert acid.parents == ("QQX:0000002", "QQX:0000009")
    assert acid.relationships == (("QQX:has_role", "QQX:0000005"),)
    assert acid.synonyms == (("ethanoic acid", "EXACT", "", ""),)  # (text, scope, type, xrefs)
    assert acid.xrefs == ("CAS:64-19-7",)
    assert acid.properties == (("QQX:smiles", "CC(=O)O"),)
    assert acid.other == (("comment", "a curated example"),)
    assert (acid.line, acid.end_line) == (line_of(DOC, "id: QQX:0000003") - 1,
                                          line_of(DOC, "comment: a curated example"))
    assert snap.terms["QQX:0000002"].disjoint_from == ("QQX:0000004",)
    old = snap.terms["QQX:0000005"]
    assert (old.obsolete, old.replaced_by, old.consider) == (True, ("QQX:0000003",), ("QQX:0000004",))
    assert [t.id for t in snap.live()] == [f"QQX:000000{n}" for n in range(1, 5)]
    assert snap.header == (("format-version", "1.4"), ("ontology", "qqx"),
                           ("remark", "invented for tests"))


def test_records_agree_with_fastobo() -> None:
    # Reference: fastobo's own reading of the same document (ids, names, is_a targets).
    frames = [f for f in fastobo.loads(DOC) if isinstance(f, fastobo.term.TermFrame)]
    expected = {str(f.id): ([str(c.name) for c in f if isinstance(c, fastobo.term.NameClause)],
                            [str(c.term) for c in f if isinstance(c, fastobo.term.IsAClause)])
                for f in frames}
    got = {t.id: ([t.name], list(t.parents)) for t in full(DOC).terms.values()}
    assert got == expected


def test_dangling_references_are_kept() -> None:
    snap = full(DOC)
    assert "QQX:0000009" not in snap
    assert snap.terms["QQX:0000003"].parents[1] == "QQX:0000009"
    assert sorted((t.id, clause, target) for t, clause, target in snap.dangling()) == [
        ("QQX:0000003", "is_a", "QQX:0000009")]
    assert snap.ancestors("QQX:0000003") == {"QQX:0000001", "QQX:0000002", "QQX:0000009"}
    assert snap.descendants("QQX:0000001") == {"QQX:0000002", "QQX:0000003", "QQX:0000004"}
    assert snap.ancestors("QQX:0000404") == frozenset()


CYCLE = """\
[Term]
id: QQX:0000001
name: a
is_a: QQX:0000003

[Term]
id: QQX:0000002
name: b
is_a: QQX:0000001

[Term]
id: QQX:0000003
name: c
is_a: QQX:0000002

[Term]
id: QQX:0000004
name: below the cycle
is_a: QQX:0000003

[Term]
id: QQX:0000005
name: its own parent
is_a: QQX:0000005
"""


def test_ancestors_are_safe_on_cycles() -> None:
    snap = full(CYCLE)
    loop = {"QQX:0000001", "QQX:0000002", "QQX:0000003"}
    for tid in sorted(loop):
        assert snap.ancestors(tid) == loop
    assert snap.ancestors("QQX:0000004") == loop
    assert snap.ancestors("QQX:0000005") == {"QQX:0000005"}
    assert snap.descendants("QQX:0000001") == {"QQX:0000002", "QQX:0000003", "QQX:0000004"}
    # Memoised answers stay right when asked in another order.
    fresh = full(CYCLE)
    assert fresh.ancestors("QQX:0000004") == loop
    assert fresh.ancestors("QQX:0000002") == loop


def test_store_form_round_trips() -> None:
    snap = full(DOC)
    again = Snapshot.from_json(json.loads(json.dumps(snap.to_json())))
    assert list(again.terms.values()) == list(snap.terms.values())
    assert again.header == snap.header
    assert (again.path, again.blob) == (snap.path, snap.blob)


# -- malformed input -------------------------------------------------------------------------

BAD_LINE = "is_a QQX:0000001"


def _fastobo_line(text: str) -> int:
    # Reference: fastobo, the OBO syntax reference, on the whole original document.
    with pytest.raises(SyntaxError) as caught:
        fastobo.loads(text)
    assert caught.value.lineno is not None
    return caught.value.lineno


def test_malformed_obo_full_parse_names_the_line() -> None:
    bad = DOC.replace("name: alcohol\nis_a: QQX:0000001", f"name: alcohol\n{BAD_LINE}")
    expected = line_of(bad, BAD_LINE)
    assert _fastobo_line(bad) == expected
    with pytest.raises(ParentageError) as caught:
        full(bad)
    assert str(caught.value).startswith(f"qqx.obo:{expected}: ")
    assert "\n" not in str(caught.value)


def test_malformed_obo_incremental_parse_names_the_line() -> None:
    base = full(DOC)
    head = (DOC.replace("name: carboxylic acid", "name: carboxylic acids")
            + "\n[Term]\nid: QQX:0000006\nname: ketone\nis_a: QQX:0000001\n"
            + f"\n[Term]\nid: QQX:0000007\nname: aldehyde\n{BAD_LINE}\n")
    expected = line_of(head, BAD_LINE)
    assert _fastobo_line(head) == expected
    for by_digest, build in ((False, "compared"), (True, "incremental")):
        before = dict(parse.PARSE_CALLS)
        with pytest.raises(ParentageError) as caught:
            parse_ontology_text(head, "qqx.obo", base=base, by_digest=by_digest)
        assert parse.PARSE_CALLS[build] == before[build] + 1
        assert str(caught.value).startswith(f"qqx.obo:{expected}: ")


def test_malformed_header_names_the_line() -> None:
    bad = DOC.replace("remark: invented for tests", "remark invented for tests")
    with pytest.raises(ParentageError) as caught:
        full(bad)
    assert str(caught.value).startswith(f"qqx.obo:{line_of(bad, 'remark invented for tests')}: ")


def test_not_utf8_is_a_clear_error() -> None:
    with pytest.raises(ParentageError, match=r"^qqx\.obo: not UTF-8"):
        parse.decode(DOC.encode("utf-8") + b"\xff\xfe", "qqx.obo")


def test_misspelled_stanza_header_is_an_error() -> None:
    bad = DOC.replace("[Term]\nid: QQX:0000004", "[Trem]\nid: QQX:0000004")
    expected = line_of(bad, "[Trem]")
    assert _fastobo_line(bad) == expected
    with pytest.raises(ParentageError) as caught:
        full(bad)
    assert str(caught.value).startswith(f"qqx.obo:{expected}: ")


def test_line_separator_inside_a_value_is_kept() -> None:
    text = DOC.replace("name: alcohol", "name: alco\u2028hol")
    # Reference: fastobo reads the document and keeps the character in the name.
    names = [str(c.name) for f in fastobo.loads(text) if isinstance(f, fastobo.term.TermFrame)
             for c in f if isinstance(c, fastobo.term.NameClause)]
    assert "alco\u2028hol" in names
    assert full(text).terms["QQX:0000004"].name == "alco\u2028hol"


# -- OBO Graphs JSON -----------------------------------------------------------------------

PURL = "http://purl.obolibrary.org/obo/"

GRAPH = {"graphs": [{
    "id": PURL + "qqx.owl",
    "nodes": [
        {"id": PURL + "QQX_0000001", "lbl": "chemical entity", "type": "CLASS"},
        {"id": PURL + "QQX_0000003", "lbl": "acetic acid", "type": "CLASS", "meta": {
            "synonyms": [{"pred": "hasExactSynonym", "val": "ethanoic acid"}],
            "xrefs": [{"val": "CAS:64-19-7"}],
            "basicPropertyValues": [{"pred": PURL + "QQX_smiles", "val": "CC(=O)O"}]}},
        {"id": PURL + "QQX_0000005", "lbl": "old solvent", "type": "CLASS", "meta": {
            "deprecated": True,
            "basicPropertyValues": [{"pred": PURL + "IAO_0100001", "val": PURL + "QQX_0000003"}]}},
        {"id": PURL + "QQX_has_role", "lbl": "has role", "type": "PROPERTY"},
    ],
    "edges": [
        {"sub": PURL + "QQX_0000003", "pred": "is_a", "obj": PURL + "QQX_0000001"},
        {"sub": PURL + "QQX_0000003", "pred": "is_a", "obj": PURL + "QQX_0000009"},
        {"sub": PURL + "QQX_0000003", "pred": PURL + "QQX_has_role", "obj": PURL + "QQX_0000005"},
    ],
}]}

GRAPH_AS_OBO = """\
format-version: 1.4

[Term]
id: QQX:0000001
name: chemical entity

[Term]
id: QQX:0000003
name: acetic acid
is_a: QQX:0000001
is_a: QQX:0000009
synonym: "ethanoic acid" EXACT []
xref: CAS:64-19-7
property_value: QQX:smiles "CC(=O)O" xsd:string
relationship: QQX:has_role QQX:0000005

[Term]
id: QQX:0000005
name: old solvent
is_obsolete: true
replaced_by: QQX:0000003
"""


def _content(term: Term) -> Term:
    return term._replace(line=0, end_line=0, digest="", other=(), content="")


def test_obo_graphs_json_gives_the_same_records_as_obo() -> None:
    text = json.dumps(GRAPH, indent=2)
    from_json = parse_ontology_text(text, "qqx.json")
    from_obo = full(GRAPH_AS_OBO)
    assert [_content(t) for t in from_json.terms.values()] == [
        _content(t) for t in from_obo.terms.values()]
    # Lines point at each node's "id" in the JSON text.
    assert from_json.terms["QQX:0000003"].line == line_containing(text, f'"id": "{PURL}QQX_0000003"')
    assert [target for _, _, target in from_json.dangling()] == ["QQX:0000009"]


def test_malformed_json_names_the_line() -> None:
    text = json.dumps(GRAPH, indent=2).replace('"lbl": "acetic acid",', '"lbl": "acetic acid",,')
    with pytest.raises(ParentageError) as caught:
        parse_ontology_text(text, "qqx.json")
    bad_line = line_containing(text, '"lbl": "acetic acid",,')
    assert str(caught.value).startswith(f"qqx.json:{bad_line}: ")


# -- incremental build ----------------------------------------------------------------------

def _add_on_top(text: str) -> str:
    return text.replace("[Term]\nid: QQX:0000001", "[Term]\nid: QQX:0000000\nname: top\n\n"
                        "[Term]\nid: QQX:0000001", 1)


def _reverse_terms(text: str) -> str:
    head, *stanzas = text.split("\n\n")
    return "\n\n".join([head, *reversed(stanzas)]) + "\n"


EDITS = [
    pytest.param(lambda t: t.replace("name: alcohol", "name: alcohols"), id="edit-name"),
    pytest.param(_add_on_top, id="insert-at-top-shifts-lines"),
    pytest.param(lambda t: t.replace("[Term]\nid: QQX:0000002\nname: carboxylic acid\n"
                                     "is_a: QQX:0000001\ndisjoint_from: QQX:0000004\n\n", ""),
                 id="remove-term"),
    pytest.param(_reverse_terms, id="reorder-stanzas"),
    pytest.param(lambda t: t.replace("remark: invented for tests", "remark: changed"), id="header"),
    pytest.param(lambda t: t + "\n[Term]\nid: QQX:0000001\nname: chemical entity, again\n",
                 id="duplicate-id"),
    pytest.param(lambda t: t.replace("\n\n", "\n\n\n"), id="blank-lines"),
    pytest.param(lambda t: t.replace("\n", "\r\n"), id="crlf"),
    pytest.param(lambda t: t.replace("[Typedef]\nid: QQX:has_role\nname: has role\n\n", ""),
                 id="remove-typedef"),
]


@pytest.mark.parametrize("change", EDITS)
def test_incremental_build_equals_full_parse(change: Callable[[str], str]) -> None:
    new = change(DOC)
    assert new != DOC
    base = full(DOC)
    whole = full(new)
    for by_digest, build in ((False, "compared"), (True, "incremental")):
        before = dict(parse.PARSE_CALLS)
        incremental = parse_ontology_text(new, "qqx.obo", base=base, by_digest=by_digest)
        assert parse.PARSE_CALLS[build] == before[build] + 1
        assert parse.PARSE_CALLS["full"] == before["full"]
        assert list(incremental.terms.values()) == list(whole.terms.values())
        assert incremental.header == whole.header


HEADER_EDITS = [
    pytest.param("remark: invented for tests\n! a note\n", id="comment-line-in-header"),
    pytest.param("remark : invented for tests\n", id="space-before-colon"),
]


@pytest.mark.parametrize("header", HEADER_EDITS)
def test_incremental_header_agrees_with_full_parse(header: str) -> None:
    new = DOC.replace("remark: invented for tests\n", header)
    base = full(DOC)
    outcomes: list[object] = []
    for build in (lambda: full(new), lambda: parse_ontology_text(new, "qqx.obo", base=base)):
        try:
            outcomes.append(build().header)
        except ParentageError as exc:
            outcomes.append(str(exc))
    assert outcomes[0] == outcomes[1]


def test_mentioning_finds_every_reference_without_decoding() -> None:
    # A stored table (rows still JSON text) must name each term that refers to a removed id,
    # through is_a or through a relationship kept only in the row; decoding every term is the
    # reference answer it must agree with.
    text = ("[Term]\nid: QQX:1\nname: a\n\n[Term]\nid: QQX:2\nname: b\nis_a: QQX:1\n\n"
            "[Term]\nid: QQX:3\nname: c\nrelationship: has_part QQX:1\n\n"
            "[Term]\nid: QQX:4\nname: d\n")
    stored = Snapshot.from_json(json.loads(json.dumps(full(text).to_json())))
    found = set(stored.terms.mentioning({"QQX:1"}))
    expected = {t.id for t in full(text).terms.values()
                if any(target == "QQX:1" for _, target in t.references())}
    assert expected == {"QQX:2", "QQX:3"}
    assert expected <= found
    assert "QQX:4" not in found


@pytest.mark.parametrize("chunk", [1, 7])
def test_parsing_in_chunks_changes_nothing(chunk: int, monkeypatch: pytest.MonkeyPatch) -> None:
    """fastobo sees a big file in chunks (memory); terms and the first error's line agree with
    one chunk. Reference for the error: fastobo on the whole document."""
    from parentage import _obo

    text = "format-version: 1.2\n" + "".join(f"\n[Term]\nid: QQX:{n:07d}\nname: t{n}\n" for n in range(30))
    bad = text + f"\n[Term]\nid: QQX:0000099\n{BAD_LINE}\n" + "".join(
        f"\n[Term]\nid: QQX:{n:07d}\nname: u{n}\n" for n in range(100, 110))
    whole = full(text)
    monkeypatch.setattr(_obo, "PARSE_CHUNK", chunk)
    assert list(full(text).terms.values()) == list(whole.terms.values())
    with pytest.raises(ParentageError) as caught:
        full(bad)
    assert str(caught.value).startswith(f"qqx.obo:{_fastobo_line(bad)}: ")


def test_head_built_on_a_built_head_equals_full_parse(monkeypatch: pytest.MonkeyPatch) -> None:
    """Commit after commit, each head is built from the previous derived one (as the commit
    path does); every step, and its stored form read back, equals a full parse."""
    monkeypatch.setattr(parse, "BLOCK", 2)  # several blocks in a small document
    steps = [DOC]
    changes: list[Callable[[str], str]] = [
        lambda t: t.replace("name: alcohol", "name: alcohols"), _add_on_top,
        lambda t: t.replace("[Term]\nid: QQX:0000002\nname: carboxylic acid\n", "[Term]\nid: QQX:0000002\n"),
        _reverse_terms,
        lambda t: t + "\n[Term]\nid: QQX:0000042\nname: late\nis_a: QQX:0000001\n"]
    for change in changes:
        steps.append(change(steps[-1]))
    previous = full(steps[0])
    for text in steps[1:]:
        built = parse_ontology_text(text, "qqx.obo", "b", previous)
        whole = full(text)
        again = Snapshot.from_json(json.loads(json.dumps(built.to_json())), previous)
        for snap in (built, again):
            assert list(snap.terms.values()) == list(whole.terms.values())
            assert snap.layout == whole.layout and snap.disjoint == whole.disjoint
        assert built.depth == previous.depth + 1
        previous = built
