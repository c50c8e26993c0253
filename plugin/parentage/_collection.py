"""A pause of Python's cyclic garbage collector around steps that build many small records."""
from __future__ import annotations

import contextlib
import gc
from collections.abc import Iterator


@contextlib.contextmanager
def collector_paused() -> Iterator[None]:
    """Python's cyclic collector paused while the block runs.

    Each time enough new containers pile up, the collector walks a generation, and now and
    then every object; over a large heap (an ontology, the outcomes of thousands of
    structures) those walks cost more than building the records that set them off (rule
    verdicts: about twice the building). Records are not cycles, and what the block frees is
    freed by reference counting; collection resumes, if it ran before, when the block ends.
    """
    running = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if running:
            gc.enable()
