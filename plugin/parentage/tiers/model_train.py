"""Training the model tier (scikit-learn): one linear SVM per class on fingerprint bits.

The estimator was chosen by measurement on the functional-group benchmark
(tests/benchmarks/bench_model.py prints the comparison): linear SVMs on bit presence beat
one-vs-rest logistic regression on counts, a kNN Tanimoto blend and a one-layer perceptron.

Each class learns from a bounded set: all its members, members of its parents that are not in
it (the negatives that look most alike), and a capped random sample of the rest. Every member
is then scored by the fold model that never saw it, so Platt parameters, thresholds, margins
and figures are fitted on out-of-fold scores of all members, whatever was sampled. The fits
run in two processes where there are two cores. Everything stored is a numpy array or JSON.
"""
from __future__ import annotations

import multiprocessing
import os
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import asdict
from typing import Any, TypeVar

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


def labels(members: Sequence[Member], classes: Sequence[str]) -> np.ndarray:
    index = {c: j for j, c in enumerate(classes)}
    y = np.zeros((len(members), len(classes)), dtype=np.int8)
    for i, m in enumerate(members):
        for c in m.ancestors:
            j = index.get(c)
            if j is not None:
                y[i, j] = 1
    return y


def hard_negatives(members: Sequence[Member], classes: Sequence[str], ontology: Ontology) -> list[np.ndarray]:
    """Per class, the members of its direct parents that are not its members."""
    parents = []
    for cls in classes:
        term = ontology.terms.get(cls)
        parents.append([p for p in (term.parents if term is not None else ()) if p != cls])
    wanted = sorted({p for ps in parents for p in ps} | set(classes))
    column = {c: j for j, c in enumerate(wanted)}
    inside = labels(members, wanted).astype(bool)
    everyone = np.ones(len(members), dtype=bool)
    out = []
    for cls, ps in zip(classes, parents):
        # A parent that is not a defined term (dangling) or has no member here counts as the root.
        rows = np.zeros(len(members), dtype=bool)
        for p in ps:
            rows |= inside[:, column[p]] if p in ontology.terms else everyone
        out.append(np.flatnonzero(rows & ~inside[:, column[cls]]))
    return out


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


def _fit_task(task: tuple[int, int]) -> tuple[int, int, tuple[np.ndarray, np.ndarray, float]]:
    f, j = task
    w = _WORK
    rng = np.random.default_rng([w["seed"], f, j])
    keep = w["keep"][f]
    positives, hard = w["positives"][j], w["hard"][j]
    pos, neg = training_rows(positives[keep[positives]], hard[keep[hard]], w["pools"][f],
                             w["yt"][j] == 1, rng, w["cap"])
    return f, j, fit_class(w["x"], pos, neg, w["seed"])


def _workers() -> int:
    """Two where two cores are ours and processes can fork (the workers share `_WORK`)."""
    if "fork" not in multiprocessing.get_all_start_methods():
        return 1
    return max(1, min(2, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else 1))


def fold_fits(x: sparse.csr_matrix, y: np.ndarray, fold: np.ndarray, hard: list[np.ndarray],
              seed: int, progress: bool | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(out-of-fold scores, summed weights (size, classes), summed bias) over the k fold models.

    The fits run in two forked processes where the machine has two cores: each fit holds the
    GIL for much of its ~8 ms, so two threads took 68.8 s where two processes took 43.0 s
    (the generated 50k ontology's fold fits). A second round of fits without the labels the
    first round contradicted was tried and dropped: on the functional-group benchmark with
    injected errors it raised confident opposition to correct parents sixfold.
    """
    n, k_classes = y.shape
    k = int(fold.max()) + 1
    scores = np.zeros((n, k_classes), dtype=np.float32)
    total = np.zeros((x.shape[1], k_classes), dtype=np.float32)
    total_bias = np.zeros(k_classes, dtype=np.float32)
    yt = np.ascontiguousarray(y.T)
    _WORK.update(x=x, yt=yt, seed=seed, cap=row_cap(k_classes), hard=hard, positives=[np.flatnonzero(r) for r in yt],
                 keep=[fold != f for f in range(k)], pools=[np.flatnonzero(fold != f) for f in range(k)])
    tasks = [(f, j) for f in range(k) for j in range(k_classes)]
    xs = x.astype(np.float32)
    current = np.zeros((x.shape[1], k_classes), dtype=np.float32)
    bias = np.zeros(k_classes, dtype=np.float32)

    def finish(f: int) -> None:
        # Results come back in order, fold by fold: a fold's matrix scores its own members and
        # joins the sum as soon as its last class is fitted, so one matrix is held at a time.
        out = fold == f
        scores[out] = xs[out] @ current + bias
        total[:] += current
        total_bias[:] += bias

    workers = _workers()
    pool = multiprocessing.get_context("fork").Pool(workers) if workers > 1 and len(tasks) > 50 else None
    try:
        done = pool.imap(_fit_task, tasks, chunksize=16) if pool is not None else map(_fit_task, tasks)
        for f, j, (used, coef, b) in progress_bar(done, total=len(tasks), desc="class fits",
                                                  enabled=progress):
            current[used, j] = coef
            bias[j] = b
            if j == k_classes - 1:
                finish(f)
                current[:] = 0.0
    finally:
        if pool is not None:
            pool.terminate()
        _WORK.clear()
    return scores, total, total_bias


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
        t = y[start:start + 4096].astype(bool)
        pos += np.bincount(b[t], minlength=k * BINS).reshape(k, BINS)
        neg += np.bincount(b[~t], minlength=k * BINS).reshape(k, BINS)
    return lo, width, pos, neg


def platt(centres: np.ndarray, pos: np.ndarray, neg: np.ndarray, iterations: int = 50) -> np.ndarray:
    """Per class (a, b) with p = sigmoid(a * score + b), by Newton steps on binned scores.

    Targets use Platt's own smoothing ((N+ + 1)/(N+ + 2), 1/(N- + 2)) so separable classes
    keep a finite slope.
    """
    k = len(centres)
    n_pos, n_neg = pos.sum(1, keepdims=True), neg.sum(1, keepdims=True)
    hi_t, lo_t = (n_pos + 1) / (n_pos + 2), 1 / (n_neg + 2)
    weight = pos + neg
    target = np.where(weight > 0, (pos * hi_t + neg * lo_t) / np.maximum(weight, 1), 0.0)
    ab = np.zeros((k, 2))
    ab[:, 1] = np.log((n_pos[:, 0] + 1) / (n_neg[:, 0] + 1))
    for _ in range(iterations):
        z = ab[:, :1] * centres + ab[:, 1:]
        p = 1 / (1 + np.exp(-np.clip(z, -50, 50)))
        g = weight * (p - target)
        h = weight * p * (1 - p) + 1e-9
        ga, gb = (g * centres).sum(1), g.sum(1)
        haa, hab, hbb = (h * centres ** 2).sum(1), (h * centres).sum(1), h.sum(1) + 1e-6
        det = haa * hbb - hab ** 2
        det = np.where(np.abs(det) < 1e-12, 1e-12, det)
        step_a = (hbb * ga - hab * gb) / det
        step_b = (haa * gb - hab * ga) / det
        ab[:, 0] -= step_a
        ab[:, 1] -= step_b
        if max(np.abs(step_a).max(), np.abs(step_b).max()) < 1e-5:
            break
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


def _wrap(enabled: bool | None, desc: str, total: int) -> Any:
    def wrap(items: Iterable[T]) -> Iterator[T]:
        return progress_bar(items, total=total, desc=desc, enabled=enabled)
    return wrap


def sparse_rows(probs: np.ndarray, floor: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """CSR (pointers, class indices, probabilities as float16) of the entries above `floor`."""
    rows, cols = np.nonzero(probs > floor)
    ptr = np.zeros(len(probs) + 1, dtype=np.int64)
    np.cumsum(np.bincount(rows, minlength=len(probs)), out=ptr[1:])
    return ptr, cols.astype(np.int32), probs[rows, cols].astype(np.float16)


def train(ontology: Ontology, config: Config, store: Store, exclude: Iterable[str] = (),
          revision: str = "", progress: bool | None = False) -> Model | None:
    """Train on `ontology` without the terms in `exclude`; None when no class can be learned."""
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
    x = features(kept, settings.size)
    y = labels(members, classes)
    k = max(2, settings.folds)
    rng = np.random.default_rng(settings.seed)
    fold = (rng.permutation(len(members)) % k).astype(np.int16)
    hard = hard_negatives(members, classes, ontology)
    scores, total, total_bias = fold_fits(x, y, fold, hard, settings.seed, progress)
    calib, thresholds, low, high, probs = calibrate(scores, y)
    del x
    del scores
    ancestors, disjoint = hierarchy_of(ontology, classes)
    oof_ptr, oof_class, oof_prob = sparse_rows(probs, OOF_FLOOR)
    meta: dict[str, Any] = {
        "format": FORMAT, "classes": classes, "settings": asdict(settings), "revision": revision,
        "blobs": {s.path: s.blob for s in ontology.snapshots},
        "excluded": excluded,
        "estimator": (f"linear SVM per class (C={SVM_C}) on up to {row_cap(len(classes))} members, as many of "
                      f"its parents' other members and as many others; mean of {k} fold models, + Platt"),
        "ancestors": {c: sorted(a) for c, a in ancestors.items()},
        "disjoint": [list(p) for p in disjoint],
    }
    indptr = np.zeros(len(kept) + 1, dtype=np.int64)
    np.cumsum([len(b) for b in kept], out=indptr[1:])
    flat = np.concatenate(kept)
    # The model for terms outside training is the mean of the fold models: no extra fit, and
    # its scores keep the scale the out-of-fold Platt parameters were fitted on.
    arrays: dict[str, np.ndarray] = {"weights": (total / k).astype(np.float16), "bias": (total_bias / k).astype(np.float32),
              "platt": calib, "thresholds": thresholds, "low": low, "high": high, "ref_fold": fold,
              "oof_ptr": oof_ptr, "oof_class": oof_class, "oof_prob": oof_prob,
              "member_hash": np.array([bits_hash(b) for b in kept], dtype=np.uint64),
              "member_ids": np.array([m.id.encode() for m in members], dtype=np.bytes_),
              "digests": np.array([m.digest.encode() for m in members], dtype=np.bytes_),
              **Neighbours.index(indptr, flat, settings.size)}
    model = Model(arrays, meta)
    figures, summary = evaluate_out_of_fold(model, kept, fold, probs, y)
    model.meta["figures"] = {c: list(f) for c, f in figures.items()}
    model.meta["summary"] = summary
    return Model(arrays, model.meta)


def evaluate_out_of_fold(model: Model, bits: Sequence[np.ndarray], fold: np.ndarray, probs: np.ndarray,
                         y: np.ndarray) -> tuple[dict[str, ClassFigures], dict[str, Any]]:
    """k-fold figures per class, with abstention and the ontology's consistency applied."""
    # The neighbour search grows with members squared: past EVAL_SAMPLE members, similarity
    # (hence abstention) is measured on a fixed random sample and the rest count as judged.
    sims = np.ones(len(bits), dtype=np.float32)
    sample = np.arange(len(bits))
    if len(bits) > EVAL_SAMPLE:
        sample = np.sort(np.random.default_rng(0).choice(len(bits), EVAL_SAMPLE, replace=False))
    _, sims[sample] = model.neighbours().nearest([bits[i] for i in sample.tolist()],
                                                 fold[sample].astype(np.int64))
    k = len(model.classes)
    predicted = np.zeros(y.shape, dtype=bool)
    abstained = np.zeros(len(y), dtype=bool)
    for start in range(0, len(y), 4096):
        part = slice(start, min(start + 4096, len(y)))
        decided = model.decisions(probs[part], sims[part])
        predicted[part] = decided.closed[:, :k]
        abstained[part] = decided.abstains
    judged = ~abstained
    yt, yp = y[judged].astype(bool), predicted[judged]
    tp = (yt & yp).sum(0).astype(float)
    fp = (~yt & yp).sum(0).astype(float)
    fn = (yt & ~yp).sum(0).astype(float)
    # Trust: the same F1 with the members whose filing the model confidently contradicts
    # (probability at or below the class's `low`, what the review reports) set aside, while
    # they are at most half of the class. Misfiled members lower the plain F1 of exactly the
    # classes they were put in, so the plain F1 would silence the model where it is needed.
    doubted = yt & (probs[judged] <= model.arrays["low"])
    n_doubted, members = doubted.sum(0), yt.sum(0)
    tp_t = (yt & yp & ~doubted).sum(0).astype(float)
    fn_t = (yt & ~yp & ~doubted).sum(0).astype(float)
    figures = {}
    for j, cls in enumerate(model.classes):
        p = tp[j] / (tp[j] + fp[j]) if tp[j] + fp[j] else 0.0
        r = tp[j] / (tp[j] + fn[j]) if tp[j] + fn[j] else 0.0
        f1 = 2 * p * r / (p + r) if p + r else 0.0
        trust = f1
        if 0 < n_doubted[j] <= members[j] / 2:
            trust = 2 * tp_t[j] / max(2 * tp_t[j] + fp[j] + fn_t[j], 1.0)
        figures[cls] = ClassFigures(round(p, 4), round(r, 4), round(f1, 4), int(y[:, j].sum()),
                                    round(float(max(trust, f1)), 4))
    micro_p = tp.sum() / max(tp.sum() + fp.sum(), 1)
    micro_r = tp.sum() / max(tp.sum() + fn.sum(), 1)
    summary = {"members": len(y), "folds": int(fold.max()) + 1 if len(fold) else 0,
               "abstention": round(float(abstained[sample].mean()), 4) if len(y) else 0.0,
               "abstention_measured_on": len(sample),
               "micro_f1": round(float(2 * micro_p * micro_r / max(micro_p + micro_r, 1e-12)), 4),
               "macro_f1": round(float(np.mean([f.f1 for f in figures.values()])), 4)}
    return figures, summary
