"""Training the model tier (scikit-learn): one-vs-rest linear SVMs on fingerprint bits.

The estimator was chosen by measurement on the functional-group benchmark
(tests/benchmarks/bench_model.py prints the comparison): linear SVMs on bit presence beat
one-vs-rest logistic regression on counts, a kNN Tanimoto blend and a one-layer perceptron.
Scores become probabilities through Platt scaling fitted on out-of-fold scores; per-class
thresholds maximise out-of-fold F1. Everything stored is a numpy array or JSON.
"""
from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from dataclasses import asdict
from typing import Any, TypeVar

import numpy as np
from scipy import sparse
from sklearn.linear_model import LogisticRegression
from sklearn.multiclass import OneVsRestClassifier
from sklearn.svm import LinearSVC

from parentage.chem.fingerprints import cached_bits
from parentage.config import Config
from parentage.progress import progress as progress_bar
from parentage.snapshot import Ontology
from parentage.store import Store
from parentage.tiers.model import (
    FORMAT,
    ClassFigures,
    Member,
    Model,
    Neighbours,
    eligible_classes,
    hierarchy_of,
    members_of,
)

T = TypeVar("T")
LOW_FRACTION = 0.1  # opposing needs at most a tenth of the threshold, too
# Chosen on the injected-error benchmark among 0.005-0.05 and 0.7-0.9 (bench_model.py).
OPPOSE_P = 0.01
SUGGEST_P = 0.8
EVAL_SAMPLE = 4000
SVM_C = 0.5  # chosen on the functional-group benchmark among 0.1, 0.5, 1 (bench_model.py)
# Measured on one fold of the 50k speed set: tol 1e-2 fits in 3/4 of the time of 1e-4 at the
# same held-out micro-F1 (0.9948 vs 0.9952); 1e-1 loses half a point.
SVM_TOL = 1e-2


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


def fit_linear(x: sparse.csr_matrix, y: np.ndarray, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(weights classes x size, bias) of one-vs-rest linear SVMs."""
    estimator = OneVsRestClassifier(LinearSVC(C=SVM_C, dual=True, tol=SVM_TOL, max_iter=1000,
                                              random_state=seed))
    estimator.fit(x, y)
    coef = np.vstack([e.coef_.ravel() for e in estimator.estimators_]).astype(np.float32)
    bias = np.array([float(e.intercept_[0]) for e in estimator.estimators_], dtype=np.float32)
    return coef, bias


def platt(scores: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Per class (a, b) with p = sigmoid(a * score + b), fitted on out-of-fold scores."""
    out = np.zeros((scores.shape[1], 2), dtype=np.float32)
    for j in range(scores.shape[1]):
        fit = LogisticRegression(C=1e4).fit(scores[:, j:j + 1], y[:, j])
        out[j] = float(fit.coef_[0, 0]), float(fit.intercept_[0])
    return out


def best_thresholds(probs: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(threshold maximising F1, opposing cutoff, suggesting cutoff) per class, out-of-fold."""
    thr = np.full(probs.shape[1], 0.5, dtype=np.float32)
    for j in range(probs.shape[1]):
        p, t = probs[:, j], y[:, j]
        order = np.argsort(-p, kind="stable")
        ps, ts = p[order], t[order]
        tp = np.cumsum(ts)
        fp = np.cumsum(1 - ts)
        f1 = 2 * tp / (tp + fp + ts.sum())
        # Only cut between distinct values, half way, so ties fall on one side.
        distinct = np.append(ps[1:] < ps[:-1], True)
        k = int(np.argmax(np.where(distinct, f1, -1)))
        nxt = ps[k + 1] if k + 1 < len(ps) else 0.0
        thr[j] = float(np.clip((ps[k] + nxt) / 2, 0.02, 0.98))
    # Contradicting the curation needs more than the decision threshold. The probabilities are
    # Platt-calibrated on out-of-fold scores, so a cutoff reads as a rate: at p <= OPPOSE_P at
    # most one term in a hundred with that score was filed under the class, at p >= SUGGEST_P
    # at least four in five were. A quantile of the members' own scores would sink to zero as
    # soon as a few members are misfiled, which is what we look for.
    low = np.maximum(np.minimum(OPPOSE_P, thr * LOW_FRACTION), 1e-4).astype(np.float32)
    high = np.maximum(SUGGEST_P, thr).astype(np.float32)
    return thr, low, high


def _wrap(enabled: bool | None, desc: str, total: int) -> Any:
    def wrap(items: Iterable[T]) -> Iterator[T]:
        return progress_bar(items, total=total, desc=desc, enabled=enabled)
    return wrap


def train(ontology: Ontology, config: Config, store: Store, exclude: Iterable[str] = (),
          revision: str = "", progress: bool | None = False) -> Model | None:
    """Train on `ontology` without the terms in `exclude`; None when no class can be learned."""
    settings = config.model
    excluded = sorted(set(exclude))
    candidates = members_of(ontology, config, excluded)
    bits = cached_bits([m.smiles for m in candidates], settings, store, config.limits,
                       wrap=_wrap(progress, "fingerprints", len(candidates)))
    members = [m for m, b in zip(candidates, bits) if b is not None]
    kept = [b for b in bits if b is not None]
    classes = eligible_classes(members, ontology, settings)
    if not classes:
        return None
    x = features(kept, settings.size)  # type: ignore[arg-type]
    y = labels(members, classes)
    k = max(2, settings.folds)
    rng = np.random.default_rng(settings.seed)
    fold = (rng.permutation(len(members)) % k).astype(np.int16)
    # (models, bits, classes): a query's scores gather one row per set bit.
    weights = np.zeros((k + 1, settings.size, len(classes)), dtype=np.float32)
    bias = np.zeros((k + 1, len(classes)), dtype=np.float32)
    scores = np.zeros(y.shape, dtype=np.float32)
    for f in progress_bar(range(k), total=k, desc="folds", enabled=progress):
        inside = fold != f
        coef, bias[f + 1] = fit_linear(x[inside], y[inside], settings.seed)
        weights[f + 1] = coef.T
        scores[~inside] = x[~inside] @ coef.T + bias[f + 1]
    # The model for terms outside training is the mean of the fold models: one fit fewer, and
    # its scores keep the scale the out-of-fold Platt parameters were fitted on.
    weights[0] = weights[1:].mean(axis=0)
    bias[0] = bias[1:].mean(axis=0)
    calib = platt(scores, y)
    probs = 1.0 / (1.0 + np.exp(-np.clip(scores * calib[:, 0] + calib[:, 1], -50, 50)))
    thresholds, low, high = best_thresholds(probs, y)
    ancestors, disjoint = hierarchy_of(ontology, classes)
    meta: dict[str, Any] = {
        "format": FORMAT, "classes": classes, "settings": asdict(settings), "revision": revision,
        "blobs": {s.path: s.blob for s in ontology.snapshots},
        "excluded": excluded, "estimator": f"one-vs-rest LinearSVC(C={SVM_C}), mean of {k} fold models, + Platt",
        "ancestors": {c: sorted(a) for c, a in ancestors.items()},
        "disjoint": [list(p) for p in disjoint],
    }
    arrays = {"weights": weights, "bias": bias, "platt": calib, "thresholds": thresholds,
              "low": low, "high": high, "ref_fold": fold,
              "member_ids": np.array([m.id.encode() for m in members], dtype=np.bytes_),
              "digests": np.array([m.digest.encode() for m in members], dtype=np.bytes_),
              **Neighbours.index(x.indptr.astype(np.int64), x.indices, settings.size)}
    model = Model(arrays, meta)
    figures, summary = evaluate_out_of_fold(model, kept, fold, probs, y)  # type: ignore[arg-type]
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
    predicted = np.zeros_like(y)
    abstained = np.zeros(len(y), dtype=bool)
    index = {c: j for j, c in enumerate(model.classes)}
    near = np.full(len(y), -1, dtype=np.int64)
    for start in range(0, len(y), 4096):
        part = slice(start, min(start + 4096, len(y)))
        rows = model.verdict_rows([""] * (part.stop - start), probs[part], sims[part], near[part],
                                 None, opposing=False)
        for i, verdicts in enumerate(rows, start):
            if verdicts and verdicts[0].opinion == "abstains":
                abstained[i] = True
                continue
            for v in verdicts:
                j = index.get(v.cls)
                if j is not None and v.opinion == "supports":
                    predicted[i, j] = 1
    judged = ~abstained
    yt, yp = y[judged], predicted[judged]
    tp = (yt & yp).sum(0).astype(float)
    fp = ((1 - yt) & yp).sum(0).astype(float)
    fn = (yt & (1 - yp)).sum(0).astype(float)
    figures = {}
    for j, cls in enumerate(model.classes):
        p = tp[j] / (tp[j] + fp[j]) if tp[j] + fp[j] else 0.0
        r = tp[j] / (tp[j] + fn[j]) if tp[j] + fn[j] else 0.0
        f1 = 2 * p * r / (p + r) if p + r else 0.0
        figures[cls] = ClassFigures(round(p, 4), round(r, 4), round(f1, 4), int(y[:, j].sum()))
    micro_p = tp.sum() / max(tp.sum() + fp.sum(), 1)
    micro_r = tp.sum() / max(tp.sum() + fn.sum(), 1)
    summary = {"members": len(y), "folds": int(fold.max()) + 1 if len(fold) else 0,
               "abstention": round(float(abstained[sample].mean()), 4) if len(y) else 0.0,
               "abstention_measured_on": len(sample),
               "micro_f1": round(float(2 * micro_p * micro_r / max(micro_p + micro_r, 1e-12)), 4),
               "macro_f1": round(float(np.mean([f.f1 for f in figures.values()])), 4)}
    return figures, summary
