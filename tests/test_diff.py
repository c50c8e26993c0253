"""`parentage diff`: which terms a change touched, which fields changed, and the output."""
from __future__ import annotations

import json
import os
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from parentage.changes import FIELDS, ChangeSet, diff_ontologies
from parentage.cli import main
from parentage.parse import parse_ontology_text
from parentage.snapshot import Ontology

if TYPE_CHECKING:
    from conftest import GitRepo

BASE = """\
format-version: 1.4
ontology: qqx

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
def: "A two-carbon carboxylic acid." []
is_a: QQX:0000002
synonym: "ethanoic acid" EXACT []
synonym: "vinegar acid" RELATED []
xref: CAS:64-19-7
property_value: smiles "CC(=O)O" xsd:string
property_value: QQX:note "liquid at room temperature" xsd:string
relationship: has_role QQX:0000005

[Term]
id: QQX:0000004
name: alcohol
is_a: QQX:0000001

[Term]
id: QQX:0000005
name: solvent

[Term]
id: QQX:0000006
name: old acid
is_obsolete: true
replaced_by: QQX:0000003

[Typedef]
id: has_role
name: has role
"""


def stanza_line(text: str, term_id: str) -> int:
    """1-based line of the `[Term]` header of `term_id`, found by a plain line scan."""
    lines = text.splitlines()
    at = lines.index(f"id: {term_id}")
    while not lines[at].startswith("["):
        at -= 1
    return at + 1


def diff_texts(old: str, new: str) -> ChangeSet:
    base = Ontology("base", [parse_ontology_text(old, "qqx.obo")])
    head = Ontology("head", [parse_ontology_text(new, "qqx.obo")])
    return diff_ontologies(base, head)


def edit(old: str, new: str) -> str:
    assert BASE.count(old) == 1, old
    return BASE.replace(old, new)


EDITS = [
    pytest.param('"CC(=O)O"', '"CC(=O)[O-]"', "QQX:0000003", ("structure",), id="structure"),
    pytest.param("is_a: QQX:0000002\nsyn", "is_a: QQX:0000004\nsyn", "QQX:0000003", ("parents",),
                 id="parent-replaced"),
    pytest.param("is_a: QQX:0000002\nsyn", "is_a: QQX:0000002\nis_a: QQX:0000004\nsyn",
                 "QQX:0000003", ("parents",), id="parent-added"),
    pytest.param("has_role QQX:0000005", "has_role QQX:0000004", "QQX:0000003", ("relationships",),
                 id="relationships"),
    pytest.param("name: acetic acid", "name: ethanoic acid", "QQX:0000003", ("name",), id="name"),
    pytest.param('"vinegar acid" RELATED', '"vinegar acid" EXACT', "QQX:0000003", ("synonyms",),
                 id="synonym-scope"),
    pytest.param('synonym: "vinegar acid" RELATED []\n', "", "QQX:0000003", ("synonyms",),
                 id="synonym-removed"),
    pytest.param("disjoint_from: QQX:0000004", "disjoint_from: QQX:0000005", "QQX:0000002",
                 ("disjointness",), id="disjointness"),
    pytest.param("replaced_by: QQX:0000003", "replaced_by: QQX:0000002", "QQX:0000006",
                 ("obsolescence",), id="obsolescence-replacement"),
    pytest.param("replaced_by: QQX:0000003", "consider: QQX:0000002", "QQX:0000006",
                 ("obsolescence",), id="obsolescence-consider"),
    pytest.param('A two-carbon', 'The two-carbon', "QQX:0000003", ("other",), id="other-def"),
    pytest.param("xref: CAS:64-19-7", "xref: CAS:64-19-8", "QQX:0000003", ("other",), id="other-xref"),
    pytest.param('"liquid at room temperature"', '"a liquid"', "QQX:0000003", ("other",),
                 id="other-property"),
    pytest.param("name: alcohol\n", "name: alcohol\ncomment: Hydroxy compounds.\n", "QQX:0000004",
                 ("other",), id="other-comment"),
    pytest.param("name: acetic acid\ndef", "name: ethanoic acid\ncomment: renamed\ndef", "QQX:0000003",
                 ("name", "other"), id="two-fields"),
    pytest.param('"ethanoic acid" EXACT []', '"ethanoic acid" EXACT [QQX:0000099]', "QQX:0000003",
                 ("synonyms",), id="synonym-xrefs"),
    pytest.param('carboxylic acid." []', 'carboxylic acid." [QQX:0000099]', "QQX:0000003",
                 ("other",), id="def-xrefs"),
]


@pytest.mark.parametrize(("old", "new", "term", "fields"), EDITS)
def test_changed_fields(old: str, new: str, term: str, fields: tuple[str, ...]) -> None:
    changes = diff_texts(BASE, edit(old, new))
    assert (changes.added, changes.removed, changes.obsoleted) == ((), (), ())
    assert changes.edited == (term,)
    assert changes.fields == {term: fields}
    assert set(fields) <= set(FIELDS)


def test_obsoleting_a_term_is_reported_as_obsoleted() -> None:
    new = edit("name: alcohol\nis_a: QQX:0000001\n",
               "name: alcohol\nis_obsolete: true\nreplaced_by: QQX:0000003\n")
    changes = diff_texts(BASE, new)
    assert changes.obsoleted == ("QQX:0000004",)
    assert changes.edited == ()
    assert changes.fields["QQX:0000004"] == ("parents", "obsolescence")


def test_added_and_removed_terms() -> None:
    new = edit("[Term]\nid: QQX:0000005\nname: solvent\n\n",
               "[Term]\nid: QQX:0000007\nname: propanoic acid\nis_a: QQX:0000002\n\n")
    changes = diff_texts(BASE, new)
    assert changes.added == ("QQX:0000007",)
    assert changes.removed == ("QQX:0000005",)
    assert changes.edited == ()


def _reorder_clauses(text: str) -> str:
    return text.replace("is_a: QQX:0000002\nsynonym: \"ethanoic acid\" EXACT []\n"
                        "synonym: \"vinegar acid\" RELATED []\n",
                        "synonym: \"vinegar acid\" RELATED []\nis_a: QQX:0000002\n"
                        "synonym: \"ethanoic acid\" EXACT []\n")


def _reorder_stanzas(text: str) -> str:
    head, *stanzas = text.split("\n\n")
    return "\n\n".join([head, *reversed(stanzas[:-1]), stanzas[-1]])


NO_OPS = [
    pytest.param(_reorder_clauses, True, id="clauses-reordered"),
    pytest.param(_reorder_stanzas, False, id="stanzas-reordered"),
    pytest.param(lambda t: t.replace("is_a: QQX:0000002\n", "is_a:   QQX:0000002   \n"), True,
                 id="spaces-in-clause"),
    pytest.param(lambda t: t.replace("\n\n", "\n\n\n\n"), False, id="blank-lines"),
    pytest.param(lambda t: t.replace("is_a: QQX:0000002\n", "is_a: QQX:0000002 ! carboxylic acid\n"),
                 True, id="trailing-comment"),
    pytest.param(lambda t: t.replace("\n", "\r\n"), False, id="crlf-line-endings"),
]


@pytest.mark.parametrize(("change", "text_changed"), NO_OPS)
def test_layout_only_changes_give_no_edit(change: Callable[[str], str], text_changed: bool) -> None:
    new = change(BASE)
    assert new != BASE
    # Where a stanza's text changed, the fields themselves are compared (not only digests).
    old_digests = {t.digest for t in parse_ontology_text(BASE, "qqx.obo").terms.values()}
    new_digests = {t.digest for t in parse_ontology_text(new, "qqx.obo").terms.values()}
    assert (old_digests != new_digests) == text_changed
    assert diff_texts(BASE, new) == ChangeSet((), (), (), (), {}, {})


# -- through the CLI -------------------------------------------------------------------------

HEAD_TEXT = (BASE
             .replace("name: acetic acid\n", "name: ethanoic acid\n")
             .replace("is_a: QQX:0000002\nsyn", "is_a: QQX:0000002\nis_a: QQX:0000004\nsyn")
             .replace("[Term]\nid: QQX:0000005\nname: solvent\n\n", "")
             .replace("name: alcohol\nis_a: QQX:0000001\n",
                      "name: alcohol\nis_obsolete: true\nreplaced_by: QQX:0000003\n")
             .replace("[Typedef]", "[Term]\nid: QQX:0000008\nname: butanoic acid\n"
                      "is_a: QQX:0000002\n\n[Typedef]"))


@pytest.fixture
def edited_repo(git_repo: GitRepo) -> GitRepo:
    git_repo.write("src/qqx.obo", BASE)
    git_repo.commit("base")
    git_repo.write("src/qqx.obo", HEAD_TEXT)
    git_repo.commit("head")
    return git_repo


def test_text_output(edited_repo: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["diff", "-C", str(edited_repo.path), "HEAD~1..HEAD"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out == [
        "HEAD~1 .. HEAD: 1 added, 1 removed, 1 obsoleted, 1 edited",
        f"src/qqx.obo:{stanza_line(HEAD_TEXT, 'QQX:0000008')}: QQX:0000008 'butanoic acid' added",
        f"src/qqx.obo:{stanza_line(BASE, 'QQX:0000005')}: QQX:0000005 'solvent' removed",
        (f"src/qqx.obo:{stanza_line(HEAD_TEXT, 'QQX:0000004')}: QQX:0000004 'alcohol' obsoleted "
         "replaced by QQX:0000003"),
        (f"src/qqx.obo:{stanza_line(HEAD_TEXT, 'QQX:0000003')}: QQX:0000003 'ethanoic acid' edited "
         "[parents, name]"),
    ]


def test_json_output(edited_repo: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["diff", "-C", str(edited_repo.path), "--format", "json", "HEAD~1..HEAD"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert set(data) == {"base", "head", "ontologies", "changes", "terms", "moved"}
    assert (data["base"], data["head"], data["ontologies"]) == ("HEAD~1", "HEAD", ["src/qqx.obo"])
    assert data["changes"] == {"added": ["QQX:0000008"], "removed": ["QQX:0000005"],
                               "obsoleted": ["QQX:0000004"], "edited": ["QQX:0000003"]}
    assert data["terms"]["QQX:0000003"] == {"path": "src/qqx.obo",
                                            "line": stanza_line(HEAD_TEXT, "QQX:0000003"),
                                            "name": "ethanoic acid", "fields": ["parents", "name"]}
    assert data["terms"]["QQX:0000005"]["line"] == stanza_line(BASE, "QQX:0000005")
    assert data["moved"] == {}


def test_output_option_writes_the_file(edited_repo: GitRepo, tmp_path: Path,
                                       capsys: pytest.CaptureFixture[str]) -> None:
    target = tmp_path / "out" / "diff.json"
    assert main(["diff", "-C", str(edited_repo.path), "--format", "json", "--output", str(target),
                 "HEAD~1..HEAD"]) == 0
    assert capsys.readouterr().out == ""
    assert json.loads(target.read_text())["changes"]["added"] == ["QQX:0000008"]


def test_console_script(edited_repo: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    script = Path(sys.executable).with_name("parentage")
    assert script.exists(), "the package must be installed (pip install -e .)"
    done = subprocess.run([str(script), "diff", "--format", "json", "HEAD~1..HEAD"],
                          check=False, cwd=edited_repo.path, capture_output=True, text=True, env=dict(os.environ),
                          timeout=60)
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""
    assert main(["diff", "-C", str(edited_repo.path), "--format", "json", "HEAD~1..HEAD"]) == 0
    assert json.loads(done.stdout) == json.loads(capsys.readouterr().out)
