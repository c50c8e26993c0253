"""Progress bars for long work, on a terminal only.

`progress(items)` is a plain passthrough unless stderr is a terminal and the work is large;
then it is a tqdm bar on stderr. CI logs, pre-commit output, pipes and files never see one, and
tqdm is imported only when a bar is shown.
"""
from __future__ import annotations

import os
import sys
from collections.abc import Iterable, Iterator
from typing import TypeVar

T = TypeVar("T")

# Below this many items a bar would flash and vanish; the work takes well under a second.
MIN_ITEMS = 2000


def bars_wanted(total: int | None, enabled: bool | None = None) -> bool:
    """Whether to draw a bar for `total` items. `enabled` forces the answer either way."""
    if enabled is not None:
        return enabled
    if os.environ.get("PARENTAGE_NO_PROGRESS") or os.environ.get("CI"):
        return False
    if total is not None and total < MIN_ITEMS:
        return False
    stream = sys.stderr
    return stream is not None and hasattr(stream, "isatty") and stream.isatty()


def progress(iterable: Iterable[T], total: int | None = None, desc: str = "",
             enabled: bool | None = None) -> Iterator[T]:
    """Yield the items of `iterable`, with a tqdm bar on a terminal when the work is large.

    `total` defaults to `len(iterable)` where it has one; with neither, no bar is drawn
    unless `enabled` is True (an unsized stream is drawn as a counter).
    """
    if total is None and hasattr(iterable, "__len__"):
        total = len(iterable)  # type: ignore[arg-type]
    if total is None and enabled is None:
        return iter(iterable)
    if not bars_wanted(total, enabled):
        return iter(iterable)
    from tqdm import tqdm

    return iter(tqdm(iterable, total=total, desc=desc or None, file=sys.stderr, leave=False,
                     unit="", dynamic_ncols=True, mininterval=0.25))
