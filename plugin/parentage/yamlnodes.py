"""YAML read as nodes (with line marks) for the files curators write: config and rule files."""
from __future__ import annotations

from typing import Any

import yaml

from parentage.errors import ParentageError

_CONSTRUCT = yaml.SafeLoader("")  # PyYAML's own safe scalar construction, reused
# libyaml's parser where PyYAML was built with it: the same nodes and line marks, a quarter of
# the time (rule files are read on every review).
_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def compose(text: str, path: str) -> yaml.Node | None:
    """The document's node tree; a syntax error is one line naming `path` and the line."""
    try:
        return yaml.compose(text, Loader=_LOADER)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f":{mark.line + 1}" if mark is not None else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise ParentageError(f"{path}{line}: not valid YAML: {problem}") from None


def scalar(node: yaml.Node) -> Any:
    """The value of a scalar node as safe_load would give it; None for anything else."""
    if not isinstance(node, yaml.ScalarNode) or node.tag == "tag:yaml.org,2002:null":
        return None
    return _CONSTRUCT.construct_object(node)
