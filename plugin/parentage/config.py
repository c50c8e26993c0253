"""`.parentage.yaml`: schema, defaults, and validation errors that name file, key and line."""
from __future__ import annotations

import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields, replace
from typing import Any

import yaml

from parentage.errors import ParentageError
from parentage.findings import DEFAULT_FAIL_ON, KINDS, SEVERITIES
from parentage.snapshot import STRUCTURE_FIELDS
from parentage.yamlnodes import compose
from parentage.yamlnodes import scalar as _scalar

CONFIG_NAME = ".parentage.yaml"


class ConfigError(ParentageError):
    pass


@dataclass(frozen=True)
class ModelSettings:
    min_members: int = 20
    fingerprint: str = "morgan+featmorgan"  # morgan, featmorgan, atompair, torsion, or several joined by +
    radius: int = 2
    size: int = 16384  # all parts together; 2048 score 0.4 points of micro-F1 lower (bench_model.py)
    folds: int = 5
    min_f1: float = 0.8  # a class's cross-validated F1 needed for its model verdicts to count
    min_similarity: float = 0.3  # below this Tanimoto to every training member: abstain
    retrain_after: int = 200  # changed structured terms since training before a retrain
    seed: int = 0

    @property
    def kinds(self) -> list[str]:
        """The fingerprint's parts: one kind, or kinds joined by `+`."""
        return [k.strip() for k in self.fingerprint.split("+")]

    @property
    def part_size(self) -> int:
        """Bits of each part: part k folds into [k * part_size, (k + 1) * part_size). The
        first part's bits alone measure similarity to training members."""
        return self.size // max(1, len(self.kinds))


@dataclass(frozen=True)
class Limits:
    max_atoms: int = 1000  # heavier structures become a finding, not a hang
    max_structure_chars: int = 20000
    parse_seconds: float = 5.0
    max_matches: int = 1000  # RDKit's maxMatches for each substructure search
    rule_seconds: float = 10.0  # total SMARTS matching time for one term


@dataclass(frozen=True)
class Tolerances:
    mass: float = 0.05  # g/mol; handbooks give average masses to two decimals
    monoisotopic_mass: float = 0.005


@dataclass(frozen=True)
class Config:
    path: str | None = None  # file it was read from, for messages
    ontologies: tuple[str, ...] = ()  # empty: every tracked *.obo file
    structure: Mapping[str, tuple[str, ...]] = field(
        default_factory=lambda: {f: (f,) for f in STRUCTURE_FIELDS})
    rules: tuple[str, ...] = ("rules/*.yaml",)
    model: ModelSettings = ModelSettings()
    limits: Limits = Limits()
    tolerance: Tolerances = Tolerances()
    fail_on: tuple[str, ...] = DEFAULT_FAIL_ON
    severity: Mapping[str, str] = field(default_factory=dict)
    cache: str | None = None
    max_suggestions: int = 3


# -- validation ----------------------------------------------------------------------------

def _where(path: str, node: yaml.Node, key: str) -> str:
    return f"{path}:{node.start_mark.line + 1}: {key}"


def _expect_int(path: str, node: yaml.Node, key: str) -> int:
    value = _scalar(node) if isinstance(node, yaml.ScalarNode) else None
    if not isinstance(value, int) or isinstance(value, bool):
        raise ConfigError(f"{_where(path, node, key)} must be an integer")
    return value


def _expect_float(path: str, node: yaml.Node, key: str) -> float:
    value = _scalar(node) if isinstance(node, yaml.ScalarNode) else None
    if not isinstance(value, (int, float)) or isinstance(value, bool):
        raise ConfigError(f"{_where(path, node, key)} must be a number")
    return float(value)


def _expect_str(path: str, node: yaml.Node, key: str) -> str:
    value = _scalar(node) if isinstance(node, yaml.ScalarNode) else None
    if not isinstance(value, str) or not value:
        raise ConfigError(f"{_where(path, node, key)} must be a non-empty string")
    return value


def _expect_list(path: str, node: yaml.Node, key: str,
                 item: Callable[[str, yaml.Node, str], Any]) -> tuple[Any, ...]:
    if isinstance(node, yaml.ScalarNode) and isinstance(_scalar(node), str):
        return (item(path, node, key),)  # a single string stands for a one-item list
    if not isinstance(node, yaml.SequenceNode):
        raise ConfigError(f"{_where(path, node, key)} must be a list")
    return tuple(item(path, child, key) for child in node.value)


def _expect_glob(path: str, node: yaml.Node, key: str) -> str:
    value = _expect_str(path, node, key)
    if os.path.isabs(value) or value.startswith("..") or "\0" in value:
        raise ConfigError(f"{_where(path, node, key)}: glob {value!r} must be relative to the repository root")
    if value.count("[") != value.count("]"):
        raise ConfigError(f"{_where(path, node, key)}: glob {value!r} has an unbalanced '['")
    if "**" in value.replace("/**/", "/").removeprefix("**/").removesuffix("/**"):
        raise ConfigError(f"{_where(path, node, key)}: glob {value!r}: '**' must be a whole "
                          "path segment")
    return value


def _expect_kind(path: str, node: yaml.Node, key: str) -> str:
    value = _expect_str(path, node, key)
    if value not in KINDS:
        raise ConfigError(f"{_where(path, node, key)}: unknown finding kind {value!r} "
                          f"(known: {', '.join(KINDS)})")
    return value


def _mapping(path: str, node: yaml.Node, key: str) -> list[tuple[str, yaml.Node, yaml.Node]]:
    if not isinstance(node, yaml.MappingNode):
        raise ConfigError(f"{_where(path, node, key)} must be a mapping")
    out = []
    for k, v in node.value:
        name = _scalar(k) if isinstance(k, yaml.ScalarNode) else None
        if not isinstance(name, str):
            raise ConfigError(f"{_where(path, k, key)}: keys must be strings")
        out.append((name, k, v))
    return out


def _section(path: str, node: yaml.Node, key: str, record: Any) -> Any:
    kinds = {f.name: f.type for f in fields(record)}
    values: dict[str, Any] = {}
    for name, knode, vnode in _mapping(path, node, key):
        if name not in kinds:
            raise ConfigError(f"{_where(path, knode, key + '.' + name)}: unknown key "
                              f"(known: {', '.join(kinds)})")
        full = f"{key}.{name}"
        kind = kinds[name]
        if kind == "int":
            values[name] = _expect_int(path, vnode, full)
        elif kind == "float":
            values[name] = _expect_float(path, vnode, full)
        else:
            values[name] = _expect_str(path, vnode, full)
        value = values[name]
        if isinstance(value, (int, float)) and value < 0:
            raise ConfigError(f"{_where(path, vnode, full)} must not be negative")
    return replace(record, **values)


def parse_config(text: str, path: str) -> Config:
    try:
        root = compose(text, path)
    except ParentageError as exc:
        raise ConfigError(str(exc)) from None
    config = Config(path=path)
    if root is None:
        return config
    values: dict[str, Any] = {}
    for name, knode, vnode in _mapping(path, root, "(top level)"):
        if name in ("ontologies", "rules"):
            values[name] = _expect_list(path, vnode, name, _expect_glob)
        elif name == "fail_on":
            values[name] = _expect_list(path, vnode, name, _expect_kind)
        elif name == "structure":
            mapping = dict(config.structure)
            for fname, fk, fv in _mapping(path, vnode, name):
                if fname not in STRUCTURE_FIELDS:
                    raise ConfigError(f"{_where(path, fk, 'structure.' + fname)}: unknown key "
                                      f"(known: {', '.join(STRUCTURE_FIELDS)})")
                mapping[fname] = _expect_list(path, fv, f"structure.{fname}", _expect_str)
            values[name] = mapping
        elif name == "severity":
            sev: dict[str, str] = {}
            for kname, kk, kv in _mapping(path, vnode, name):
                if kname not in KINDS:
                    raise ConfigError(f"{_where(path, kk, 'severity.' + kname)}: unknown finding kind")
                level = _expect_str(path, kv, f"severity.{kname}")
                if level not in SEVERITIES:
                    raise ConfigError(f"{_where(path, kv, 'severity.' + kname)} must be one of "
                                      f"{', '.join(SEVERITIES)}")
                sev[kname] = level
            values[name] = sev
        elif name == "model":
            values[name] = _section(path, vnode, name, config.model)
        elif name == "limits":
            values[name] = _section(path, vnode, name, config.limits)
        elif name == "tolerance":
            values[name] = _section(path, vnode, name, config.tolerance)
        elif name == "cache":
            values[name] = _expect_str(path, vnode, name)
        elif name == "max_suggestions":
            values[name] = _expect_int(path, vnode, name)
        else:
            known = ", ".join(f.name for f in fields(Config) if f.name != "path")
            raise ConfigError(f"{_where(path, knode, name)}: unknown key (known: {known})")
    return replace(config, **values)


def load_config(path: str | None, root: str) -> Config:
    """Read `path` (or `<root>/.parentage.yaml` when it exists); defaults otherwise."""
    explicit = path is not None
    target = path if path is not None else os.path.join(root, CONFIG_NAME)
    if not os.path.exists(target):
        if explicit:
            raise ConfigError(f"{target}: config file not found")
        return Config()
    try:
        with open(target, encoding="utf-8") as handle:
            text = handle.read()
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"{target}: cannot read config: {exc}") from None
    shown = os.path.relpath(target, root) if not explicit else target
    return parse_config(text, shown)
