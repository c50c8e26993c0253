"""parentage: a second opinion on the structured terms a change to a chemical ontology touches."""
from __future__ import annotations

__version__ = "0.1.0"
