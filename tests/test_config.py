"""`.parentage.yaml`: defaults, validation errors that name file, key and line, and its effects."""
from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

from parentage.cli import main
from parentage.config import Config, ConfigError, load_config, parse_config
from parentage.findings import DEFAULT_FAIL_ON
from parentage.parse import parse_ontology_text
from parentage.snapshot import STRUCTURE_FIELDS, Structure, read_structure

if TYPE_CHECKING:
    from conftest import GitRepo

FULL = """\
ontologies: [src/*.obo, extra/**/*.obo]
structure:
  smiles: [QQX:smiles, smiles]
  inchikey: QQX:inchikey
rules: [rules/*.yaml]
model:
  min_members: 5
  min_f1: 0.7
fail_on: [rule-violated]
severity:
  parent-suggested: note
limits:
  max_atoms: 200
tolerance:
  mass: 0.1
cache: .cache/parentage
max_suggestions: 2
"""


def test_every_key_is_read() -> None:
    config = parse_config(FULL, ".parentage.yaml")
    assert config.ontologies == ("src/*.obo", "extra/**/*.obo")
    assert config.structure["smiles"] == ("QQX:smiles", "smiles")
    assert config.structure["inchikey"] == ("QQX:inchikey",)  # a single string is a one-item list
    assert config.structure["formula"] == ("formula",)  # fields not named keep their default
    assert config.rules == ("rules/*.yaml",)
    assert (config.model.min_members, config.model.min_f1) == (5, 0.7)
    assert config.model.radius == 2
    assert config.fail_on == ("rule-violated",)
    assert config.severity == {"parent-suggested": "note"}
    assert config.limits.max_atoms == 200
    assert config.tolerance.mass == 0.1
    assert (config.cache, config.max_suggestions) == (".cache/parentage", 2)


def test_defaults_without_a_file(tmp_path: Path) -> None:
    config = load_config(None, str(tmp_path))
    assert config == Config()
    assert config.ontologies == ()
    assert config.fail_on == DEFAULT_FAIL_ON
    assert dict(config.structure) == {f: (f,) for f in STRUCTURE_FIELDS}
    assert parse_config("", ".parentage.yaml") == Config(path=".parentage.yaml")
    assert parse_config("# only a comment\n", ".parentage.yaml").fail_on == DEFAULT_FAIL_ON


def _line_with(text: str, needle: str) -> int:
    return next(n for n, line in enumerate(text.splitlines(), 1) if needle in line)


ERRORS = [
    pytest.param("ontologies: [a.obo]\ncolour: blue\n", "colour", "colour", id="unknown-key"),
    pytest.param("model:\n  min_members: 5\n  learning_rate: 0.1\n", "model.learning_rate",
                 "learning_rate", id="unknown-nested-key"),
    pytest.param("structure:\n  smells: [x]\n", "structure.smells", "smells",
                 id="unknown-structure-field"),
    pytest.param("model:\n  min_members: many\n", "model.min_members", "min_members",
                 id="wrong-type-int"),
    pytest.param("tolerance:\n  mass: [1]\n", "tolerance.mass", "mass:", id="wrong-type-float"),
    pytest.param("max_suggestions: true\n", "max_suggestions", "max_suggestions", id="bool-is-not-int"),
    pytest.param("rules: 3\n", "rules", "rules", id="wrong-type-list"),
    pytest.param("ontologies:\n  - src/a.obo\n  - src/[ab.obo\n", "ontologies", "[ab.obo",
                 id="glob-unbalanced-bracket"),
    pytest.param("rules:\n  - rules/x**.yaml\n", "rules", "x**", id="glob-double-star-in-name"),
    pytest.param("rules:\n  - /etc/*.yaml\n", "rules", "/etc", id="glob-absolute"),
    pytest.param("rules:\n  - ../other/*.yaml\n", "rules", "../other", id="glob-outside-the-repo"),
    pytest.param("fail_on: [rule-violated, parent-misfiled]\n", "fail_on", "fail_on",
                 id="unknown-finding-kind"),
    pytest.param("severity:\n  rule-violated: fatal\n", "severity.rule-violated", "fatal",
                 id="unknown-severity"),
    pytest.param("structure: [smiles]\n", "structure", "structure", id="section-not-a-mapping"),
    pytest.param("model:\n  min_members: -1\n", "model.min_members", "min_members",
                 id="negative-number"),
]


@pytest.mark.parametrize(("text", "key", "needle"), ERRORS)
def test_errors_name_file_key_and_line(text: str, key: str, needle: str) -> None:
    with pytest.raises(ConfigError) as caught:
        parse_config(text, "conf/.parentage.yaml")
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith(f"conf/.parentage.yaml:{_line_with(text, needle)}: "), message
    assert key in message


def test_invalid_yaml_names_the_line() -> None:
    text = "rules: [a.yaml\nmodel: {min_members: 3}\n"
    with pytest.raises(ConfigError) as caught:
        parse_config(text, ".parentage.yaml")
    assert str(caught.value).startswith(".parentage.yaml:2: not valid YAML")


def test_bad_config_through_the_cli(git_repo: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("qqx.obo", "[Term]\nid: QQX:0000001\nname: entity\n")
    git_repo.write(".parentage.yaml", "rules: [rules/*.yaml]\nmodel:\n  min_members: lots\n")
    git_repo.commit()
    assert main(["diff", "-C", str(git_repo.path), "HEAD"]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    assert captured.err.splitlines() == [
        "parentage: .parentage.yaml:3: model.min_members must be an integer"]


def test_explicit_config_that_does_not_exist(git_repo: GitRepo,
                                             capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("qqx.obo", "[Term]\nid: QQX:0000001\nname: entity\n")
    git_repo.commit()
    assert main(["diff", "-C", str(git_repo.path), "--config", "nowhere.yaml", "HEAD"]) == 2
    err = capsys.readouterr().err
    assert err.splitlines() == ["parentage: nowhere.yaml: config file not found"]


def test_one_obo_and_no_config_works_with_defaults(git_repo: GitRepo,
                                                   capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("nested/folder/qqx.obo", "[Term]\nid: QQX:0000001\nname: entity\n")
    git_repo.write("notes.txt", "not an ontology\n")
    git_repo.commit()
    git_repo.write("nested/folder/qqx.obo", "[Term]\nid: QQX:0000001\nname: entity\n\n"
                   "[Term]\nid: QQX:0000002\nname: acid\nis_a: QQX:0000001\n")
    assert not (git_repo.path / ".parentage.yaml").exists()
    assert main(["diff", "-C", str(git_repo.path), "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["ontologies"] == ["nested/folder/qqx.obo"]
    assert data["changes"]["added"] == ["QQX:0000002"]


def test_configured_ontologies_limit_the_files(git_repo: GitRepo,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("src/qqx.obo", "[Term]\nid: QQX:0000001\nname: entity\n")
    git_repo.write("imports/other.obo", "[Term]\nid: QQX:0000900\nname: imported\n")
    git_repo.write(".parentage.yaml", "ontologies: [src/*.obo]\n")
    git_repo.commit()
    git_repo.write("imports/other.obo", "[Term]\nid: QQX:0000901\nname: imported too\n")
    assert main(["diff", "-C", str(git_repo.path), "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["ontologies"] == ["src/qqx.obo"]
    assert data["changes"]["added"] == []


TERM = """\
[Term]
id: QQX:0000003
name: acetic acid
property_value: QQX:smiles "CC(=O)O" xsd:string
property_value: smiles "C" xsd:string
property_value: QQX:charge " 0 " xsd:string
property_value: inchikey "QTBSBXVTEAMEQO-UHFFFAOYSA-N" xsd:string
"""


def test_structure_names_from_config_are_honoured() -> None:
    term = parse_ontology_text(TERM, "qqx.obo").terms["QQX:0000003"]
    config = parse_config("structure:\n  smiles: [QQX:smiles]\n  charge: [QQX:charge]\n"
                          "  inchikey: []\n", ".parentage.yaml")
    assert read_structure(term, config.structure) == Structure(smiles="CC(=O)O", charge="0")
    assert read_structure(term, Config().structure) == Structure(
        smiles="C", inchikey="QTBSBXVTEAMEQO-UHFFFAOYSA-N")


def test_structure_names_decide_which_edits_are_structure_edits(
        git_repo: GitRepo, capsys: pytest.CaptureFixture[str]) -> None:
    git_repo.write("qqx.obo", TERM)
    git_repo.commit()
    git_repo.write("qqx.obo", TERM.replace('"CC(=O)O"', '"CC(=O)[O-]"'))

    def fields() -> list[str]:
        assert main(["diff", "-C", str(git_repo.path), "--format", "json"]) == 0
        return list(json.loads(capsys.readouterr().out)["terms"]["QQX:0000003"]["fields"])

    assert fields() == ["other"]
    git_repo.write(".parentage.yaml", "structure:\n  smiles: [QQX:smiles]\n")
    assert fields() == ["structure"]
