"""Terminal output: one `path:line: TERM kind message [status]` line per finding."""
from __future__ import annotations

import re

from parentage.findings import Finding, Review
from parentage.report import text

LINE = re.compile(r"^(?P<path>[^:]+):(?P<line>\d+): (?P<term>\S+) (?P<kind>[a-z-]+) (?P<message>.*) "
                  r"\[(?P<status>new|persisting|resolved)(?P<blocks>, blocks)?\]$")


def make_review() -> Review:
    found = (
        Finding("parent-suggested", "DEMO:1", "DEMO:12 fits", path="b.obo", line=9, status="persisting"),
        Finding("rule-violated", "DEMO:2", "fails\nDEMO:10 \x1b[2J\x1b]0;owned\x07", path="a.obo", line=40),
        Finding("annotation-mismatch", "DEMO:3", "formula", path="a.obo", line=7, status="resolved"),
        Finding("parent-redundant", "DEMO:4", "redundant", path="a.obo", line=3),
    )
    return Review("main", "abc", ("a.obo", "b.obo"), {}, {}, (), found, {})


def test_one_line_per_finding_grouped_by_status() -> None:
    lines = text.render(make_review()).splitlines()
    parsed = [LINE.match(line) for line in lines[:-1]]
    assert all(parsed), lines
    got = [(m["path"], m["line"], m["term"], m["kind"], m["status"], bool(m["blocks"])) for m in parsed if m]
    assert got == [
        ("a.obo", "3", "DEMO:4", "parent-redundant", "new", False),
        ("a.obo", "40", "DEMO:2", "rule-violated", "new", True),
        ("b.obo", "9", "DEMO:1", "parent-suggested", "persisting", False),
        ("a.obo", "7", "DEMO:3", "annotation-mismatch", "resolved", False),
    ]
    assert lines[-1] == "2 new (1 blocking), 1 persisting, 1 resolved"


def test_no_escape_sequences_without_color() -> None:
    out = text.render(make_review(), color=False)
    # The hostile message loses its ESC/BEL bytes and its newline.
    assert "\x1b" not in out and "\x07" not in out
    assert "fails DEMO:10 [2J]0;owned" in out


def test_color_only_when_asked() -> None:
    out = text.render(make_review(), color=True)
    assert "\x1b[31mrule-violated\x1b[0m" in out  # errors in red
    assert "\x1b[33mparent-suggested\x1b[0m" in out  # warnings in yellow
    # Colour codes are ours alone: stripping them gives the plain output back.
    assert re.sub(r"\x1b\[[0-9;]*m", "", out) == text.render(make_review(), color=False)
