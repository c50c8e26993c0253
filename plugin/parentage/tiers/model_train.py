"""Training the model tier (scikit-learn): one linear SVM per class on fingerprint bits.

The estimator was chosen by measurement on the functional-group benchmark
(tests/benchmarks/bench_model.py prints the comparison): linear SVMs on bit presence beat
one-vs-rest logistic regression on counts, a kNN Tanimoto blend and a one-layer perceptron.

Each class learns from a bounded set: all its members, members of its parents that are not in
it (the negatives that look most alike), and a capped random sample of the rest. Every member
is then scored by the fold model that never saw it, so Platt parameters, thresholds, margins
and figures are fitted on out-of-fold scores of all members, whatever was sampled. A class
whose members' filings the first round's out-of-fold model confidently contradicts is fitted
again without them (`doubted_rows`), so a misfiled member neither teaches its class to its
neighbours nor bends the calibration. The fits
run in two processes where there are two cores. Nothing held grows with members times classes:
memberships are sparse, the out-of-fold scores of a chunk of classes are calibrated as soon as
its fits are in and only their probabilities above OOF_FLOOR are kept. Everything stored is a
numpy array or JSON.
"""
from __future__ import annotations

import multiprocessing
import os
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import asdict
from typing import Any, NamedTuple, TypeVar

import numpy as np
import sklearn
from scipy import sparse
from sklearn.svm import LinearSVC

from parentage.chem.fingerprints import cached_bits
from parentage.config import Config
from parentage.progress import progress as progress_bar
from parentage.snapshot import Ontology
from parentage.store import Store
from parentage.tiers.model import (
    FORMAT,
    OOF_FLOOR,
    ClassFigures,
    Member,
    Model,
    Neighbours,
    bits_hash,
    eligible_classes,
    hierarchy_of,
    members_of,
    trust_core,
)

T = TypeVar("T")
SVM_C = 0.5  # chosen on the functional-group benchmark among 0.1, 0.5, 1 (bench_model.py)
# Measured on one fold of the 50k speed set: tol 1e-2 fits in 3/4 of the time of 1e-4 at the
# same held-out micro-F1 (0.9948 vs 0.9952); 1e-1 loses half a point.
SVM_TOL = 1e-2
# One fit's rows: the class's members, as many members of its parents that are not in it (hard
# negatives), and as many of the rest (random negatives), each part capped at
# max(ROWS_MIN, ROW_BUDGET / classes): a few classes learn from every member, a thousand from
# samples. Measured on the generated 50k ontology (930 classes, most of 21-54 members): a fit
# costs ~8 ms of fixed work plus ~3-5 ms per 1000 rows.
ROW_BUDGET = 600_000
ROWS_MIN = 600
BINS = 512  # score histogram bins per class for Platt scaling and thresholds
EVAL_SAMPLE = 1000
# Out-of-fold scores held at once while training: members x classes of a chunk, float32 (64 MB).
SCORE_CELLS = 16_000_000
# Opposing a curated class needs a calibrated probability of at most OPPOSE_P (at most one term
# in a hundred with that score is filed there), suggesting one at least SUGGEST_P (four in five).
OPPOSE_P = 0.01
SUGGEST_P = 0.8
LOW_FRACTION = 0.1  # and opposing needs at most a tenth of the decision threshold


def features(bits: Sequence[np.ndarray], size: int) -> sparse.csr_matrix:
    indptr = np.zeros(len(bits) + 1, dtype=np.int64)
    np.cumsum([len(b) for b in bits], out=indptr[1:])
    indices = np.concatenate(bits).astype(np.int32) if bits else np.zeros(0, np.int32)
    data = np.ones(len(indices), dtype=np.float64)
    return sparse.csr_matrix((data, indices, indptr), shape=(len(bits), size))


def labels(members: Sequence[Member], classes: Sequence[str]) -> sparse.csr_matrix:
    """Membership as a sparse (members, classes) int8 matrix (a dense one grows with members
    times classes: 0.7 GB for the generated 200k ontology's 3,615 classes)."""
    index = {c: j for j, c in enumerate(classes)}
    ptr = np.zeros(len(members) + 1, dtype=np.int64)
    cols: list[int] = []
    for i, m in enumerate(members):
        cols += sorted(index[c] for c in m.ancestors if c in index)
        ptr[i + 1] = len(cols)
    indices = np.array(cols, dtype=np.int32)
    return sparse.csr_matrix((np.ones(len(indices), dtype=np.int8), indices, ptr),
                             shape=(len(members), len(classes)))


def columns(y: sparse.spmatrix) -> list[np.ndarray]:
    """Per column of a membership matrix, its rows (sorted, int64)."""
    csc = sparse.csc_matrix(y)
    csc.sort_indices()
    return [csc.indices[a:b].astype(np.int64) for a, b in zip(csc.indptr[:-1], csc.indptr[1:])]


class Negatives:
    """Each class's hard negatives, the members of its direct parents that are not its
    members, built when a fit asks for them: together they can hold far more rows than members."""

    def __init__(self, members: Sequence[Member], classes: Sequence[str], ontology: Ontology) -> None:
        parents = []
        for cls in classes:
            term = ontology.terms.get(cls)
            parents.append([p for p in (term.parents if term is not None else ()) if p != cls])
        wanted = sorted({p for ps in parents for p in ps} | set(classes))
        column = {c: j for j, c in enumerate(wanted)}
        self.n = len(members)
        self.inside = columns(labels(members, wanted))
        self.own = [column[c] for c in classes]
        # A parent that is not a defined term (dangling) counts as the root: every member.
        self.parents = [None if any(p not in ontology.terms for p in ps) else [column[p] for p in ps]
                        for ps in parents]

    def __call__(self, j: int) -> np.ndarray:
        ps = self.parents[j]
        rows = np.ones(self.n, dtype=bool) if ps is None else np.zeros(self.n, dtype=bool)
        for p in ps or ():
            rows[self.inside[p]] = True
        rows[self.inside[self.own[j]]] = False
        return np.flatnonzero(rows)


def _sample(rows: np.ndarray, cap: int, rng: np.random.Generator) -> np.ndarray:
    return rows if len(rows) <= cap else rng.choice(rows, cap, replace=False)


def fit_class(x: sparse.csr_matrix, pos: np.ndarray, neg: np.ndarray, seed: int) -> tuple[np.ndarray, np.ndarray, float]:
    """(bit indices, weights, bias) of one linear SVM; weights of bits never seen are zero."""
    rows = np.concatenate([pos, neg])
    target = np.concatenate([np.ones(len(pos), np.int8), np.zeros(len(neg), np.int8)])
    sub = x[rows]
    seen = np.zeros(x.shape[1], dtype=bool)
    seen[sub.indices] = True
    used = np.flatnonzero(seen)
    remap = np.zeros(x.shape[1], dtype=np.int32)
    remap[used] = np.arange(len(used), dtype=np.int32)
    # Only the columns present: liblinear's work and the returned weights stay small.
    sub = sparse.csr_matrix((sub.data, remap[sub.indices], sub.indptr), shape=(len(rows), len(used)))
    svm = LinearSVC(C=SVM_C, dual=True, tol=SVM_TOL, max_iter=1000, random_state=seed)
    # Our own arrays, built above: scikit-learn's checks of them cost a fifth of a small fit.
    with sklearn.config_context(assume_finite=True, skip_parameter_validation=True):
        svm.fit(sub, target)
    return used.astype(np.int32), svm.coef_.ravel().astype(np.float32), float(svm.intercept_[0])


def row_cap(classes: int) -> int:
    return max(ROWS_MIN, ROW_BUDGET // max(classes, 1))


def training_rows(pos: np.ndarray, hard: np.ndarray, pool: np.ndarray, is_member: np.ndarray,
                  rng: np.random.Generator, want: int) -> tuple[np.ndarray, np.ndarray]:
    """(positives, negatives) of one fit, each part at most `want` rows (`row_cap`)."""
    pos = _sample(pos, want, rng)
    neg = _sample(hard, want, rng)
    others = _sample(pool, want + len(pos) + len(neg), rng)
    others = others[~is_member[others] & ~np.isin(others, neg)][:want]
    return pos, np.concatenate([neg, others])


# What the worker processes read: set before they fork, so it is shared, never sent.
_WORK: dict[str, Any] = {}

Fit = tuple[np.ndarray, np.ndarray, float]  # fit_class's (bit indices, weights, bias)


def _fit_task(j: int) -> list[Fit]:
    """Class j's fits, one per fold: its hard negatives are built once for all of them."""
    w = _WORK
    positives, hard = w["positives"][j], w["negatives"](j)
    is_member = np.zeros(w["x"].shape[0], dtype=bool)
    is_member[positives] = True
    doubted = w["doubted"][j] if w["doubted"] is not None else ()
    if len(doubted):
        # Members whose filing the first round doubts teach this class nothing: neither
        # member nor (still marked in `is_member`) random negative. Doubted non-members stay
        # negatives (see `doubted_rows`).
        positives = np.setdiff1d(positives, doubted[is_member[doubted]], assume_unique=True)
    fits = []
    for f, keep in enumerate(w["keep"]):
        rng = np.random.default_rng([w["seed"], f, j])
        pos, neg = training_rows(positives[keep[positives]], hard[keep[hard]], w["pools"][f],
                                 is_member, rng, w["cap"])
        fits.append(fit_class(w["x"], pos, neg, w["seed"]))
    return fits


def _workers() -> int:
    """Two where two cores are ours and processes can fork (the workers share `_WORK`)."""
    if "fork" not in multiprocessing.get_all_start_methods():
        return 1
    return max(1, min(2, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else 1))


def chunk_width(members: int, classes: int) -> int:
    """Classes per chunk of out-of-fold scores: SCORE_CELLS scores, at least one class."""
    return max(1, min(classes, SCORE_CELLS // max(members, 1)))


class Chunk(NamedTuple):
    """The fold fits of a run of classes."""

    cols: np.ndarray  # (width,) int64: the classes, by index
    scores: np.ndarray  # (members, width) float32: each member scored by the fold model that never saw it
    total: np.ndarray  # (size, width) float32: the weights summed over the fold models
    total_bias: np.ndarray  # (width,) float32


def fold_fits(x: sparse.csr_matrix, positives: Sequence[np.ndarray], negatives: Negatives,
              fold: np.ndarray, seed: int, width: int, progress: bool | None,
              doubted: Sequence[np.ndarray] | None = None, desc: str = "class fits",
              classes: Sequence[int] | None = None) -> Iterator[Chunk]:
    """The k fold fits of every class (or of `classes`), `width` classes at a time, in order.

    Only a chunk's scores and weight sums are held: a (members, classes) table of scores takes
    2.9 GB for the generated 200k ontology (200,000 members, 3,615 classes), and calibration
    wrote a second one. The fits run in two forked processes where the
    machine has two cores: each fit holds the GIL for much of its ~8 ms, so two threads took
    68.8 s where two processes took 43.0 s (the generated 50k ontology's fold fits).
    `doubted` (per class, the rows the first round doubts) makes the second round. A class's
    fits do not depend on the classes fitted beside it: the row cap comes from all classes.
    """
    order = list(range(len(positives))) if classes is None else list(classes)
    k = int(fold.max()) + 1
    keep = [fold != f for f in range(k)]
    _WORK.update(x=x, seed=seed, cap=row_cap(len(positives)), positives=positives, negatives=negatives,
                 keep=keep, pools=[np.flatnonzero(m) for m in keep], doubted=doubted)
    held = [np.flatnonzero(fold == f) for f in range(k)]
    held_x = [x[rows].astype(np.float32) for rows in held]
    workers = _workers()
    pool = multiprocessing.get_context("fork").Pool(workers) if workers > 1 and len(order) * k > 50 else None
    try:
        done = pool.imap(_fit_task, order, chunksize=4) if pool is not None else map(_fit_task, order)
        start, pending = 0, []
        for fits in progress_bar(done, total=len(order), desc=desc, enabled=progress):
            pending.append(fits)
            if len(pending) == width or start + len(pending) == len(order):
                cols = np.array(order[start:start + len(pending)], dtype=np.int64)
                yield _score(cols, pending, held, held_x)
                start, pending = start + len(pending), []
    finally:
        if pool is not None:
            pool.terminate()
        _WORK.clear()


def _score(cols: np.ndarray, fits: Sequence[Sequence[Fit]], held: Sequence[np.ndarray],
           held_x: Sequence[sparse.csr_matrix]) -> Chunk:
    """Each fold's model scores its own held-out members and joins the sum, fold after fold."""
    n, size, width = sum(len(h) for h in held), held_x[0].shape[1], len(fits)
    scores = np.zeros((n, width), dtype=np.float32)
    total = np.zeros((size, width), dtype=np.float32)
    total_bias = np.zeros(width, dtype=np.float32)
    for f, (rows, xf) in enumerate(zip(held, held_x)):
        current = np.zeros((size, width), dtype=np.float32)
        bias = np.zeros(width, dtype=np.float32)
        for i, per_fold in enumerate(fits):
            used, coef, b = per_fold[f]
            current[used, i] = coef
            bias[i] = b
        scores[rows] = xf @ current + bias
        total += current
        total_bias += bias
    return Chunk(cols, scores, total, total_bias)


def _histograms(scores: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per class: score range (lo, width) and counts of members / non-members per score bin."""
    lo = scores.min(axis=0)
    width = np.maximum(scores.max(axis=0) - lo, 1e-6) / BINS
    k = scores.shape[1]
    pos = np.zeros((k, BINS), dtype=np.float64)
    neg = np.zeros((k, BINS), dtype=np.float64)
    offset = np.arange(k, dtype=np.int64) * BINS
    for start in range(0, len(scores), 4096):
        part = scores[start:start + 4096]
        b = np.minimum(((part - lo) / width).astype(np.int64), BINS - 1) + offset
        part_y = y[start:start + 4096]
        t, f = part_y > 0, part_y == 0
        pos += np.bincount(b[t], minlength=k * BINS).reshape(k, BINS)
        neg += np.bincount(b[f], minlength=k * BINS).reshape(k, BINS)
    return lo, width, pos, neg


def platt(centres: np.ndarray, pos: np.ndarray, neg: np.ndarray, iterations: int = 50) -> np.ndarray:
    """Per class (a, b) with p = sigmoid(a * score + b), by Newton steps on binned scores.

    Targets use Platt's own smoothing ((N+ + 1)/(N+ + 2), 1/(N- + 2)) so separable classes
    keep a finite slope. Each class stops at its own first step under 1e-5, so a class's
    parameters do not depend on which classes are fitted beside it (training fits them a
    chunk of classes at a time).
    """
    k = len(centres)
    n_pos, n_neg = pos.sum(1, keepdims=True), neg.sum(1, keepdims=True)
    hi_t, lo_t = (n_pos + 1) / (n_pos + 2), 1 / (n_neg + 2)
    weight = pos + neg
    target = np.where(weight > 0, (pos * hi_t + neg * lo_t) / np.maximum(weight, 1), 0.0)
    ab = np.zeros((k, 2))
    ab[:, 1] = np.log((n_pos[:, 0] + 1) / (n_neg[:, 0] + 1))

    def loss(rows: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        z = a[:, None] * centres[rows] + b[:, None]
        return (weight[rows] * (np.logaddexp(0.0, z) - target[rows] * z)).sum(1)

    active = np.arange(k)
    for _ in range(iterations):
        if not len(active):
            break
        c, wt = centres[active], weight[active]
        z = ab[active, :1] * c + ab[active, 1:]
        p = 1 / (1 + np.exp(-np.clip(z, -50, 50)))
        g = wt * (p - target[active])
        h = wt * p * (1 - p) + 1e-9
        ga, gb = (g * c).sum(1), g.sum(1)
        haa, hab, hbb = (h * c ** 2).sum(1), (h * c).sum(1), h.sum(1) + 1e-6
        det = haa * hbb - hab ** 2
        det = np.where(np.abs(det) < 1e-12, 1e-12, det)
        step_a = (hbb * ga - hab * gb) / det
        step_b = (haa * gb - hab * ga) / det
        # A full Newton step can overshoot where members and non-members barely overlap (the
        # slope then ran off to 1e9): halve it until the loss does not grow (Lin, Lin and
        # Weng's note on Platt's method does the same).
        before = loss(active, ab[active, 0], ab[active, 1])
        scale = np.ones(len(active))
        for _ in range(30):
            after = loss(active, ab[active, 0] - scale * step_a, ab[active, 1] - scale * step_b)
            worse = after > before + 1e-12 * np.abs(before)
            if not worse.any():
                break
            scale[worse] *= 0.5
        step_a, step_b = scale * step_a, scale * step_b
        ab[active, 0] -= step_a
        ab[active, 1] -= step_b
        active = active[np.maximum(np.abs(step_a), np.abs(step_b)) >= 1e-5]
    return ab.astype(np.float32)


def best_thresholds(probs_hi: np.ndarray, pos: np.ndarray, neg: np.ndarray) -> np.ndarray:
    """Per class, the probability cut that maximises out-of-fold F1, between two score bins.

    `probs_hi[j, b]` is the probability at the lower edge of bin b; a term counts as predicted
    when its bin is at or above the cut.
    """
    tp = np.cumsum(pos[:, ::-1], axis=1)[:, ::-1]  # members at or above each bin
    fp = np.cumsum(neg[:, ::-1], axis=1)[:, ::-1]
    f1 = 2 * tp / np.maximum(tp + fp + pos.sum(1, keepdims=True), 1)
    best = np.argmax(f1, axis=1)
    cut = probs_hi[np.arange(len(best)), best]
    return np.clip(cut, 0.02, 0.98).astype(np.float32)


def calibrate(scores: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(platt, thresholds, low, high, probabilities), all from out-of-fold scores."""
    lo, width, pos, neg = _histograms(scores, y)
    centres = lo[:, None] + (np.arange(BINS)[None, :] + 0.5) * width[:, None]
    calib = platt(centres, pos, neg)
    edges = lo[:, None] + np.arange(BINS)[None, :] * width[:, None]
    edge_p = 1 / (1 + np.exp(-np.clip(edges * calib[:, :1] + calib[:, 1:], -50, 50)))
    thresholds = best_thresholds(edge_p, pos, neg)
    probs = np.empty_like(scores)
    for start in range(0, len(scores), 4096):  # in float32 chunks: no full-size temporaries
        part = scores[start:start + 4096] * calib[:, 0] + calib[:, 1]
        probs[start:start + 4096] = 1 / (1 + np.exp(-np.clip(part, -50, 50)))
    # Contradicting the curation needs more than the decision threshold. The probabilities are
    # calibrated on out-of-fold scores, so a cutoff reads as a rate. A quantile of the members'
    # own scores would sink to zero as soon as a few members are misfiled, which is what we
    # look for.
    low = np.maximum(np.minimum(OPPOSE_P, thresholds * LOW_FRACTION), 1e-4).astype(np.float32)
    high = np.maximum(SUGGEST_P, thresholds).astype(np.float32)
    return calib, thresholds, low, high, probs


def chunk_truth(chunk: Chunk, positives: Sequence[np.ndarray],
                doubted: Sequence[np.ndarray] | None = None) -> np.ndarray:
    """(members, width) int8 labels of a chunk's classes: 1 member, 0 not, -1 doubted."""
    truth = np.zeros(chunk.scores.shape, dtype=np.int8)
    for i, j in enumerate(chunk.cols.tolist()):
        truth[positives[j], i] = 1
        if doubted is not None:
            truth[doubted[j], i] = -1
    return truth


def doubted_rows(scores: np.ndarray, truth: np.ndarray) -> list[np.ndarray]:
    """Per class of a chunk, the rows whose label its out-of-fold scores confidently contradict:
    members at or below the class's `low`, non-members at or above its `high`.

    The second round of fits leaves the doubted members out of their class (neither member nor
    negative), so a misfiled member no longer teaches its class to its structural neighbours;
    its calibration leaves out both kinds, so they no longer flatten the class's Platt curve.
    A doubted non-member stays a negative in the fits: it is as often a hard negative the first
    round got wrong, and unlearning it teaches the confusion (in the demo, an N-formyl amide
    then looked like an aldehyde: p 0.004 -> 0.17). Measured on the functional-group benchmark
    with injected errors (bench_model.py; precision counts a flag of any injected error as
    right; similarity then over all bits): one round, recall 0.797 at precision 0.921; two
    rounds without both kinds in the fits, 0.886 at 0.942 (the false suggestions it removed
    were mostly structural neighbours of a misfiled member); with the trust core of
    `evaluate_out_of_fold` too, 0.919 at 0.945, and 0.914 at 0.927 keeping doubted non-members
    in the fits, as here. A doubted member whose filing is right stays doubted: its own
    probability comes from a fold model that never saw it, in either round.
    """
    _, _, low, high, probs = calibrate(scores, truth)
    out = []
    for i in range(truth.shape[1]):
        t, p = truth[:, i], probs[:, i]
        out.append(np.flatnonzero(((t == 1) & (p <= low[i])) | ((t == 0) & (p >= high[i]))).astype(np.int64))
    return out


def _wrap(enabled: bool | None, desc: str, total: int) -> Any:
    def wrap(items: Iterable[T]) -> Iterator[T]:
        return progress_bar(items, total=total, desc=desc, enabled=enabled)
    return wrap


def sparse_rows(parts: Sequence[tuple[np.ndarray, np.ndarray, np.ndarray]],
                shape: tuple[int, int]) -> sparse.csr_matrix:
    """One (members, classes) CSR matrix of the (rows, class columns, values) of each chunk."""
    rows = np.concatenate([p[0] for p in parts]).astype(np.int32)
    cols = np.concatenate([p[1] for p in parts]).astype(np.int32)
    # Chunks come in any class order: sorted by row, then class.
    order = np.lexsort((cols, rows))
    cols = cols[order]
    values = np.concatenate([p[2] for p in parts])[order]
    ptr = np.zeros(shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=shape[0]), out=ptr[1:])
    return sparse.csr_matrix((values, cols, ptr), shape=shape)


def train(ontology: Ontology, config: Config, store: Store, exclude: Iterable[str] = (),
          revision: str = "", progress: bool | None = False, *,
          classes_per_chunk: int | None = None) -> Model | None:
    """Train on `ontology` without the terms in `exclude`; None when no class can be learned.

    The classes are fitted, scored and calibrated `classes_per_chunk` at a time (default: as
    many as keep SCORE_CELLS out-of-fold scores); the model does not depend on it.
    """
    settings = config.model
    excluded = sorted(set(exclude))
    candidates = members_of(ontology, config, excluded)
    bits = cached_bits([m.smiles for m in candidates], settings, store, config.limits,
                       wrap=_wrap(progress, "fingerprints", len(candidates)))
    members = [m for m, b in zip(candidates, bits) if b is not None]
    kept: list[np.ndarray] = [b for b in bits if b is not None]
    classes = eligible_classes(members, ontology, settings)
    if not classes:
        return None
    n, n_classes = len(members), len(classes)
    x = features(kept, settings.size)
    y = labels(members, classes)
    positives = columns(y)
    k = max(2, settings.folds)
    rng = np.random.default_rng(settings.seed)
    fold = (rng.permutation(n) % k).astype(np.int16)
    weights = np.zeros((settings.size, n_classes), dtype=np.float16)
    bias = np.zeros(n_classes, dtype=np.float32)
    calib = np.zeros((n_classes, 2), dtype=np.float32)
    thresholds, low, high = (np.zeros(n_classes, dtype=np.float32) for _ in range(3))
    oof: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
    width = classes_per_chunk or chunk_width(n, n_classes)
    negatives = Negatives(members, classes, ontology)

    def settle(chunk: Chunk, doubted: Sequence[np.ndarray]) -> None:
        """A chunk's classes, final: calibrated without their doubted rows, weights kept."""
        cols = chunk.cols
        calib[cols], thresholds[cols], low[cols], high[cols], probs = calibrate(
            chunk.scores, chunk_truth(chunk, positives, doubted))
        # The model for terms outside training is the mean of the fold models: no extra fit,
        # and its scores keep the scale the out-of-fold Platt parameters were fitted on.
        weights[:, cols] = (chunk.total / k).astype(np.float16)
        bias[cols] = chunk.total_bias / k
        # Only the out-of-fold probabilities above the floor are kept (as stored, but float32:
        # the figures below are measured on them, and no decision reads one at the floor).
        rows, at = np.nonzero(probs > OOF_FLOOR)
        oof.append((rows.astype(np.int32), cols[at], probs[rows, at]))

    # Round one finds the filings its out-of-fold model confidently contradicts; round two
    # fits again, without them, the classes where a doubted filing is a member's (see
    # `doubted_rows`). The others' second fits would equal their first: they are settled now.
    doubted: list[np.ndarray] = [np.zeros(0, np.int64)] * n_classes
    refit: list[int] = []
    for chunk in fold_fits(x, positives, negatives, fold, settings.seed, width, progress,
                           desc="class fits, first round"):
        truth = chunk_truth(chunk, positives)
        same: list[int] = []
        for i, rows in enumerate(doubted_rows(chunk.scores, truth)):
            j = int(chunk.cols[i])
            doubted[j] = rows
            if (truth[rows, i] == 1).any():
                refit.append(j)
            else:
                same.append(i)
        if same:
            settle(Chunk(chunk.cols[same], chunk.scores[:, same], chunk.total[:, same],
                         chunk.total_bias[same]), doubted)
        del chunk, truth
    for chunk in fold_fits(x, positives, negatives, fold, settings.seed, width, progress, doubted,
                           classes=refit):
        settle(chunk, doubted)
        del chunk
    del x
    oof_probs = sparse_rows(oof, (n, n_classes))
    oof.clear()
    ancestors, disjoint = hierarchy_of(ontology, classes)
    meta: dict[str, Any] = {
        "format": FORMAT, "classes": classes, "settings": asdict(settings), "revision": revision,
        "blobs": {s.path: s.blob for s in ontology.snapshots},
        "excluded": excluded,
        "estimator": (f"linear SVM per class (C={SVM_C}) on up to {row_cap(n_classes)} members, as many of "
                      f"its parents' other members and as many others, without the filings a first round "
                      f"confidently contradicts; mean of {k} fold models, + Platt"),
        "ancestors": {c: sorted(a) for c, a in ancestors.items()},
        "disjoint": [list(p) for p in disjoint],
    }
    # Similarity to members is measured on the fingerprint's first part (Model.similarity_bits).
    end = settings.part_size
    first = [b[:np.searchsorted(b, end)] for b in kept] if end < settings.size else kept
    indptr = np.zeros(len(first) + 1, dtype=np.int64)
    np.cumsum([len(b) for b in first], out=indptr[1:])
    flat = np.concatenate(first)
    arrays: dict[str, np.ndarray] = {"weights": weights, "bias": bias,
              "platt": calib, "thresholds": thresholds, "low": low, "high": high, "ref_fold": fold,
              "oof_ptr": oof_probs.indptr.astype(np.int64), "oof_class": oof_probs.indices.astype(np.int32),
              "oof_prob": oof_probs.data.astype(np.float16),
              "member_hash": np.array([bits_hash(b) for b in kept], dtype=np.uint64),
              "member_ids": np.array([m.id.encode() for m in members], dtype=np.bytes_),
              "digests": np.array([m.digest.encode() for m in members], dtype=np.bytes_),
              **Neighbours.index(indptr, flat, end)}
    model = Model(arrays, meta)
    figures, summary = evaluate_out_of_fold(model, kept, fold, oof_probs, y,
                                            core=trust_core(settings))
    model.meta["figures"] = {c: list(f) for c, f in figures.items()}
    model.meta["summary"] = summary
    return Model(arrays, model.meta)


def evaluate_out_of_fold(model: Model, bits: Sequence[np.ndarray], fold: np.ndarray,
                         probs: sparse.csr_matrix, y: sparse.csr_matrix,
                         cells: int = 4_000_000, core: int = 5) -> tuple[dict[str, ClassFigures], dict[str, Any]]:
    """k-fold figures per class, with abstention and the ontology's consistency applied.

    `probs` and `y` are sparse (members, classes) out-of-fold probabilities and memberships;
    the decisions are made on dense runs of about `cells` (member, class) pairs. `core`: the
    members a class must keep, those the model contradicts set aside, for its trust F1 to be
    measured without them (`trust_core`).
    """
    # The neighbour search grows with members squared: past EVAL_SAMPLE members, similarity
    # (hence abstention) is measured on a fixed random sample and the rest count as judged.
    sims = np.ones(len(bits), dtype=np.float32)
    sample = np.arange(len(bits))
    if len(bits) > EVAL_SAMPLE:
        sample = np.sort(np.random.default_rng(0).choice(len(bits), EVAL_SAMPLE, replace=False))
    # A query's candidate members grow with the members: queries at a time are kept near
    # 4M / members, 20 at 200k (256 at once took 856 MB there, and longer than 20 at once).
    _, sims[sample] = model.neighbours().nearest(model.similarity_bits([bits[i] for i in sample.tolist()]),
                                                 fold[sample].astype(np.int64),
                                                 chunk=max(8, min(256, 4_000_000 // max(len(bits), 1))))
    n, k = y.shape
    abstained = np.zeros(n, dtype=bool)
    measured = np.zeros(n, dtype=bool)
    measured[sample] = True
    tp, fp, fn, tp_t, fn_t, n_doubted, members, asked, refused = (np.zeros(k, dtype=np.int64) for _ in range(9))
    step = max(1, min(4096, cells // max(k, 1)))
    for start in range(0, n, step):
        part = slice(start, min(start + step, n))
        dense = probs[part].toarray()
        decided = model.decisions(dense, sims[part])
        abstained[part] = decided.abstains
        judged = ~decided.abstains
        in_class = y[part].toarray().astype(bool)
        # Per class: of its members whose similarity was measured, those abstained on.
        inside = in_class & measured[part][:, None]
        asked += inside.sum(0)
        refused += (inside & decided.abstains[:, None]).sum(0)
        yt, yp = in_class[judged], decided.closed[judged, :k]
        tp += (yt & yp).sum(0)
        fp += (~yt & yp).sum(0)
        fn += (yt & ~yp).sum(0)
        # Trust: the same F1 with the members whose filing the model confidently contradicts
        # (probability at or below the class's `low`, what the review reports) set aside,
        # while at least `core` members are left. Misfiled members lower the plain F1 of
        # exactly the classes they were put in, so the plain F1 would silence the model where
        # it is needed; the members left must still be found, and few non-members taken for
        # them, for the trust F1 to reach `min_f1`: a class the model cannot learn stays
        # untrusted however many members it contradicts. (A probability left out of the
        # sparse rows is below every `low`.)
        doubted = yt & (dense[judged] <= model.arrays["low"])
        n_doubted += doubted.sum(0)
        members += yt.sum(0)
        tp_t += (yt & yp & ~doubted).sum(0)
        fn_t += (yt & ~yp & ~doubted).sum(0)
    support = np.diff(sparse.csc_matrix(y).indptr)
    figures = {}
    for j, cls in enumerate(model.classes):
        p = tp[j] / (tp[j] + fp[j]) if tp[j] + fp[j] else 0.0
        r = tp[j] / (tp[j] + fn[j]) if tp[j] + fn[j] else 0.0
        f1 = 2 * p * r / (p + r) if p + r else 0.0
        trust = f1
        if 0 < n_doubted[j] and members[j] - n_doubted[j] >= core:
            trust = 2 * tp_t[j] / max(2 * tp_t[j] + fp[j] + fn_t[j], 1)
        figures[cls] = ClassFigures(round(p, 4), round(r, 4), round(f1, 4), int(support[j]),
                                    round(float(max(trust, f1)), 4),
                                    round(float(refused[j] / asked[j]), 4) if asked[j] else 0.0)
    micro_p = tp.sum() / max(tp.sum() + fp.sum(), 1)
    micro_r = tp.sum() / max(tp.sum() + fn.sum(), 1)
    summary = {"members": n, "folds": int(fold.max()) + 1 if len(fold) else 0,
               "abstention": round(float(abstained[sample].mean()), 4) if n else 0.0,
               "abstention_measured_on": len(sample),
               "micro_f1": round(float(2 * micro_p * micro_r / max(micro_p + micro_r, 1e-12)), 4),
               "macro_f1": round(float(np.mean([f.f1 for f in figures.values()])), 4)}
    return figures, summary
