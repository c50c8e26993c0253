"""Untrusted structures read in forked workers, with a time bound for each one.

RDKit cannot be interrupted from Python, and the size limits bound most of its work but not
all of it: sanitisation and InChI canonicalisation grow faster than the atom count on some
graphs, and a malformed input can crash the library outright. So structures are read in
worker processes. A worker still busy with one item after `seconds` is ended and the item is
reported as out of time; a worker that dies is reported as crashed on the item it was
reading; either way a new worker goes on with the rest. Where processes cannot fork, the items
are read in this process, with no time bound.
"""
from __future__ import annotations

import gc
import json
import multiprocessing
import os
import time
from collections.abc import Callable, Iterator, Sequence
from multiprocessing.connection import wait
from typing import Any

# Below this many items one worker reads them all: a second fork costs more than it saves.
SPLIT_AT = 64

Result = tuple[int, Any, str | None]  # (item index, JSON value or None, why there is none)


def _fork_context() -> Any:
    try:
        return multiprocessing.get_context("fork")
    except ValueError:  # pragma: no cover - platforms without fork
        return None


def _serve(func: Callable[[Any], Any], items: Sequence[Any], start: int, stop: int, conn: Any) -> None:
    # The worker shares the parent's heap page by page until it writes; a cyclic collection
    # would walk (and so copy) all of it.
    gc.disable()
    for index in range(start, stop):
        try:
            message = json.dumps([index, func(items[index]), None])
        except Exception as exc:  # noqa: BLE001 - reported with the item, never lost
            message = json.dumps([index, None, f"reading it failed: {type(exc).__name__}: {exc}"])
        conn.send_bytes(message.encode())
    conn.close()


class _Lane:
    """One worker reading items[start:stop] in order; restarted after the item it is stuck on."""

    def __init__(self, ctx: Any, func: Callable[[Any], Any], items: Sequence[Any], start: int,
                 stop: int, seconds: float) -> None:
        self.ctx, self.func, self.items = ctx, func, items
        self.next, self.stop, self.seconds = start, stop, seconds
        self.process: Any = None
        self.conn: Any = None
        self.since = 0.0
        if self.next < self.stop:
            self._start()

    def _start(self) -> None:
        mine, theirs = self.ctx.Pipe(duplex=False)
        self.process = self.ctx.Process(target=_serve, daemon=True,
                                        args=(self.func, self.items, self.next, self.stop, theirs))
        self.process.start()
        theirs.close()
        self.conn = mine
        self.since = time.monotonic()

    @property
    def done(self) -> bool:
        return self.next >= self.stop

    def deadline(self) -> float:
        return self.since + self.seconds

    def _end_worker(self) -> None:
        if self.process is not None:
            if self.process.is_alive():
                self.process.kill()
            self.process.join()
            self.process = None
        if self.conn is not None:
            self.conn.close()
            self.conn = None

    def _give_up(self, why: str) -> Result:
        """Report the item the worker is stuck on and go on with a new worker after it."""
        failed = self.next
        self._end_worker()
        self.next += 1
        if not self.done:
            self._start()
        return failed, None, why

    def read(self) -> list[Result]:
        """Whatever the worker has sent (its pipe is ready)."""
        out: list[Result] = []
        try:
            while self.conn.poll(0):
                index, value, why = json.loads(self.conn.recv_bytes())
                out.append((index, value, why))
                self.next = index + 1
                self.since = time.monotonic()
        except EOFError:
            if self.done:
                self._end_worker()
            else:
                out.append(self._give_up("the structure reader crashed on it"))
        if self.done:
            self._end_worker()
        return out

    def check_time(self, now: float) -> list[Result]:
        if self.done or now < self.deadline() or self.conn.poll(0):
            return []  # (an answer that came in just now is read on the next round)
        return [self._give_up(f"reading it took longer than {self.seconds:g} s")]

    def close(self) -> None:
        self._end_worker()


def bounded_map(func: Callable[[Any], Any], items: Sequence[Any], seconds: float,
                workers: int | None = None) -> Iterator[Result]:
    """(index, func(item), None) for each item, in the order they finish, or (index, None,
    why) for an item that ran out of time or crashed its worker. `func` returns JSON values."""
    ctx = _fork_context()
    if ctx is None:  # pragma: no cover - no fork: in process, no time bound
        for index, item in enumerate(items):
            yield index, func(item), None
        return
    count = len(items)
    if workers is None:
        workers = 1 if count < SPLIT_AT else max(1, min(os.cpu_count() or 1, 8))
    workers = max(1, min(workers, count))
    bounds = [count * k // workers for k in range(workers + 1)]
    lanes = [_Lane(ctx, func, items, bounds[k], bounds[k + 1], seconds) for k in range(workers)]
    try:
        while True:
            busy = [lane for lane in lanes if not lane.done]
            if not busy:
                return
            timeout = max(0.0, min(lane.deadline() for lane in busy) - time.monotonic())
            ready = set(wait([lane.conn for lane in busy], timeout))
            for lane in busy:
                if lane.conn in ready:
                    yield from lane.read()
            now = time.monotonic()
            for lane in busy:
                yield from lane.check_time(now)
    finally:
        for lane in lanes:
            lane.close()
