"""An incremental snapshot (base reused, only new stanzas parsed) equals a full parse.

Random OBO documents are edited at random: stanzas added, removed, modified (names, parents,
properties, synonyms, obsolescence), duplicated and reordered; blank lines and comment lines
added; the header changed. The head is then built twice: from scratch, and from the base
snapshot (as it comes back from the store, through JSON), once by the digests of every head
stanza and once by comparing runs of head stanzas with the base's block digests (that head
is stored as segments over its base; read back, it must agree too). Every `Term` field (spans
and digests included), the stanza layout and the header must agree, and when one build rejects the text the other
must reject it with the same message.
"""
from __future__ import annotations

import json
from typing import Any

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from parentage import _obo, parse
from parentage.parse import parse_ontology_text
from parentage.snapshot import Snapshot

PATH = "src/test.obo"
IDS = [f"TST:{n:07d}" for n in range(1, 13)]

ident = st.sampled_from(IDS)
# Free text: mostly plain words, sometimes the characters OBO gives a meaning to.
word = st.text(alphabet="abcdefgh XYZ0123-_.,()", min_size=1, max_size=12).map(str.strip).filter(bool)
tricky = st.text(alphabet='ab \t!{}"\\=:é', min_size=1, max_size=8)
text_value = st.one_of(word, word, word, tricky)


def quoted(value: str) -> str:
    return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'


@st.composite
def clause(draw: st.DrawFn) -> str:
    kind = draw(st.sampled_from(["name", "is_a", "is_a", "relationship", "synonym", "xref",
                                 "property", "property", "obsolete", "replaced_by", "consider",
                                 "disjoint", "def", "comment", "subset"]))
    if kind == "name":
        line = f"name: {draw(text_value)}"
    elif kind == "is_a":
        line = f"is_a: {draw(ident)}"
    elif kind == "relationship":
        line = f"relationship: part_of {draw(ident)}"
    elif kind == "synonym":
        scope = draw(st.sampled_from(["EXACT", "RELATED", "BROAD", "NARROW"]))
        line = f"synonym: {quoted(draw(text_value))} {scope} []"
    elif kind == "xref":
        line = f"xref: DB:{draw(st.integers(0, 99))}"
    elif kind == "property":
        prop = draw(st.sampled_from(["smiles", "inchikey", "mass", "charge"]))
        line = f"property_value: {prop} {quoted(draw(text_value))} xsd:string"
    elif kind == "obsolete":
        line = f"is_obsolete: {draw(st.sampled_from(['true', 'false']))}"
    elif kind == "replaced_by":
        line = f"replaced_by: {draw(ident)}"
    elif kind == "consider":
        line = f"consider: {draw(ident)}"
    elif kind == "disjoint":
        line = f"disjoint_from: {draw(ident)}"
    elif kind == "def":
        line = f"def: {quoted(draw(text_value))} []"
    elif kind == "comment":
        line = f"comment: {draw(text_value)}"
    else:
        line = f"subset: {draw(st.sampled_from(['core', 'extra']))}"
    if draw(st.integers(0, 9)) == 0:
        line += " ! " + draw(word)  # a trailing comment
    return line


@st.composite
def stanza(draw: st.DrawFn) -> list[str]:
    if draw(st.integers(0, 12)) == 0:
        return ["[Typedef]", "id: part_of", "name: part of"]
    head = "[Term]" + draw(st.sampled_from(["", "", "", " ! a stanza comment", " "]))
    return [head, f"id: {draw(ident)}", *draw(st.lists(clause(), max_size=6))]


header_line = st.one_of(
    st.sampled_from(["format-version: 1.2", "format-version: 1.4", "data-version: 2024-01-01",
                     "ontology: tst", "default-namespace: test", "subsetdef: core \"core terms\"",
                     "subsetdef: extra \"extra terms\"", "! a header comment", ""]),
    text_value.map(lambda v: f"remark: {v}"),
)


class Doc:
    """An OBO document as parts: header lines; per stanza, the lines before it and its lines."""

    def __init__(self, header: list[str], stanzas: list[list[str]]) -> None:
        self.header = header
        self.stanzas = [([""], lines) for lines in stanzas]

    def text(self, newline: str = "\n") -> str:
        lines = list(self.header)
        for before, body in self.stanzas:
            lines += before + body
        return newline.join(lines) + newline


@st.composite
def document(draw: st.DrawFn) -> Doc:
    header = draw(st.lists(header_line, max_size=4))
    return Doc(["format-version: 1.2", *header], draw(st.lists(stanza(), max_size=8)))


@st.composite
def edited(draw: st.DrawFn, doc: Doc) -> tuple[Doc, str]:
    """A copy of `doc` with a few random edits, and the newline to write it with."""
    new = Doc(list(doc.header), [])
    new.stanzas = [(list(b), list(s)) for b, s in doc.stanzas]
    for _ in range(draw(st.integers(1, 5))):
        action = draw(st.sampled_from(["add", "remove", "modify", "modify", "reorder", "duplicate",
                                       "blank", "comment", "header", "trailing"]))
        n = len(new.stanzas)
        if action == "add" or (n == 0 and action != "header"):
            at = draw(st.integers(0, n))
            new.stanzas.insert(at, ([""], draw(stanza())))
            continue
        i = draw(st.integers(0, n - 1)) if n else 0
        if action == "remove":
            del new.stanzas[i]
        elif action == "modify":
            before, body = new.stanzas[i]
            body = list(body)
            if len(body) > 2 and draw(st.booleans()):
                del body[draw(st.integers(2, len(body) - 1))]
            if draw(st.booleans()):
                body.insert(draw(st.integers(2, len(body))), draw(clause()))
            if len(body) > 2 and draw(st.booleans()):
                body[draw(st.integers(2, len(body) - 1))] = draw(clause())
            new.stanzas[i] = (before, body)
        elif action == "reorder":
            j = draw(st.integers(0, n - 1))
            new.stanzas[i], new.stanzas[j] = new.stanzas[j], new.stanzas[i]
        elif action == "duplicate":
            new.stanzas.insert(draw(st.integers(0, n)), new.stanzas[i])
        elif action == "blank":
            before, body = new.stanzas[i]
            new.stanzas[i] = (before + [""] * draw(st.integers(1, 3)), body)
        elif action == "comment":
            before, body = new.stanzas[i]
            if draw(st.integers(0, 3)) > 0:  # a trailing comment on a clause
                body = list(body)
                k = draw(st.integers(1, len(body) - 1))
                body[k] += " ! " + draw(word)
                new.stanzas[i] = (before, body)
            elif draw(st.booleans()):
                new.stanzas[i] = (before + ["! " + draw(word)], body)
            else:  # a comment line inside the stanza
                body = list(body)
                body.insert(draw(st.integers(1, len(body))), "! " + draw(word))
                new.stanzas[i] = (before, body)
        elif action == "trailing":
            before, body = new.stanzas[i]
            body = list(body)
            k = draw(st.integers(1, len(body) - 1))
            body[k] = body[k] + draw(st.sampled_from([" ", "\t", "  "]))
            new.stanzas[i] = (before, body)
        else:
            header = list(new.header)
            if len(header) > 1 and draw(st.booleans()):
                del header[draw(st.integers(1, len(header) - 1))]
            else:
                header.insert(draw(st.integers(1, len(header))), draw(header_line))
            new.header = header
    return new, draw(st.sampled_from(["\n", "\n", "\r\n"]))


def build(text: str, base: Snapshot | None, by_digest: bool = False) -> tuple[str, Any]:
    """("ok", snapshot), ("error", message), or ("panic", message) when fastobo panics."""
    try:
        # With the bytes the text came from, as the workspace passes them.
        data = text.encode("utf-8", "surrogatepass")
        return "ok", parse_ontology_text(text, PATH, "blob", base, by_digest, data=data)
    except _obo.OboSyntaxError as exc:
        return "error", str(exc)
    except BaseException as exc:
        # fastobo turns some inputs into a Rust panic, raised as pyo3's PanicException (a
        # BaseException); see test_comment_line_in_a_stanza_is_a_clean_error below.
        if type(exc).__name__ != "PanicException":
            raise
        return "panic", str(exc)


def assert_same(full: Snapshot, incremental: Snapshot) -> None:
    assert incremental.header == full.header
    assert list(incremental.terms) == list(full.terms)  # same ids, same order
    for tid, term in full.terms.items():
        other = incremental.terms[tid]
        for field in term._fields:  # every field, one at a time for a readable failure
            assert getattr(other, field) == getattr(term, field), (tid, field)
        assert type(other.obsolete) is type(term.obsolete)


def check_pair(base_text: str, head_text: str) -> None:
    # Block digests over runs of parse.BLOCK stanzas: the default, and runs short enough that
    # these small documents have several, some copied and some split.
    default = parse.BLOCK
    try:
        for block in (default, 1, 2, 3):
            parse.BLOCK = block
            check_pair_once(base_text, head_text)
    finally:
        parse.BLOCK = default


def check_pair_once(base_text: str, head_text: str) -> None:
    status, base = build(base_text, None)
    if status != "ok":
        return  # an unreadable base is never cached, so there is nothing to reuse
    stored = Snapshot.from_json(base.to_json())  # the base as the store gives it back
    full = build(head_text, None)
    for reused in (base, stored):
        # By comparing runs of stanzas with the base's block digests, and by digests of every
        # head stanza.
        for incremental in (build(head_text, reused), build(head_text, reused, by_digest=True)):
            assert incremental[0] == full[0], (full, incremental)
            if full[0] != "ok":
                assert incremental[1] == full[1]
                continue
            assert_same(full[1], incremental[1])
            assert incremental[1].layout == full[1].layout
            assert incremental[1].disjoint == full[1].disjoint
            if incremental[1].base is not None:
                # A derived head is stored as segments over its base; read back it is the same.
                again = Snapshot.from_json(json.loads(json.dumps(incremental[1].to_json())), reused)
                assert_same(full[1], again)
                assert again.layout == full[1].layout
                assert again.disjoint == full[1].disjoint


@st.composite
def base_and_head(draw: st.DrawFn) -> tuple[str, str]:
    doc = draw(document())
    head, newline = draw(edited(doc))
    return doc.text(), head.text(newline)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(base_and_head())
def test_incremental_snapshot_equals_full_parse(pair: tuple[str, str]) -> None:
    check_pair(*pair)


# Cases worth keeping whatever the generator draws.
CASES = [
    pytest.param("[Term]\nid: TST:1\nname: a\n\n[Term]\nid: TST:2\nname: b\n",
                 "[Term]\nid: TST:2\nname: b\n\n\n\n[Term]\nid: TST:1\nname: a\n",
                 id="reordered, extra blank lines"),
    pytest.param("[Term]\nid: TST:1\nname: a\n",
                 "[Term]\nid: TST:1\nname: a\n\n[Term]\nid: TST:1\nname: a\n",
                 id="duplicate stanza with the same text"),
    pytest.param("format-version: 1.2\n\n[Term]\nid: TST:1\nis_a: TST:2\n",
                 "format-version: 1.2\n\n[Term]\nid: TST:1\nis_a: TST:2 ! now commented\n",
                 id="trailing comment on a clause"),
    pytest.param("[Term]\nid: TST:1\nname: a\n",
                 "[Term]\nid: TST:1\nname: a\n\n[Term]\nid: TST:2\nname: b\nbogus line\n",
                 id="a new malformed stanza"),
    pytest.param("format-version: 1.2\n\n[Term]\nid: TST:1\n",
                 "format-version: 1.2\r\nremark: new\r\n\r\n[Term]\r\nid: TST:1\r\n",
                 id="CRLF and a new header line"),
]


@pytest.mark.parametrize(("base_text", "head_text"), CASES)
def test_incremental_cases(base_text: str, head_text: str) -> None:
    check_pair(base_text, head_text)


@example(("format-version: 1.2\nremark: foo ! old note\n", "format-version: 1.2\nremark: foo\n"))
@example(("format-version: 1.2\nremark: a  b  \n", "format-version: 1.2\nremark: a  b\n"))
@example(("format-version: 1.2\nremark: foo\n", "format-version: 1.2\nremark : foo\n"))
@example(("format-version: 1.2\nremark: foo\n", "format-version: 1.2\nremark: foo\t\n"))
@settings(max_examples=1, deadline=None)
@given(st.just(("format-version: 1.2\nremark: x {source=\"y\"}\n", "format-version: 1.2\nremark: x\n")))
def test_header_reuse_matches_full_parse(pair: tuple[str, str]) -> None:
    check_pair(*pair)


def test_comment_line_in_a_stanza_is_read() -> None:
    # A whole-line comment is allowed by the OBO grammar (fastobo's own grammar lists Comment
    # among a frame's lines), but fastobo panics on it; the adapter drops such lines first.
    text = "[Term]\nid: TST:0000001\n! a comment line\nname: a\n"
    outcome = build(text, None)
    assert outcome[0] == "ok", outcome
    assert outcome[1].terms["TST:0000001"].name == "a"
    assert outcome[1].terms["TST:0000001"].end_line == 4


def test_block_digests_from_bytes_equal_digests_from_text() -> None:
    # The workspace passes the bytes a text was decoded from, and ASCII text is then hashed in
    # place; a base hashed one way must be comparable with a head hashed the other way (a head
    # that gains one non-ASCII name still copies every unchanged run of the base).
    stanzas = [f"[Term]\nid: TST:{n}\nname: term {n}\n" for n in range(3 * parse.BLOCK)]
    base_text = "format-version: 1.2\n\n" + "\n".join(stanzas)
    head_text = base_text + "\n[Term]\nid: TST:new\nname: \u03b1-term\n"
    for text in (base_text, head_text, "\ufeff" + base_text, base_text.replace("\n", "\r\n")):
        plain = parse_ontology_text(text, PATH, "blob")
        from_bytes = parse_ontology_text(text, PATH, "blob", data=text.encode("utf-8"))
        assert from_bytes.layout == plain.layout
    base = parse_ontology_text(base_text, PATH, "blob", data=base_text.encode("ascii"))
    head = parse_ontology_text(head_text, PATH, "blob2", base, data=head_text.encode("utf-8"))
    assert head.base is base
    copied = sum(seg[2] for seg in head.segments if seg[0] == "copy")
    assert copied == 3 * parse.BLOCK  # every base stanza copied, the new one parsed
    assert_same(parse_ontology_text(head_text, PATH, "blob2"), head)
