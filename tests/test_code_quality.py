"""The project holds itself to its own habits: lint and types are part of the suite."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", *args], cwd=ROOT, capture_output=True, text=True,
                          check=False, timeout=600)


def test_ruff_is_clean() -> None:
    done = run("ruff", "check", "plugin", "tests", "fixtures", "actions")
    assert done.returncode == 0, done.stdout + done.stderr


def test_mypy_is_clean() -> None:
    done = run("mypy", "--cache-dir", str(ROOT / ".mypy_cache"))
    assert done.returncode == 0, done.stdout + done.stderr


def test_readme_names_every_subcommand() -> None:
    from parentage.cli import COMMANDS

    readme = (ROOT / "README.md").read_text()
    for name in COMMANDS:
        assert f"parentage {name}" in readme, name
