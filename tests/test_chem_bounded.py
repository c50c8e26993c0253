"""Structures are read in forked workers with a time bound: a runaway or crashing item becomes
a reported failure of that item alone, never a hang of the review."""
from __future__ import annotations

import os
import time
from dataclasses import replace

import fgbench
import numpy as np

from parentage.chem import bounded
from parentage.chem.bounded import bounded_map
from parentage.chem.fingerprints import fingerprint_bits
from parentage.chem.molecules import analyse_many
from parentage.config import Limits, ModelSettings
from parentage.store import Store


def _upper_unless(item: str) -> str:
    if item == "slow":
        time.sleep(60)
    if item == "crash":
        os._exit(70)  # as a library crash would end the worker
    if item == "raise":
        raise ValueError("bad item")
    return item.upper()


def test_a_slow_item_is_reported_and_the_rest_are_read() -> None:
    items = ["a", "b", "slow", "c"]
    started = time.monotonic()
    got = {index: (value, why) for index, value, why in bounded_map(_upper_unless, items, 0.5)}
    assert time.monotonic() - started < 10  # not the minute the slow item asks for
    assert got[0] == ("A", None) and got[1] == ("B", None) and got[3] == ("C", None)
    assert got[2][0] is None and "longer than 0.5 s" in got[2][1]


def test_a_crash_and_an_exception_are_reported_with_their_items() -> None:
    items = ["a", "crash", "raise", "b"]
    got = {index: (value, why) for index, value, why in bounded_map(_upper_unless, items, 30)}
    assert got[0] == ("A", None) and got[3] == ("B", None)
    assert got[1][0] is None and "crashed" in got[1][1]
    assert got[2][0] is None and "ValueError: bad item" in got[2][1]


def test_several_workers_read_every_item_once() -> None:
    items = [f"x{n}" for n in range(150)]
    seen = [index for index, value, why in bounded_map(_upper_unless, items, 30, workers=2)
            if value == items[index].upper() and why is None]
    assert sorted(seen) == list(range(150))


def test_a_structure_out_of_time_is_unreadable_and_not_stored(tmp_path) -> None:
    # Cholesterol (a common steroid; SMILES from memory, checked only as readable): RDKit's
    # sanitisation and the InChI algorithm need well over a microsecond for it.
    smiles = "C[C@H](CCCC(C)C)[C@H]1CC[C@@H]2[C@@]1(CC[C@H]3[C@H]2CC=C4[C@@]3(CC[C@@H](C4)O)C)C"
    store = Store(str(tmp_path / "store.sqlite"))
    tight = replace(Limits(), parse_seconds=1e-6)
    facts = analyse_many([smiles], tight, store)[smiles]
    assert facts.error is not None and "limits.parse_seconds" in facts.error
    assert facts.inchikey is None
    # Not stored: with the default limit the same store reads it.
    again = analyse_many([smiles], Limits(), store)[smiles]
    assert again.error is None and again.formula == "C27H46O"  # cholesterol, C27H46O (CRC Handbook)


def test_fingerprints_of_a_large_batch_equal_those_read_in_process() -> None:
    # Molecules shipped with RDKit (NCI first_5K.smi, via tests/fgbench.py), with one
    # unreadable text among them: the forked workers give what one process gives.
    smiles = [m.smiles for m in fgbench.molecules()[:150]] + ["C1CC"]
    settings = ModelSettings()
    parallel = fingerprint_bits(smiles, settings)
    assert len(smiles) >= bounded.SPLIT_AT
    one_by_one = [fingerprint_bits([s], settings)[0] for s in smiles]
    assert parallel[-1] is None and one_by_one[-1] is None
    for a, b in zip(parallel[:-1], one_by_one[:-1]):
        assert a is not None and b is not None and a.dtype == b.dtype == np.uint32
        assert np.array_equal(a, b)
