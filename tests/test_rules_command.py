"""`parentage rules test` and `parentage rules propose` in a real git repository.

Structures are textbook compounds (common practice): acetic, propanoic and benzoic acid are
carboxylic acids; ethanol and propanol are alcohols. The carboxylic acid SMARTS is RDKit's
(Functional_Group_Hierarchy.txt). The markdown is parsed with markdown-it-py (GFM tables).
"""
from __future__ import annotations

import json
import re

import pytest
import yaml
from markdown_it import MarkdownIt

from parentage.cli import main as cli
from parentage.parse import parse_ontology_text
from parentage.snapshot import Ontology
from parentage.tiers.rules import load_rules

ACIDS = [("CC(=O)O", "acetic acid"), ("CCC(=O)O", "propanoic acid"), ("OC(=O)c1ccccc1", "benzoic acid"),
         ("CCCC(=O)O", "butanoic acid"), ("OC(=O)CCl", "chloroacetic acid")]
ALCOHOLS = [("CCO", "ethanol"), ("CCCO", "propan-1-ol"), ("CC(C)O", "propan-2-ol"), ("CCCCO", "butan-1-ol")]


def obo(misfiled_ethanol: bool = False) -> str:
    lines = ["format-version: 1.2", "ontology: chem", "",
             "[Term]", "id: CHEM:0000001", "name: chemical entity", "",
             "[Term]", "id: CHEM:0000002", "name: carboxylic acid", "is_a: CHEM:0000001", "",
             "[Term]", "id: CHEM:0000003", "name: alcohol <b>@team</b>", "is_a: CHEM:0000001", ""]
    n = 0
    for group, parent in ((ACIDS, "CHEM:0000002"), (ALCOHOLS, "CHEM:0000003")):
        for smiles, name in group:
            n += 1
            chosen = "CHEM:0000002" if misfiled_ethanol and name == "ethanol" else parent
            lines += ["[Term]", f"id: CHEM:10000{n:02d}", f"name: {name}", f"is_a: {chosen}",
                      f'property_value: smiles "{smiles}" xsd:string', ""]
    return "\n".join(lines)


RULES = "- class: CHEM:0000002\n  kind: defining\n  any_of: ['C(=O)[O;H,-]']\n"


@pytest.fixture
def repo(git_repo):  # type: ignore[no-untyped-def]
    git_repo.write("chem.obo", obo())
    git_repo.write("rules/acids.yaml", RULES)
    git_repo.write(".parentage.yaml", "model: {min_members: 3}\n")
    git_repo.commit("first")
    return git_repo


def test_rules_test_json(repo, capsys) -> None:  # type: ignore[no-untyped-def]
    repo.write("chem.obo", obo(misfiled_ethanol=True))  # the work tree files ethanol as an acid
    assert cli(["rules", "test", "-C", str(repo.path), "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    [row] = data["rules"]
    assert (row["members"], row["matched_inside"], row["matched_outside"], row["missed_inside"]) == (6, 5, 0, 1)
    assert row["examples_missed"] == ["CHEM:1000006"] and row["rule"] == "rules/acids.yaml:1"
    assert data["structured"] == 9 and data["revision"] == "work tree"
    # At the commit, before the edit, the rule and the curation agree.
    assert cli(["rules", "test", "HEAD", "-C", str(repo.path), "--format", "json"]) == 0
    [row] = json.loads(capsys.readouterr().out)["rules"]
    assert (row["matched_inside"], row["matched_outside"], row["missed_inside"]) == (5, 0, 0)


def test_rules_test_markdown_table(repo, capsys) -> None:  # type: ignore[no-untyped-def]
    repo.write("rules/alcohols.yaml", "- class: CHEM:0000003\n  kind: sufficient\n  any_of: ['[OX2H]']\n"
               "- class: CHEM:9999999\n  kind: sufficient\n  any_of: ['C']\n")
    repo.git("add", "rules/alcohols.yaml")  # the work tree side reads tracked files
    assert cli(["rules", "test", "-C", str(repo.path)]) == 0
    text = capsys.readouterr().out
    tokens = MarkdownIt("commonmark").enable("table").parse(text)
    rows = [t for t in tokens if t.type == "tr_open"]
    assert len(rows) == 3  # header + two rules
    assert "<b>" not in text and "@team" not in text  # the class name is escaped
    assert "rules/alcohols.yaml:4: class CHEM:9999999 is not in the ontology" in text


def test_bad_rule_file_is_one_line_exit_2(repo, capsys) -> None:  # type: ignore[no-untyped-def]
    repo.write("rules/bad.yaml", "- class: CHEM:0000002\n  kind: defining\n  any_of: ['C(=O']\n")
    repo.git("add", "rules/bad.yaml")
    assert cli(["rules", "test", "-C", str(repo.path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("parentage: rules/bad.yaml:3: any_of: not a valid SMARTS") and "\n" not in err


def test_rules_propose_writes_a_loadable_rule_file(repo, capsys, tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "proposed.yaml"
    assert cli(["rules", "propose", "-C", str(repo.path), "--output", str(out),
                "--seconds-per-class", "2"]) == 0
    text = out.read_text()
    # The acids have a rule; the alcohols (4 members) and the root (9) get proposals.
    assert "# CHEM:0000003" in text and "# CHEM:0000002" not in text
    assert "precision" in text and "recall" in text
    rules = yaml.safe_load(text)
    assert {r["class"] for r in rules} <= {"CHEM:0000001", "CHEM:0000003"}
    onto = Ontology("x", [parse_ontology_text(obo(), "chem.obo")])
    ruleset, warnings = load_rules([("proposed.yaml", text)], onto)
    assert warnings == [] and "CHEM:0000003" in ruleset.classes()
    # The rule learned for the alcohols matches no acid, and as many alcohols as its comment says.
    written = re.search(r"# CHEM:0000003 .*\n# atom environments: .*\((\d+) of 4 members matched, (\d+) terms outside", text)
    assert written is not None and written.group(2) == "0"
    structures = {f"CHEM:10000{n:02d}": s for n, (s, _) in enumerate(ACIDS + ALCOHOLS, start=1)}
    verdicts = ruleset.verdicts(onto, list(structures), structures)
    supported = {t for t, vs in verdicts.items() for v in vs if v.cls == "CHEM:0000003" and v.opinion == "supports"}
    assert supported <= {"CHEM:1000006", "CHEM:1000007", "CHEM:1000008", "CHEM:1000009"}
    assert len(supported) == int(written.group(1)) >= 3


def test_usage_errors(repo, capsys) -> None:  # type: ignore[no-untyped-def]
    assert cli(["rules", "-C", str(repo.path)]) == 2
    assert cli(["rules", "check"]) == 2
    assert cli(["rules", "propose", "CHEM:7777777", "-C", str(repo.path)]) == 2
    assert "class CHEM:7777777 is not in the ontology" in capsys.readouterr().err
