"""Make ontology text safe for markdown and terminals.

Ontology text is written by anyone who can open a pull request, so it is data: it must not
turn into HTML, ping people, break a table, escape a code span or grow without bound.
"""
from __future__ import annotations

import re
import unicodedata

ELLIPSIS = "…"
ZWJ = "\u200d"

# Line breaks of every kind (CommonMark and terminals both honour some of these).
_BREAKS = re.compile(r"\r\n|[\r\n\v\f\x85\u2028\u2029]")
# Characters that change how the text around them is shown: C0/C1 controls (ANSI escapes
# start with ESC) and the bidirectional overrides behind "trojan source" tricks.
_HIDDEN = re.compile(r"[\x00-\x08\x0e-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")
# Markdown punctuation with an inline meaning; `|` splits table cells. `<`, `>` and `&`
# become entities instead, so no tag or entity from the text survives.
_PUNCT = re.compile(r"([\\`*_\[\]|~!#$])")
_ENTITIES = {"&": "&amp;", "<": "&lt;", ">": "&gt;"}
# GitHub pings `@name` and `@org/team`; a zero-width joiner after the `@` stops the link.
_MENTION = re.compile(r"@(?=[A-Za-z0-9])")
# A line that starts with these would open a list, quote or heading inside a list item.
_LEADING = re.compile(r"^(\d+)([.)])|^([-+=])")


def flatten(text: str, limit: int | None = None) -> str:
    """One line without hidden characters, at most `limit` characters (ellipsis included)."""
    text = _HIDDEN.sub("", _BREAKS.sub(" ", text))
    text = unicodedata.normalize("NFC", text).strip()
    if limit is not None and len(text) > limit:
        text = text[: max(limit - 1, 0)].rstrip() + ELLIPSIS
    return text


def plain(text: str, limit: int | None = None) -> str:
    """Text for a terminal: flattened, no control characters (so no ANSI sequences)."""
    return flatten(text, limit)


def text(value: str, limit: int | None = 200) -> str:
    """Markdown text that renders as exactly `value` (flattened and bounded), in or out of tables."""
    flat = flatten(value, limit)
    out = _PUNCT.sub(r"\\\1", flat)
    out = "".join(_ENTITIES.get(ch, ch) for ch in out)
    out = _MENTION.sub("@" + ZWJ, out)
    # Escaping the first character keeps a list item or table cell from starting a block.
    return _LEADING.sub(lambda m: f"{m[1]}\\{m[2]}" if m[1] else f"\\{m[3]}", out)


def code(value: str, limit: int | None = 120, table: bool = True) -> str:
    """A code span holding `value`: the fence is longer than any backtick run inside it."""
    flat = flatten(value, limit)
    if not flat:
        return ""
    longest = max((len(run) for run in re.findall(r"`+", flat)), default=0)
    fence = "`" * (longest + 1)
    # CommonMark strips one space from each side, so padding keeps edge backticks apart.
    pad = " " if flat[0] in "` " or flat[-1] in "` " else ""
    if table:
        # GFM splits cells on `|` even inside code spans; `\|` is its own escape there.
        flat = flat.replace("|", "\\|")
    return f"{fence}{pad}{flat}{pad}{fence}"


def link(label_markdown: str, url: str) -> str:
    """A link whose label is already escaped markdown and whose url we built ourselves."""
    return f"[{label_markdown}]({url})"
