"""OBO text -> our records, through fastobo. Private: only `parse.py` imports it.

The raw text is split into stanzas first (a line scan, ~30x faster than parsing) so every
stanza has a line span and a digest of its text; fastobo then parses either the whole document
or, for an incremental build, only the stanzas whose digest is new.
"""
from __future__ import annotations

import hashlib
import re
from collections.abc import Iterable, Sequence
from itertools import islice
from typing import Any, NamedTuple

from parentage.errors import ParentageError
from parentage.progress import progress
from parentage.snapshot import Term


class Stanza(NamedTuple):
    kind: str  # Term, Typedef, Instance
    id: str | None
    line: int  # 1-based first line
    end_line: int  # last non-blank line
    text: str  # what the parser sees (comment-only lines removed)
    digest: str  # of the raw stanza text
    lines: tuple[int, ...] = ()  # file line of each line of `text`; () when none was dropped
    offset: int = -1  # where the stanza starts in the normalised text


class OboSyntaxError(ParentageError):
    pass


KNOWN_STANZAS = ("Term", "Typedef", "Instance")


def _lines(text: str) -> list[str]:
    # Only "\n" ends a line in OBO; str.splitlines() would also break at U+2028, form feeds
    # and other characters a name may legitimately contain.
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    return [line.removesuffix("\r") for line in lines]


_STANZA_LINE = re.compile(r"^\[([A-Za-z]+)\][ \t]*(?:!.*)?$", re.MULTILINE)
_ID_LINE = re.compile(r"^id:[ \t]*(\S+)", re.MULTILINE)


def is_stanza_line(text: str, at: int) -> bool:
    """True when the line starting at `at` opens a stanza ("[Term]", "[Typedef]" ...)."""
    return text.startswith("[", at) and _STANZA_LINE.match(text, at) is not None


def stanza_starts_from(text: str, at: int = 0, limit: int | None = None) -> list[int]:
    """Offsets of the lines at or after `at` (a line start) that open a stanza, found with
    str.find; at most `limit` of them."""
    starts: list[int] = []
    if at == 0 and is_stanza_line(text, 0):
        starts.append(0)
    found = text.find("\n[", max(at - 1, 0))
    while found != -1 and (limit is None or len(starts) < limit):
        if _STANZA_LINE.match(text, found + 1):
            starts.append(found + 1)
        found = text.find("\n[", found + 1)
    return starts[:limit] if limit is not None else starts


def stanza_starts(text: str) -> list[int]:
    return stanza_starts_from(text, 0)


def _has_comment_line(body: str) -> bool:
    """True when a line's first non-blank character is "!" (a comment-only line)."""
    at = body.find("!")
    while at != -1:
        line_start = body.rfind("\n", 0, at) + 1
        if line_start == at or body[line_start:at].isspace():
            return True
        at = body.find("!", at + 1)
    return False


def normalise(text: str) -> str:
    """Only "\n" ends a line; a "\r" before it is dropped (as every reader here sees it)."""
    if "\r" in text:
        text = text.replace("\r\n", "\n")
        text = text.removesuffix("\r")
    return text


def stanza_at(text: str, start: int, stop: int, line: int, path: str) -> Stanza:
    """The stanza whose segment (trailing blank lines included) is text[start:stop].

    `text` is normalised; `line` is the 1-based line of `start`.
    """
    segment = text[start:stop]
    kept_to = segment.find("\n", len(segment.rstrip()))
    body = segment if kept_to == -1 else segment[:kept_to]
    first = body.find("\n")
    kind = body[1: body.index("]")]
    if kind not in KNOWN_STANZAS:
        raise OboSyntaxError(f"{path}:{line}: malformed OBO: unknown stanza [{kind}] "
                             f"(expected one of {', '.join(KNOWN_STANZAS)})")
    found = _ID_LINE.search(body, first + 1) if first != -1 else None
    ident = found.group(1) if found else None
    raw = body + "\n"
    digest = hashlib.blake2b(raw.encode("utf-8", "surrogatepass"), digest_size=16).hexdigest()
    end_line = line + body.count("\n")
    if "!" in body and _has_comment_line(body):
        kept = [(line + i, part) for i, part in enumerate(body.split("\n"))
                if not part.lstrip().startswith("!")]
        return Stanza(kind, ident, line, end_line, "\n".join(part for _, part in kept) + "\n",
                      digest, tuple(number for number, _ in kept), start)
    return Stanza(kind, ident, line, end_line, raw, digest, (), start)


def split(text: str, path: str = "<text>") -> tuple[str, list[Stanza]]:
    """The header text and the stanzas of a normalised OBO document, with spans and digests.

    A stanza's `text` is what the parser sees: its lines without comment-only lines (fastobo
    cannot parse those inside a frame), with `lines` giving each one's line in the file (empty
    when no line was removed). The scan works on the whole text with str.find and anchored
    patterns (a Python loop over lines was several times slower on a 30 MB file).
    """
    text = normalise(text)
    starts = stanza_starts(text)
    header = text[: starts[0]] if starts else text
    stanzas: list[Stanza] = []
    line = header.count("\n") + 1  # of the first stanza, 1-based
    for n, start in enumerate(starts):
        stop = starts[n + 1] if n + 1 < len(starts) else len(text)
        stanzas.append(stanza_at(text, start, stop, line, path))
        line += text.count("\n", start, stop)
    return header.removesuffix("\n"), stanzas


def _ident(value: Any) -> str:
    return str(value)


def _clause_text(clause: Any) -> str:
    """The clause as fastobo writes it (qualifiers, xrefs, datatypes kept), without its comment."""
    text = str(clause)
    comment = getattr(clause, "comment", None)
    if comment is not None:
        suffix = f" ! {comment}"
        text = text.removesuffix(suffix)
    return text


def _content_digest(clauses: list[str]) -> str:
    # Order-free: re-ordering clauses is not an edit.
    joined = "\n".join(sorted(clauses))
    return hashlib.blake2b(joined.encode("utf-8", "surrogatepass"), digest_size=16).hexdigest()


def _term_from_frame(frame: Any, stanza: Stanza) -> Term:
    name = None
    parents: list[str] = []
    relationships: list[tuple[str, str]] = []
    disjoint: list[str] = []
    obsolete = False
    replaced: list[str] = []
    consider: list[str] = []
    synonyms: list[tuple[str, str, str, str]] = []
    xrefs: list[str] = []
    properties: list[tuple[str, str]] = []
    other: list[tuple[str, str]] = []
    written: list[str] = []
    for clause in frame:
        written.append(_clause_text(clause))
        kind = type(clause).__name__
        if kind == "NameClause":
            name = str(clause.name)
        elif kind == "IsAClause":
            parents.append(_ident(clause.term))
        elif kind == "RelationshipClause":
            relationships.append((_ident(clause.typedef), _ident(clause.term)))
        elif kind == "DisjointFromClause":
            disjoint.append(_ident(clause.term))
        elif kind == "IsObsoleteClause":
            obsolete = bool(clause.obsolete)
        elif kind == "ReplacedByClause":
            replaced.append(_ident(clause.term))
        elif kind == "ConsiderClause":
            consider.append(_ident(clause.term))
        elif kind == "SynonymClause":
            syn = clause.synonym
            kind_of = str(syn.type) if getattr(syn, "type", None) is not None else ""
            synonyms.append((str(syn.desc), str(syn.scope), kind_of,
                             " ".join(str(x.id) for x in syn.xrefs)))
        elif kind == "XrefClause":
            xrefs.append(_ident(clause.xref.id))
        elif kind == "PropertyValueClause":
            pv = clause.property_value
            properties.append((_ident(pv.relation), str(pv.value)))
        else:
            other.append((clause.raw_tag(), clause.raw_value()))
    return Term(_ident(frame.id), name, tuple(parents), tuple(relationships), tuple(disjoint),
                obsolete, tuple(replaced), tuple(consider), tuple(synonyms), tuple(xrefs),
                tuple(properties), tuple(other), stanza.line, stanza.end_line, stanza.digest,
                _content_digest(written))


def _load(text: str, path: str, line_of: Sequence[int]) -> list[Any]:
    """Parse `text`; on a syntax error name `path` and the line in the original file.

    `line_of[i]` is the original line of line i+1 of `text` (they differ when only some
    stanzas are parsed).
    """
    import fastobo  # only when something is parsed: a warm run with stored snapshots needs none

    try:
        return list(fastobo.loads(text, threads=1))
    except SyntaxError as exc:
        local = exc.lineno or 1
        original = line_of[local - 1] if 0 < local <= len(line_of) else local
        detail = (exc.msg or "syntax error").strip()
        raise OboSyntaxError(f"{path}:{original}: malformed OBO: {detail}") from None
    except (ValueError, TypeError) as exc:
        raise OboSyntaxError(f"{path}: malformed OBO: {exc}") from None
    except BaseException as exc:
        if isinstance(exc, (KeyboardInterrupt, SystemExit)):
            raise
        raise OboSyntaxError(f"{path}: malformed OBO: the parser failed ({type(exc).__name__}: "
                             f"{str(exc).splitlines()[0] if str(exc) else 'no detail'})") from None


# Stanzas handed to fastobo at once: its frames for a whole 200k-term file held ~1 GB at the
# peak of a cold build; in chunks, only one chunk's frames are alive.
PARSE_CHUNK = 4096


def parse_stanzas(stanzas: Iterable[Stanza], path: str) -> list[Term]:
    """Parse these stanzas (all of a file, or only the new ones of an incremental build).

    Every stanza is syntax-checked; Term stanzas become `Term` records. The first error in
    file order is reported, with its line in the original file.
    """
    chosen = list(stanzas)
    out: list[Term] = []
    items = progress(chosen, total=len(chosen), desc="reading terms")
    while part := list(islice(items, PARSE_CHUNK)):
        parts: list[str] = []
        line_of: list[int] = []
        for stanza in part:
            parts.append(stanza.text + "\n")
            line_of.extend(stanza.lines or range(stanza.line, stanza.line + stanza.text.count("\n")))
            line_of.append(stanza.end_line)  # the blank separator
        frames = _load("".join(parts), path, line_of)
        if len(frames) != len(part):
            raise OboSyntaxError(f"{path}: malformed OBO: {len(part)} stanzas found but "
                                 f"{len(frames)} parsed")
        out += [_term_from_frame(f, s) for f, s in zip(frames, part) if s.kind == "Term"]
        del frames
    return out


def header_pairs(header: str, path: str) -> tuple[tuple[str, str], ...]:
    numbered = [(n, line) for n, line in enumerate(_lines(header), 1)
                if not line.lstrip().startswith("!")]
    if not any(line.strip() for _, line in numbered):
        return ()
    text = "\n".join(line for _, line in numbered) + "\n"
    import fastobo

    try:
        doc = fastobo.loads(text, threads=1)
    except SyntaxError as exc:
        local = exc.lineno or 1
        line = numbered[local - 1][0] if 0 < local <= len(numbered) else local
        detail = (exc.msg or "syntax error").strip()
        raise OboSyntaxError(f"{path}:{line}: malformed OBO header: {detail}") from None
    except BaseException as exc:
        if isinstance(exc, (KeyboardInterrupt, SystemExit)):
            raise
        raise OboSyntaxError(f"{path}: malformed OBO header: the parser failed") from None
    return tuple((c.raw_tag(), c.raw_value()) for c in doc.header)
