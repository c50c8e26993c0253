"""The markdown review, read back with markdown-it-py as the CommonMark + GFM-tables reference."""
from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

import pytest
from markdown_it import MarkdownIt
from markdown_it.token import Token

from parentage.findings import Finding, Review
from parentage.report import escape, markdown

# The reference parser: CommonMark with GFM tables, as GitHub renders comments.
MD = MarkdownIt("commonmark").enable("table")
OUR_HTML = re.compile(r"^(<!-- parentage-review -->|<details><summary>[^<>]*</summary>|</details>)\s*$")


def finding(kind: str = "rule-violated", term: str = "DEMO:1", status: str = "new",
            **extra: Any) -> Finding:
    values: dict[str, Any] = {"message": f"{term} fails a rule", "classes": ("DEMO:10",),
                              "tiers": ("rule",), "evidence": {"rule": "rules/a.yaml:3"},
                              "path": "src/compounds.obo", "line": 12, "severity": "", "status": status}
    values.update(extra)
    return Finding(kind, term, **values)


def review(findings: Sequence[Finding], **extra: Any) -> Review:
    values: dict[str, Any] = {
        "base": "main", "head": "abc123", "ontologies": ("src/compounds.obo",),
        "changes": {"added": ("DEMO:1",), "removed": (), "obsoleted": (), "edited": ("DEMO:2",)},
        "edited_fields": {"DEMO:2": ("parents", "structure")}, "affected": ("DEMO:1", "DEMO:2", "DEMO:3"),
        "findings": tuple(findings), "names": {"DEMO:1": "acetic acid", "DEMO:10": "carboxylic acid"},
    }
    values.update(extra)
    return Review(**values)


def cell_text(tok: Token) -> str:
    """What a reader sees in an inline token: text, code and entity-decoded characters."""
    return "".join(c.content for c in tok.children or [] if c.type in ("text", "code_inline", "html_inline"))


def tables(tokens: list[Token]) -> list[list[list[Token]]]:
    """Every table as rows of cells (the inline token of each th/td)."""
    out: list[list[list[Token]]] = []
    row: list[Token] = []
    for i, tok in enumerate(tokens):
        if tok.type == "table_open":
            out.append([])
        elif tok.type == "tr_open":
            row = []
        elif tok.type in ("th_open", "td_open"):
            row.append(tokens[i + 1])
        elif tok.type == "tr_close":
            out[-1].append(row)
    return out


def table_after(tokens: list[Token], heading_text: str) -> list[list[Token]]:
    """The first table after the heading whose text contains `heading_text`."""
    for i, tok in enumerate(tokens):
        if tok.type == "heading_open" and heading_text in cell_text(tokens[i + 1]):
            rest = tables(tokens[i:])
            return rest[0]
    raise AssertionError(f"no heading {heading_text!r}")


def test_marker_title_and_blocking_line() -> None:
    text = markdown.render(review([finding(), finding("parent-suggested", "DEMO:2")]))
    assert text.splitlines()[0] == markdown.MARKER
    tokens = MD.parse(text)
    assert tokens[0].type == "html_block" and tokens[0].content.strip() == markdown.MARKER
    assert cell_text(tokens[2]) == "parentage review of main..abc123"
    # rule-violated is in the default fail_on list; parent-suggested is not.
    assert "**1 new finding blocks this change.**" in text


def test_no_blocking_when_kind_not_in_fail_on() -> None:
    text = markdown.render(review([finding()], fail_on=("annotation-mismatch",)))
    assert "No new finding blocks this change." in text


def test_summary_table_counts_by_kind_and_status() -> None:
    found = [finding(term="DEMO:1"), finding(term="DEMO:2", status="persisting"),
             finding(term="DEMO:3", status="resolved"), finding("parent-suggested", "DEMO:4")]
    tokens = MD.parse(markdown.render(review(found)))
    summary = tables(tokens)[0]
    rows = [[cell_text(c) for c in row] for row in summary]
    assert rows[0] == ["kind", "severity", "new", "persisting", "resolved"]
    assert ["rule-violated", "error", "1", "1", "1"] in rows
    assert ["parent-suggested", "warning", "1", "0", "0"] in rows
    assert len(rows) == 3


def test_section_rows_what_changed_and_advice() -> None:
    found = [finding(term="DEMO:1"), finding(term="DEMO:2", status="persisting"),
             finding(term="DEMO:3"), finding(term="DEMO:9")]
    tokens = MD.parse(markdown.render(review(found)))
    rows = [[cell_text(c) for c in row] for row in table_after(tokens, "rule-violated")]
    assert rows[0] == ["term", "name", "what changed", "finding", "evidence", "what to do", "status"]
    by_term = {r[0].split(" ")[0]: r for r in rows[1:]}
    assert set(by_term) == {"DEMO:1", "DEMO:2", "DEMO:3", "DEMO:9"}
    assert by_term["DEMO:1"][1:3] == ["acetic acid", "added"]
    assert by_term["DEMO:2"][2] == "edited: parents, structure"
    assert by_term["DEMO:3"][2] == "re-checked, not edited"
    assert by_term["DEMO:9"][2] == "not edited"
    assert by_term["DEMO:1"][4] == "tiers=rule; rule=rules/a.yaml:3"
    assert "DEMO:10 (carboxylic acid)" in by_term["DEMO:1"][5]
    assert by_term["DEMO:1"][6] == "new, blocks" and by_term["DEMO:2"][6] == "persisting"
    # New blocking rows come first.
    assert rows[1][6] == "new, blocks"


def test_links_to_file_lines_when_repository_is_known() -> None:
    found = [finding(term="DEMO:1", line=12), finding(term="DEMO:3", status="resolved", line=40,
                                                      path="src/old name.obo")]
    text = markdown.render(review(found), repo_url="https://github.com/o/r", ref="abc123", base_ref="def456")
    hrefs = [c.attrs["href"] for t in MD.parse(text) for c in t.children or [] if c.type == "link_open"]
    assert hrefs == ["https://github.com/o/r/blob/abc123/src/compounds.obo#L12",
                     "https://github.com/o/r/blob/def456/src/old%20name.obo#L40"]


def test_no_links_without_repository() -> None:
    text = markdown.render(review([finding()]))
    assert not [c for t in MD.parse(text) for c in t.children or [] if c.type == "link_open"]
    assert "`src/compounds.obo:12`" in text


def test_resolved_shown_separately() -> None:
    found = [finding(term="DEMO:1"), finding(term="DEMO:3", status="resolved")]
    tokens = MD.parse(markdown.render(review(found)))
    open_rows = [cell_text(r[0]) for r in table_after(tokens, "rule-violated")[1:]]
    resolved_rows = [[cell_text(c) for c in r] for r in table_after(tokens, "Resolved")[1:]]
    assert open_rows == ["DEMO:1 at src/compounds.obo:12"]
    assert [r[0].split(" ")[0] for r in resolved_rows] == ["DEMO:3"]
    assert resolved_rows[0][2] == "rule-violated"


def test_long_section_folds_into_details() -> None:
    found = [finding(term=f"DEMO:{i}") for i in range(12)] + [finding("parent-obsolete", "DEMO:99")]
    tokens = MD.parse(markdown.render(review(found)))
    html = [t.content.strip() for t in tokens if t.type == "html_block"]
    assert "<details><summary>12 findings</summary>" in html and "</details>" in html
    assert len(table_after(tokens, "rule-violated")) == 13  # header + 12 rows, still a table
    assert len(table_after(tokens, "parent-obsolete")) == 2  # short: not folded
    assert html.count("</details>") == 1


def test_notes_shown_as_list() -> None:
    tokens = MD.parse(markdown.render(review([], notes=("model not trained: 3 members", "rules: none"))))
    items = [cell_text(tokens[i + 2]) for i, t in enumerate(tokens) if t.type == "list_item_open"]
    assert items == ["model not trained: 3 members", "rules: none"]


# -- hostile ontology text -----------------------------------------------------------------

HOSTILE = [
    pytest.param("<script>alert(1)</script>", id="script-tag"),
    pytest.param("<img src=x onerror=alert(1)>", id="img-tag"),
    pytest.param("<!-- hidden --> <details open>", id="comment-and-details"),
    pytest.param("ping @user and @org/team now", id="mentions"),
    pytest.param("a | b | c |", id="pipes"),
    pytest.param("back`tick ``double`` `", id="backticks"),
    pytest.param("slash \\| pipe \\", id="backslash-pipe"),
    pytest.param("line one\n\n# heading\n- item\r\n| x | y |", id="newlines"),
    pytest.param("[click](javascript:alert(1)) ![i](http://x/i.png)", id="links"),
    pytest.param("&lt;b&gt; &amp; &#60;", id="entities"),
    pytest.param("**bold** _em_ ~~del~~ $x$", id="emphasis"),
    pytest.param("- starts like a list", id="leading-dash"),
    pytest.param("1. starts like a list", id="leading-number"),
    pytest.param("\x1b[31mred\u202eevil", id="control-and-bidi"),
    pytest.param("N" * 10_000, id="ten-thousand-characters"),
]


def visible(value: str, limit: int) -> str:
    """What the reader must see: the text itself, flattened and cut to `limit`."""
    return escape.flatten(value, limit)


@pytest.mark.parametrize("name", HOSTILE)
def test_hostile_text_is_neutralised(name: str) -> None:
    hostile = finding(term=f"DEMO:1 {name}", message=name, evidence={"field": name},
                      classes=(name,))
    rev = review([hostile, finding("parent-suggested", "DEMO:2", status="resolved", message=name)],
                 names={f"DEMO:1 {name}": name, "DEMO:2": name}, notes=(name,),
                 edited_fields={f"DEMO:1 {name}": (name,)},
                 changes={"edited": (f"DEMO:1 {name}",)}, base=name, head=name)
    text = markdown.render(rev, repo_url="https://github.com/o/r", ref="abc")
    tokens = MD.parse(text)
    # No HTML from ontology text: every html token is one of our own three.
    for tok in tokens:
        if tok.type == "html_block":
            assert OUR_HTML.match(tok.content), tok.content
        for child in tok.children or []:
            assert child.type != "html_inline", child.content
            # No link but our own file links (GFM's bare-URL autolinks are off in this parser).
            if child.type == "link_open":
                assert str(child.attrs["href"]).startswith("https://github.com/o/r/blob/abc/")
            assert child.type != "image"
            # GitHub pings `@name` only outside code; text must never hold one.
            if child.type == "text":
                assert not re.search(r"@[A-Za-z0-9]", child.content), child.content
    # Every table keeps its shape: GFM drops extra cells silently, so check the cell text.
    rows = table_after(tokens, "rule-violated")
    assert all(len(r) == 7 for r in rows)
    row = rows[1]
    assert cell_text(row[1]).replace(escape.ZWJ, "") == visible(name, 80)
    assert cell_text(row[3]).replace(escape.ZWJ, "") == visible(name, 300)
    assert cell_text(row[2]).replace(escape.ZWJ, "") == visible("edited: " + name, 80)
    assert len(cell_text(row[0])) <= 80 + len(" at src/compounds.obo:12")
    assert all(len(cell_text(c)) <= 300 for c in row)
    resolved = table_after(tokens, "Resolved")
    assert all(len(r) == 4 for r in resolved)
    assert cell_text(resolved[1][3]).replace(escape.ZWJ, "") == visible(name, 300)
    # Headings are only ours: title, the kind section, the resolved section.
    assert sum(1 for t in tokens if t.type == "heading_open") == 3
    # The note stays one list item of one paragraph.
    starts = [i for i, t in enumerate(tokens) if t.type == "list_item_open"]
    assert len(starts) == 1 and tokens[starts[0] + 1].type == "paragraph_open"
    assert cell_text(tokens[starts[0] + 2]).replace(escape.ZWJ, "") == visible(name, 300)


@pytest.mark.parametrize("value", HOSTILE)
def test_code_span_holds_text_exactly(value: str) -> None:
    # Inside a table cell and outside one, the code span shows the flattened text itself.
    in_table = MD.parse(f"| a |\n|---|\n| {escape.code(value, 200)} |\n")
    cells = tables(in_table)[0][1]
    assert len(cells) == 1
    assert [c.type for c in cells[0].children or []] == ["code_inline"]
    assert cell_text(cells[0]) == visible(value, 200)
    outside = MD.parse(f"x {escape.code(value, 200, table=False)}\n")
    assert cell_text(outside[1]) == "x " + visible(value, 200)


# -- size --------------------------------------------------------------------------------

def test_thousands_of_findings_fit_one_comment_and_say_what_was_cut() -> None:
    long_message = "the structure does not match the class definition " * 5
    found = [finding(term=f"DEMO:{i}", status="resolved", message=long_message) for i in range(3000)]
    found += [finding("parent-redundant", f"DEMO:{i}", status="persisting", message=long_message)
              for i in range(3000, 5000)]
    found += [finding("tiers-disagree", f"DEMO:{i}", message=long_message) for i in range(5000, 5500)]
    found += [finding(term=f"DEMO:{i}", message=long_message) for i in range(6000, 6100)]
    text = markdown.render(review(found))
    assert len(text) <= markdown.MAX_CHARS
    tokens = MD.parse(text)
    shown_terms = [cell_text(r[0]).split(" ")[0] for t in tables(tokens)[1:] for r in t[1:]]
    # Every new blocking finding survives; resolved and persisting go first.
    assert {f"DEMO:{i}" for i in range(6000, 6100)} <= set(shown_terms)
    match = re.search(r"Not shown, to fit one comment \(65,536 characters\): (.*?) findings", text)
    assert match, "the comment must say what was cut"
    cut = {kind: int(n) for n, kind in re.findall(r"(\d+) (\w+)", match.group(1))}
    assert cut["resolved"] == 3000 and cut["persisting"] == 2000
    # What is shown plus what is cut is everything.
    assert len(shown_terms) + sum(cut.values()) == len(found)
    assert all(len(r) in (5, 7) for t in tables(tokens) for r in t)


def test_small_review_is_not_cut() -> None:
    text = markdown.render(review([finding(term=f"DEMO:{i}") for i in range(50)]))
    assert "Not shown" not in text
    assert len(table_after(MD.parse(text), "rule-violated")) == 51
