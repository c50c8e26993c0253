"""The one base class for expected failures; the CLI maps it to exit code 2."""
from __future__ import annotations


class ParentageError(Exception):
    """Bad input or usage: the message is one line that says what is wrong and what to do."""
