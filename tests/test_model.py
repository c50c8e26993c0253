"""The model tier on a subset of the functional-group benchmark (tests/fgbench.py).

Outside reference: RDKit's shipped Functional_Group_Hierarchy.txt SMARTS, matched by RDKit, are
the hidden truth; the members are RDKit's shipped NCI and PAINS test molecules. The model never
sees the SMARTS. The full-size run is tests/benchmarks/bench_model.py.
"""
from __future__ import annotations

import os
import subprocess
import sys
from dataclasses import replace

import pytest

sys.path.insert(0, os.path.dirname(__file__))
import fgbench
import numpy as np
from rdkit import Chem, DataStructs

from parentage.arbitration import arbitrate
from parentage.config import Config, ModelSettings
from parentage.snapshot import Ontology, Snapshot, Term
from parentage.store import Store
from parentage.tiers.model import Member, Model, load_or_train, model_key
from parentage.tiers.model_train import Negatives, _histograms, calibrate, chunk_width, platt, train

SETTINGS = ModelSettings(size=16384, min_members=20)
CONFIG = replace(Config(), model=SETTINGS)


def ontology_of(mols: list[fgbench.Molecule], parents: dict[str, tuple[str, ...]] | None = None,
                extra: tuple[Term, ...] = (), blob: str | None = None) -> Ontology:
    terms = [Term(fgbench.ROOT, "molecule")]
    terms += [Term(g.id, g.label, (g.parent,)) for g in fgbench.groups()]
    for m in mols:
        chosen = (parents or {}).get(m.id) or tuple(fgbench.most_specific(fgbench.true_classes(m.id)))
        terms.append(Term(m.id, m.source, chosen, properties=(("smiles", m.smiles),)))
    return Ontology("base", [Snapshot("fgb.obo", blob, [*terms, *extra])])


@pytest.fixture(scope="module")
def subset() -> tuple[list[fgbench.Molecule], list[fgbench.Molecule]]:
    train_mols, test_mols = fgbench.split(seed=0)
    return train_mols[:3000], test_mols[:600]


@pytest.fixture(scope="module")
def model(subset: tuple[list[fgbench.Molecule], list[fgbench.Molecule]]) -> Model:
    trained = train(ontology_of(subset[0]), CONFIG, Store(None), revision="base")
    assert trained is not None
    return trained


def supported(verdicts: list, classes: set[str]) -> set[str]:
    return {v.cls for v in verdicts if v.opinion == "supports" and v.cls in classes}


def test_held_out_f1_against_rdkit_smarts(model: Model, subset: tuple) -> None:
    test_mols = subset[1]
    out = model.predict({m.id: m.smiles for m in test_mols}, evidence=False)
    classes = set(model.classes)
    tp = fp = fn = abstained = 0
    for m in test_mols:
        verdicts = out[m.id]
        if verdicts and verdicts[0].opinion == "abstains":
            abstained += 1
            continue
        truth = fgbench.true_classes(m.id) & classes  # RDKit's SMARTS matches: the reference
        guess = supported(verdicts, classes)
        tp += len(truth & guess)
        fp += len(guess - truth)
        fn += len(truth - guess)
    micro = 2 * tp / (2 * tp + fp + fn)
    # 3,000 training members (a fifth of the benchmark) score lower than the full run's 0.97.
    assert micro >= 0.93, micro
    # Fewer members mean fewer close neighbours: the full run abstains on under 5%.
    assert abstained / len(test_mols) <= 0.20
    assert model.summary["members"] == 3000
    assert set(model.class_f1) == classes


def test_predictions_closed_upward_and_specific_marked(model: Model, subset: tuple) -> None:
    out = model.predict({m.id: m.smiles for m in subset[1][:200]}, evidence=False)
    for verdicts in out.values():
        chosen = {v.cls for v in verdicts if v.opinion == "supports"}
        for v in verdicts:
            if v.opinion == "supports":
                # Ancestors from the benchmark's own nesting (fgbench.ancestors_of).
                assert set(fgbench.ancestors_of(v.cls)) <= chosen
                implied = any(v.cls in fgbench.ancestors_of(o) for o in chosen)
                assert v.evidence["specific"] is (not implied)


def test_disjoint_axiom_resolved_for_stronger_class(subset: tuple) -> None:
    groups = {g.key: g.id for g in fgbench.groups()}
    aromatic, halogen = groups["Amine.Aromatic"], groups["Halogen"]
    onto = ontology_of(subset[0])
    # Declare two classes disjoint that co-occur in real molecules (a chloroaniline has both).
    hal_term = onto.terms[halogen]._replace(disjoint_from=(aromatic,))
    onto = Ontology("base", [Snapshot("fgb.obo", None, [*(t for t in onto.terms.values()
                                                          if t.id != halogen), hal_term])])
    trained = train(onto, CONFIG, Store(None))
    assert trained is not None
    both = "Nc1ccc(Cl)cc1"  # 4-chloroaniline: an aromatic amine and an aryl halide
    verdicts = trained.predict({"X:1": both})["X:1"]
    chosen = {v.cls for v in verdicts if v.opinion == "supports"}
    assert not {aromatic, halogen} <= chosen
    assert chosen & {aromatic, halogen}  # the stronger one is kept


def test_abstains_on_unfamiliar_or_unreadable(model: Model) -> None:
    out = model.predict({"X:far": "F[S](F)(F)(F)(F)F", "X:bad": "C1CC(", "X:ok": "OC(=O)c1ccccc1"})
    assert [v.opinion for v in out["X:far"]] == ["abstains"]
    assert "min_similarity" in out["X:far"][0].evidence["reason"]
    assert out["X:far"][0].cls == ""
    assert [v.opinion for v in out["X:bad"]] == ["abstains"]
    acid = {g.key: g.id for g in fgbench.groups()}["CarboxylicAcid.Aromatic"]
    assert acid in supported(out["X:ok"], set(model.classes))  # benzoic acid, from memory


def test_evidence_atoms_lie_on_the_group(model: Model) -> None:
    nitro = {g.key: g for g in fgbench.groups()}["Nitro.Aromatic"]
    smiles = "O=[N+]([O-])c1ccc(C)cc1"  # 4-nitrotoluene (from memory)
    verdicts = model.predict({"X:n": smiles})["X:n"]
    ev = next(v.evidence for v in verdicts if v.cls == nitro.id and v.opinion == "supports")
    assert ev["bits"] and len(ev["atoms"]) == len(ev["bits"])
    # RDKit's match of the shipped SMARTS marks the group's atoms: the reference.
    mol = Chem.MolFromSmiles(smiles)
    group_atoms = {a for match in mol.GetSubstructMatches(Chem.MolFromSmarts(nitro.smarts)) for a in match}
    assert any(set(atoms) & group_atoms for atoms in ev["atoms"])


def test_training_members_judged_out_of_fold(model: Model, subset: tuple) -> None:
    member = subset[0][5]
    verdicts = model.predict({member.id: member.smiles})[member.id]
    # Its fold model never saw it, nor is it its own nearest neighbour.
    assert all(v.evidence.get("nearest") != member.id for v in verdicts)
    assert model.fold_of[member.id] >= 0


def test_nearest_member_matches_rdkit_tanimoto(model: Model, subset: tuple) -> None:
    """The pruned search is exact: the same best similarity as RDKit's BulkTanimotoSimilarity
    over RDKit's Morgan radius-2 fingerprints of the fingerprint's first part's size."""
    from rdkit.Chem import rdFingerprintGenerator

    from parentage.chem.fingerprints import fingerprint_bits

    generator = rdFingerprintGenerator.GetMorganGenerator(radius=2, fpSize=SETTINGS.part_size)
    vectors = [generator.GetFingerprint(Chem.MolFromSmiles(m.smiles)) for m in subset[0]]
    assert len(vectors) == len(model.member_ids)
    queries = [m.smiles for m in subset[1][:150]] + [m.smiles for m in subset[0][:150]]
    qbits = model.similarity_bits(fingerprint_bits(queries, SETTINGS))
    folds = np.array([-1] * 150 + [model.fold_of[m.id] for m in subset[0][:150]])
    index, best = model.neighbours().nearest(qbits, folds)
    ref_folds = np.array([model.fold_of[t] for t in model.member_ids])
    for i, smiles in enumerate(queries):
        query = generator.GetFingerprint(Chem.MolFromSmiles(smiles))
        assert sorted(query.GetOnBits()) == qbits[i].tolist()
        sims = np.array(DataStructs.BulkTanimotoSimilarity(query, vectors))  # RDKit: the reference
        if folds[i] >= 0:
            sims[ref_folds == folds[i]] = -1.0  # a training member is judged out of its fold
        assert best[i] == pytest.approx(sims.max(), abs=1e-6)
        # Of equally similar members the lowest-numbered, as a full scan (argmax) gives.
        assert index[i] == int(np.argmax(sims))


def _brute_nearest(queries: list[set[int]], refs: list[set[int]], folds: np.ndarray,
                   ref_folds: np.ndarray) -> tuple[list[int], list[float]]:
    """Tanimoto |A & B| / |A | B| by its definition over Python sets; first of the best."""
    index, best = [], []
    for q, fold in zip(queries, folds):
        sims = [len(q & r) / max(len(q | r), 1) if fold < 0 or ref_folds[k] != fold else -1.0
                for k, r in enumerate(refs)]
        top = max(sims)
        index.append(sims.index(top) if top >= 0 else -1)
        best.append(max(top, 0.0))
    return index, best


@pytest.mark.parametrize("seed, size, refs_n, spread", [
    pytest.param(0, 256, 400, 20, id="small bit space: many ties"),
    pytest.param(1, 4096, 1500, 60, id="skewed bit frequencies"),
    pytest.param(2, 2048, 300, 8, id="few bits per set"),
])
def test_nearest_member_exact_on_random_sets(seed: int, size: int, refs_n: int, spread: int) -> None:
    """Every pruning step against the definition, with folds, ties, empty and unseen sets."""
    from parentage.tiers.model import Neighbours

    rng = np.random.default_rng(seed)
    weights = 1.0 / np.arange(1, size + 1) ** 1.1  # a few bits in most sets, most bits rare
    weights /= weights.sum()

    def draw(k: int) -> list[set[int]]:
        return [set(rng.choice(size, int(rng.integers(0, spread)), replace=False, p=weights).tolist())
                for _ in range(k)]

    refs = draw(refs_n)
    ref_folds = rng.integers(0, 5, refs_n)
    indptr = np.zeros(refs_n + 1, dtype=np.int64)
    np.cumsum([len(r) for r in refs], out=indptr[1:])
    flat = np.concatenate([np.array(sorted(r), dtype=np.int64) for r in refs])
    arrays = {**Neighbours.index(indptr, flat, size), "ref_fold": ref_folds}
    queries = draw(300) + refs[:100] + [set(), {size - 1}]  # members themselves, empty, unseen bit
    folds = np.concatenate([np.full(300, -1), ref_folds[:100], [-1, 2]])
    index, best = Neighbours(arrays, size).nearest(
        [np.array(sorted(q), dtype=np.uint32) for q in queries], folds, chunk=64)
    want_index, want_best = _brute_nearest(queries, refs, folds, ref_folds)
    assert index.tolist() == want_index
    assert best.tolist() == pytest.approx(want_best, abs=1e-6)


def test_popcount_table_matches_python_bit_count() -> None:
    """The byte-table popcount (numpy < 2) and numpy's own give Python's int.bit_count."""
    from parentage.tiers.model import popcount_lut, popcount_rows

    rng = np.random.default_rng(3)
    words = rng.integers(0, np.iinfo(np.uint64).max, size=(50, 3), dtype=np.uint64, endpoint=True)
    want = [sum(int(w).bit_count() for w in row) for row in words]  # Python's own popcount
    assert popcount_lut(words).tolist() == want
    assert popcount_rows(words).tolist() == want


def test_review_verdicts_need_margins(model: Model, subset: tuple) -> None:
    """Asked as the review asks, contradicting the curation needs p <= low or p >= high."""
    mols = subset[1][:400]
    smiles = {m.id: m.smiles for m in mols}
    # Each term asserted under its true classes (RDKit's SMARTS matches, closed upward).
    asked = {m.id: fgbench.true_classes(m.id) for m in mols}
    plain = model.predict(smiles, evidence=False)
    review = model.predict(smiles, asserted=asked, evidence=False)
    index = {c: j for j, c in enumerate(model.classes)}
    low, high = model.arrays["low"], model.arrays["high"]
    held_back = 0
    for tid, verdicts in review.items():
        confident = {v.cls for v in verdicts if v.opinion == "supports" and v.cls in index
                     and v.evidence["probability"] >= high[index[v.cls]] - 1e-4}
        for v in verdicts:
            j = index.get(v.cls)
            if v.opinion == "opposes":
                assert v.cls in asked[tid] and v.evidence["probability"] <= low[j]
            elif v.opinion == "supports" and v.cls not in asked[tid]:
                # Confident itself, or an ancestor (the benchmark's nesting) of a confident class.
                assert v.cls in confident or any(v.cls in fgbench.ancestors_of(c) for c in confident)
        before = {v.cls for v in plain[tid] if v.opinion == "supports"}
        after = {v.cls for v in verdicts if v.opinion == "supports"}
        assert after <= before
        assert before & asked[tid] <= after  # the term's own classes are still supported
        held_back += len(before - after)
    assert held_back  # some predictions fell between threshold and margin: the rule was used


def test_trust_f1_sets_misfiled_members_aside(subset: tuple) -> None:
    """Members put into a class they do not belong to lower its plain F1, not its trust F1."""
    mols = subset[0][:1500]
    nitro = {g.key: g.id for g in fgbench.groups()}["Nitro"]
    # Truth: RDKit's match of the shipped Nitro SMARTS; 20 molecules without it are misfiled.
    outsiders = [m for m in mols if nitro not in fgbench.true_classes(m.id)][:20]
    parents = {m.id: (*fgbench.most_specific(fgbench.true_classes(m.id)), nitro) for m in outsiders}
    trained = train(ontology_of(mols, parents), replace(CONFIG, model=replace(SETTINGS, folds=3)),
                    Store(None))
    assert trained is not None
    figures = trained.figures[nitro]
    assert figures.trust_f1 >= figures.f1 + 0.05, figures
    assert trained.class_f1[nitro] == figures.trust_f1
    for f in trained.figures.values():
        assert f.trust_f1 >= f.f1


def test_class_abstention_counts_the_members_abstained_on(subset: tuple) -> None:
    """Abstention per class is the share of its members the model will not judge."""
    mols = subset[0][:600]
    for min_similarity, expected in ((1.01, 1.0), (0.0, None)):  # Tanimoto never exceeds 1
        settings = replace(SETTINGS, folds=3, min_similarity=min_similarity)
        trained = train(ontology_of(mols), replace(CONFIG, model=settings), Store(None))
        assert trained is not None
        rates = [f.abstention for f in trained.figures.values()]
        if expected is not None:
            assert rates == [expected] * len(rates) and trained.summary["abstention"] == 1.0
        else:  # nothing is unfamiliar; only terms no class is confident about are left
            assert max(rates) < 0.5 and trained.summary["abstention"] < 0.2


def test_exclude_keeps_terms_out_of_training(subset: tuple) -> None:
    mols = subset[0][:800]
    held = {mols[0].id, mols[1].id}
    trained = train(ontology_of(mols), replace(CONFIG, model=replace(SETTINGS, folds=3)),
                    Store(None), exclude=held)
    assert trained is not None
    assert not held & set(trained.member_ids)
    assert len(trained.member_ids) == 798


def test_injected_errors_flagged_out_of_fold() -> None:
    """The issue's injected-error benchmark, whole: 5% of the 80% training split lose a true
    parent, 5% gain a wrong one (tests/fgbench.py `inject`); the model, trained on the noisy
    ontology and judging each member out-of-fold, must flag them as the review does."""
    train_mols, _ = fgbench.split(seed=0)
    parents, missing, wrong = fgbench.inject(train_mols)
    onto = ontology_of(train_mols, parents)
    trained = train(onto, CONFIG, Store(None))
    assert trained is not None
    found = flagged(trained, onto, {m.id: m.smiles for m in train_mols})
    figures = fgbench.flag_figures(found, missing, wrong, set(trained.classes))
    # The target: recall >= 0.9 at precision >= 0.9, both kinds of error together.
    assert figures.recall >= 0.9 and figures.precision >= 0.9, figures
    assert figures.recall_missing >= 0.8 and figures.recall_wrong >= 0.8, figures


def flagged(model: Model, onto: Ontology, term_smiles: dict[str, str],
            config: Config = CONFIG) -> set[tuple[str, str]]:
    """(term, class) where the model contradicts the curation, as the review reports it.

    The verdicts are asked for as the review asks (each term's asserted classes, ancestors
    included) and go through the review's own arbitration, so min_f1 trust and the verdict rules
    are the review's: parent-unsupported and parent-suggested are the model's flags.
    """
    out = model.predict(term_smiles, asserted={t: onto.ancestors(t) for t in term_smiles},
                        evidence=False)
    found = set()
    for tid, verdicts in out.items():
        for f in arbitrate(onto, tid, [], verdicts, model.class_f1, config.model.min_f1,
                           config.max_suggestions):
            if f.kind in ("parent-unsupported", "parent-suggested"):
                found.update((tid, c) for c in f.classes)
    return found


def test_stored_model_predicts_without_sklearn(tmp_path, subset: tuple) -> None:
    path = str(tmp_path / "store.sqlite")
    store = Store(path)
    onto = ontology_of(subset[0][:600], blob="0" * 40)
    small = replace(CONFIG, model=replace(SETTINGS, folds=3))
    trained = load_or_train(onto, small, store, revision="abc123")
    assert trained is not None
    store.close()
    key = model_key(onto, small.model)
    code = f"""
import sys
from parentage.store import Store
from parentage.tiers.model import read_model
model = read_model(Store({path!r}), {key!r})
out = model.predict({{"X:1": "OC(=O)c1ccccc1"}})
assert out["X:1"], out
assert "sklearn" not in sys.modules, "sklearn imported at prediction time"
assert "scipy" not in sys.modules
print(model.revision, len(out["X:1"]))
"""
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60,
                         check=False)
    assert run.returncode == 0, run.stderr
    assert run.stdout.split()[0] == "abc123"


def test_stored_model_reused_until_enough_changes(tmp_path, subset: tuple) -> None:
    store = Store(str(tmp_path / "s.sqlite"))
    mols = subset[0][:600]
    small = replace(CONFIG, model=replace(SETTINGS, folds=3, retrain_after=5))
    first = load_or_train(ontology_of(mols, blob="1" * 40), small, store, revision="r1")
    assert first is not None and first.revision == "r1"
    # Three edited members (< retrain_after): the stored model still fits a new commit.
    filed = [m for m in mols if fgbench.true_classes(m.id)]  # moving these changes them
    moved = {m.id: (fgbench.ROOT,) for m in filed[:3]}
    again = load_or_train(ontology_of(mols, moved, blob="2" * 40), small, store, revision="r2")
    assert again is not None and again.revision == "r1"
    # Six edits reach retrain_after: a new model, trained on the new revision.
    moved = {m.id: (fgbench.ROOT,) for m in filed[:6]}
    fresh = load_or_train(ontology_of(mols, moved, blob="3" * 40), small, store, revision="r3")
    assert fresh is not None and fresh.revision == "r3"


def test_training_in_chunks_of_classes_stores_the_same_model(subset: tuple) -> None:
    """Fitting, scoring and calibrating a few classes at a time changes no stored array."""
    groups = {g.key: g.id for g in fgbench.groups()}
    onto = ontology_of(subset[0][:1200])
    # A disjointness axiom between classes that co-occur: the figures resolve clashes too.
    halogen = onto.terms[groups["Halogen"]]._replace(disjoint_from=(groups["Amine.Aromatic"],))
    onto = Ontology("base", [Snapshot("fgb.obo", None, [*(t for t in onto.terms.values()
                                                          if t.id != halogen.id), halogen])])
    small = replace(CONFIG, model=replace(SETTINGS, folds=3))
    whole = train(onto, small, Store(None))
    assert whole is not None and len(whole.classes) > 6
    assert chunk_width(1200, len(whole.classes)) == len(whole.classes)  # one chunk by default
    chunked = train(onto, small, Store(None), classes_per_chunk=5)  # the last chunk is short
    assert chunked is not None and len(whole.classes) % 5
    assert whole.arrays.keys() == chunked.arrays.keys()
    for name, array in whole.arrays.items():
        assert array.dtype == chunked.arrays[name].dtype, name
        assert np.array_equal(array, chunked.arrays[name]), name
    assert len(whole.arrays["oof_prob"]) > len(whole.arrays["ref_fold"])  # not all at the floor
    assert whole.meta == chunked.meta


def test_hard_negatives_are_the_parents_other_members() -> None:
    terms = [Term("C:root", "root"), Term("C:a", "a", ("C:root",)), Term("C:b", "b", ("C:root",)),
             Term("C:a1", "a1", ("C:a",)), Term("C:a2", "a2", ("C:a", "C:b")),
             Term("C:d", "d", ("C:gone",))]  # a dangling parent counts as the root
    onto = Ontology("base", [Snapshot("t.obo", None, terms)])
    filed = {"m0": "C:a1 C:a C:root", "m1": "C:a2 C:a C:b C:root", "m2": "C:a C:root",
             "m3": "C:b C:root", "m4": "C:d C:gone", "m5": "C:a1 C:a C:b C:root", "m6": "C:gone"}
    members = [Member(m, "C", frozenset(cs.split()), "") for m, cs in filed.items()]
    classes = ["C:a", "C:a1", "C:a2", "C:b", "C:d"]
    negatives = Negatives(members, classes, onto)
    found = {c: [members[i].id for i in negatives(j)] for j, c in enumerate(classes)}
    assert found == {"C:a": ["m3"], "C:a1": ["m1", "m2"], "C:a2": ["m0", "m2", "m3", "m5"],
                     "C:b": ["m0", "m2"], "C:d": ["m0", "m1", "m2", "m3", "m5", "m6"]}


def test_platt_matches_scikit_learn_logistic_regression() -> None:
    """Binned Newton steps give the maximum-likelihood fit scikit-learn finds on the raw scores."""
    from sklearn.linear_model import LogisticRegression

    rng = np.random.default_rng(0)
    y = (rng.random(20000) < 0.1).astype(np.int8)
    s = np.where(y == 1, rng.normal(1.0, 1, len(y)), rng.normal(-1.5, 1, len(y))).astype(np.float32)
    lo, width, pos, neg = _histograms(s[:, None], y[:, None])
    centres = lo[:, None] + (np.arange(pos.shape[1])[None, :] + 0.5) * width[:, None]
    a, b = platt(centres, pos, neg)[0]
    # Platt's smoothed targets as weighted rows: the same likelihood, fitted by scikit-learn.
    n_pos, n_neg = y.sum(), len(y) - y.sum()
    hi, lo_t = (n_pos + 1) / (n_pos + 2), 1 / (n_neg + 2)
    t = np.where(y == 1, hi, lo_t)
    x = np.concatenate([s, s])[:, None]
    reference = LogisticRegression(C=1e6).fit(x, np.r_[np.ones(len(s)), np.zeros(len(s))],
                                              sample_weight=np.r_[t, 1 - t])
    assert a == pytest.approx(reference.coef_[0, 0], rel=0.02)
    assert b == pytest.approx(reference.intercept_[0], abs=0.05)


def test_thresholds_reach_scikit_learn_best_f1() -> None:
    """The cut between score bins loses almost nothing against the exact best F1 (scikit-learn)."""
    from sklearn.metrics import f1_score, precision_recall_curve

    rng = np.random.default_rng(1)
    y = (rng.random((5000, 3)) < [0.05, 0.2, 0.5]).astype(np.int8)
    scores = (rng.normal(size=y.shape) + 2.5 * y - 1).astype(np.float32)
    _, thresholds, low, high, probs = calibrate(scores, y)
    for j in range(3):
        p, r, _ = precision_recall_curve(y[:, j], probs[:, j])  # scikit-learn: the reference
        best = np.max(2 * p * r / np.maximum(p + r, 1e-12))
        ours = f1_score(y[:, j], probs[:, j] >= thresholds[j])
        assert ours >= best - 0.01, (j, ours, best)
        assert low[j] < thresholds[j] <= high[j]


def test_changed_structure_is_not_judged_by_stored_out_of_fold_figures(model: Model, subset: tuple) -> None:
    from parentage.chem.fingerprints import fingerprint_bits

    member = subset[0][7]
    mine = fingerprint_bits([member.smiles], SETTINGS)
    other = fingerprint_bits(["OC(=O)c1ccccc1"], SETTINGS)  # benzoic acid
    stored = model.probabilities(mine, [member.id])
    # A term outside training with the member's structure gets the full model's figures...
    full = model.probabilities(mine, ["X:new"])
    assert not np.allclose(stored, full, atol=1e-3)
    # ...and so does the member itself once its structure changed.
    assert np.allclose(model.probabilities(other, [member.id]), model.probabilities(other, ["X:new"]))
