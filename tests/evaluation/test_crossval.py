"""Tests of the spatial cross-validation loop (mlsites.evaluation.cross_validate).

References: scikit-learn's roc_auc_score for the fold AUCs, a known "true"
preference surface on a synthetic autocorrelated landscape for the virtual-site
checks, and the binomial distribution for the zone-capture tolerance.
"""

import joblib
import numpy as np
import pandas as pd
import pytest
from scipy import ndimage
from scipy.integrate import trapezoid
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.metrics import roc_auc_score
from sklearn.utils import check_random_state

from mlsites.errors import InputError, InsufficientDataError
from mlsites.evaluation import cross_validate, roc_auc, write_crossval
from mlsites.folds import SpatialBlockFolds
from mlsites.learners import make_learner

FEATURES = ["f1", "f2", "f3"]
CELL_M = 10.0
SHAPE = (120, 120)
# true log-odds of a site per cell: b0 + b . X (invented for this test)
B0 = -5.0
B = np.array([1.2, -0.9, 0.6])


class NoiseClassifier(ClassifierMixin, BaseEstimator):
    """Scores every sample with seeded uniform noise (a learner with no skill)."""

    def __init__(self, random_state=None):
        self.random_state = random_state

    def fit(self, X, y, sample_weight=None):
        self.classes_ = np.array([0, 1])
        return self

    def predict_proba(self, X):
        p = check_random_state(self.random_state).random_sample(len(X))
        return np.column_stack([1 - p, p])


def _virtual_table(seed=0, n_background=2500, block_size=300.0, n_splits=5):
    """Sample table on a smooth random landscape with sites drawn from a known surface."""
    rng = np.random.default_rng(seed)
    layers = []
    for _ in FEATURES:
        f = ndimage.gaussian_filter(rng.standard_normal(SHAPE), sigma=6, mode="reflect")
        layers.append((f - f.mean()) / f.std())
    stack = np.stack(layers, axis=-1)
    p_true = 1.0 / (1.0 + np.exp(-(B0 + stack @ B)))
    site_cells = np.flatnonzero(rng.random(p_true.size) < p_true.ravel())
    bg_cells = rng.choice(p_true.size, size=n_background, replace=False)
    cells = np.concatenate((site_cells, bg_cells))
    label = np.concatenate((np.ones(site_cells.size, int), np.zeros(bg_cells.size, int)))
    row, col = np.divmod(cells, SHAPE[1])
    x = (col + 0.5) * CELL_M
    y = (SHAPE[0] - row - 0.5) * CELL_M
    site_id = np.array([f"s{i}" for i in range(site_cells.size)] + [""] * bg_cells.size, dtype=object)
    weight = np.where(label == 1, 1.0, site_cells.size / bg_cells.size)
    table = pd.DataFrame({
        "sample_id": np.arange(cells.size), "label": label, "weight": weight, "site_id": site_id,
        "x": x, "y": y, "row": row, "col": col,
    })
    for j, name in enumerate(FEATURES):
        table[name] = stack[row, col, j]
    groups = np.where(label == 1, np.arange(cells.size), -1)
    table["fold"] = SpatialBlockFolds(
        x, y, site_id=groups, block_size=block_size, n_splits=n_splits, random_state=seed
    ).assign().fold
    table["p_true"] = p_true[row, col]
    return table


@pytest.fixture(scope="module")
def virtual():
    return _virtual_table()


def _learners(noise=False):
    out = {
        "logistic": lambda: make_learner("logistic", random_state=0),
        "random_forest": lambda: make_learner(
            "random_forest", random_state=0, n_estimators=25, min_samples_leaf=20
        ),
    }
    if noise:
        out["noise"] = lambda: NoiseClassifier()
    return out


@pytest.fixture(scope="module")
def result(virtual):
    return cross_validate(virtual, features=FEATURES, learners=_learners(noise=True), random_state=3)


def test_fold_auc_matches_sklearn(virtual, result):
    # reference: sklearn.metrics.roc_auc_score on the held-out rows of each fold,
    # site cells weighted by their sample weight, background cells weight 1 (as the
    # landscape_weight default of evaluate_scores); float64 round-off only.
    oof = result.oof[result.oof["learner"] == "logistic"].merge(virtual, on="sample_id", suffixes=("", "_t"))
    assert (oof["fold"] == oof["fold_t"]).all()
    rows = result.by_fold[(result.by_fold["learner"] == "logistic") & (result.by_fold["fold"] != "all")]
    assert len(rows) == 5
    for row in rows.itertuples():
        part = oof[oof["fold"] == row.fold]
        w = np.where(part["label"] == 1, part["weight"], 1.0)
        expected = roc_auc_score(part["label"], part["score"], sample_weight=w)
        assert row.auc == pytest.approx(expected, rel=1e-9)
        assert row.n_test_site_cells == int(part["label"].sum())
        assert row.n_test_background == int((part["label"] == 0).sum())
    # pooled row: same reference on all out-of-fold rows at once
    w = np.where(oof["label"] == 1, oof["weight"], 1.0)
    pooled = result.by_fold[(result.by_fold["learner"] == "logistic") & (result.by_fold["fold"] == "all")]
    assert pooled["auc"].item() == pytest.approx(roc_auc_score(oof["label"], oof["score"], sample_weight=w), rel=1e-9)
    # both curves are sites against landscape: the area under each (trapezoids) is the
    # pooled AUC (METHODS.md §5, capture curve area = ROC AUC); 1e-9 for round-off
    curves = result.curves[result.curves["learner"] == "logistic"]
    for kind in ("capture", "roc"):
        c = curves[curves["curve"] == kind]
        assert trapezoid(c["y"], c["x"]) == pytest.approx(pooled["auc"].item(), rel=1e-9)


def test_oof_covers_every_sample_once(virtual, result):
    for _, part in result.oof.groupby("learner"):
        assert sorted(part["sample_id"]) == sorted(virtual["sample_id"])


def test_best_learner_close_to_true_surface(virtual, result):
    # reference: AUC of the true preference surface p on the same held-out blocks,
    # averaged over folds exactly as the learners' fold AUCs are (mean of folds).
    truth = []
    for k in range(5):
        part = virtual[virtual["fold"] == k]
        truth.append(roc_auc(part.loc[part["label"] == 1, "p_true"], part.loc[part["label"] == 0, "p_true"],
                             site_weight=part.loc[part["label"] == 1, "weight"]))
    best = result.summary.iloc[0]
    assert best["learner"] in ("logistic", "random_forest")
    # tolerance 0.05 from the acceptance rule
    assert abs(best["auc_mean"] - np.mean(truth)) <= 0.05
    assert np.mean(truth) > 0.7  # the surface must be informative for the test to mean anything


@pytest.mark.parametrize("learner", ["logistic", "random_forest"])
def test_calibrated_zones_hold_on_held_out_sites(virtual, result, learner):
    # Each fold's zones are cut at area shares calibrated on the other folds, so its
    # held-out sites test them. Pooled over folds each zone's share of held-out sites
    # must reach its target up to sampling error: 2 binomial standard errors,
    # 2 * sqrt(t (1 - t) / n_sites) (common practice for a two-sided ~95 % band).
    rows = result.by_fold[(result.by_fold["learner"] == learner) & (result.by_fold["fold"] != "all")]
    zones = result.zones[result.zones["learner"] == learner].set_index("zone")
    n = int(rows["n_test_sites"].sum())
    assert (zones["n_heldout_sites"] == n).all()
    for zone, target in (("high", 0.7), ("medium", 0.9)):
        assert zones.loc[zone, "target"] == target
        share = zones.loc[zone, "heldout_site_share"]
        assert share >= target - 2 * np.sqrt(target * (1 - target) / n)
        # 95 % Wilson interval: reference scipy.stats.binomtest(k, n).proportion_ci(method="wilson")
        from scipy.stats import binomtest

        ci = binomtest(round(share * n), n).proportion_ci(method="wilson")
        assert zones.loc[zone, "heldout_site_share_ci_low"] == pytest.approx(ci.low, rel=1e-12)
        assert zones.loc[zone, "heldout_site_share_ci_high"] == pytest.approx(ci.high, rel=1e-12)
    # the pooled zone shares are the per-fold site shares weighted by held-out sites
    # (one cell per site here, weight 1)
    high = (rows["site_share_high"] * rows["n_test_sites"]).sum() / n
    assert zones.loc["high", "heldout_site_share"] == pytest.approx(high, rel=1e-9)
    assert zones.loc["low", "area_share"] == 1.0 and zones.loc["low", "heldout_site_share"] == pytest.approx(1.0)


def test_calibrated_area_share_matches_brute_force(virtual, result):
    # Reference: a direct NumPy reading of METHODS.md §13 on the out-of-fold scores:
    # each held-out site at the share of its fold's background scoring >= it, then the
    # least such share holding >= 70 % / 90 % of the sites.
    oof = result.oof[result.oof["learner"] == "logistic"].merge(virtual[["sample_id", "label"]], on="sample_id")
    ranks = []
    for _, part in oof.groupby("fold"):
        land = part.loc[part["label"] == 0, "score"].to_numpy()
        for s in part.loc[part["label"] == 1, "score"]:
            ranks.append(np.mean(land >= s))
    ranks = np.sort(ranks)
    zones = result.zones[result.zones["learner"] == "logistic"].set_index("zone")
    for zone, target in (("high", 0.7), ("medium", 0.9)):
        shares = np.array([np.mean(ranks <= a) for a in ranks])
        expected = ranks[np.argmax(shares >= target)]
        assert zones.loc[zone, "area_share"] == pytest.approx(expected, abs=1e-15)
        assert zones.loc[zone, "calibration_site_share"] >= target
    assert zones["insample_cut_area_share"].iloc[-1] == pytest.approx(1.0)
    assert zones["insample_cut_site_share"].iloc[-1] == pytest.approx(1.0)


def test_fold_models_are_returned_fitted(virtual, result):
    oof = result.oof[result.oof["learner"] == "logistic"].merge(virtual, on="sample_id", suffixes=("", "_t"))
    models = result.fold_models["logistic"]
    assert len(models) == 5
    # each fold model reproduces its own out-of-fold scores (same fitted object; rtol
    # 1e-12 because BLAS rounds the last bit differently for another batch of rows)
    for k, model in enumerate(models):
        part = oof[oof["fold"] == k]
        np.testing.assert_allclose(model.predict_proba(part[FEATURES])[:, 1], part["score"].to_numpy(),
                                   rtol=1e-12)


def test_noise_learner_ranks_below_and_is_significantly_worse(result):
    summary = result.summary.set_index("learner")
    assert summary.loc["noise", "rank"] == 3
    assert summary.loc["noise", "auc_mean"] < summary.loc["logistic", "auc_mean"]
    best = result.summary["learner"].iloc[0]
    assert np.isnan(summary.loc[best, "p_value_vs_best"])
    assert np.isnan(summary.loc[best, "auc_diff_vs_best"])
    # 5 folds -> paired t-test; reference: scipy.stats.ttest_rel on the fold AUCs
    from scipy.stats import ttest_rel

    auc = result.by_fold[result.by_fold["fold"] != "all"].pivot(index="fold", columns="learner", values="auc")
    expected = ttest_rel(auc["noise"], auc[best]).pvalue
    assert summary.loc["noise", "test_vs_best"] == "ttest_rel"
    assert summary.loc["noise", "p_value_vs_best"] == pytest.approx(expected, rel=1e-9)
    assert summary.loc["noise", "p_value_vs_best"] < 0.01
    assert summary.loc["noise", "auc_diff_vs_best"] == pytest.approx((auc["noise"] - auc[best]).mean(), rel=1e-9)
    # sd over folds with ddof = 1 (numpy reference)
    assert summary.loc["noise", "auc_sd"] == pytest.approx(np.std(auc["noise"], ddof=1), rel=1e-9)


def test_same_seed_gives_identical_results_and_files(virtual, tmp_path):
    small = virtual.iloc[::3].reset_index(drop=True)
    kwargs = dict(features=FEATURES, learners=_learners(), random_state=7)
    a = cross_validate(small, **kwargs)
    # threads instead of worker processes keep the test fast; the parallel path and the
    # seeds drawn before it are the same for any joblib backend
    with joblib.parallel_backend("threading"):
        b = cross_validate(small, **kwargs, n_jobs=2)
    pd.testing.assert_frame_equal(a.by_fold, b.by_fold)
    pd.testing.assert_frame_equal(a.summary, b.summary)
    pa = write_crossval(a, tmp_path / "a")
    pb = write_crossval(b, tmp_path / "b")
    assert sorted(pa) == ["capture_curves.png", "curves.csv", "metrics_by_fold.csv", "metrics_summary.csv",
                          "roc_curves.png", "zones.csv"]
    for name in pa:
        assert pa[name].read_bytes() == pb[name].read_bytes(), name
    assert not list((tmp_path / "a").glob(".*tmp"))


def test_progress_called_once_per_fit(virtual):
    small = virtual.iloc[::3].reset_index(drop=True)
    messages = []
    cross_validate(small, features=FEATURES, learners={"logistic": _learners()["logistic"]}, progress=messages.append)
    assert len(messages) == 5


def test_fold_without_sites_is_refused_before_fitting(virtual):
    table = virtual.copy()
    table.loc[(table["fold"] == 2) & (table["label"] == 1), "fold"] = 0
    calls = []

    def factory():
        calls.append(1)
        return make_learner("logistic")

    with pytest.raises(InsufficientDataError, match=r"Fold 2 .*fewer folds or a different block size"):
        cross_validate(table, features=FEATURES, learners={"logistic": factory})
    assert calls == []


def test_unknown_feature_is_input_error(virtual):
    with pytest.raises(InputError, match="elevation"):
        cross_validate(virtual, features=["f1", "elevation"], learners=_learners())


def test_buffered_leave_one_site_out_honours_buffer(virtual):
    from mlsites.folds import BufferedLeaveOneSiteOut
    from mlsites.learners import fit_learner

    sites = virtual[virtual["label"] == 1].iloc[:12]
    background = virtual[virtual["label"] == 0].iloc[:400]
    table = pd.concat([sites, background], ignore_index=True)
    site_id = np.where(table["label"] == 1, table["site_id"], None)
    buffer = 150.0
    splitter = BufferedLeaveOneSiteOut(table["x"], table["y"], site_id, buffer=buffer)
    res = cross_validate(table, features=FEATURES, learners={"logistic": _learners()["logistic"]},
                         splitter=splitter)
    rows = res.by_fold[res.by_fold["fold"] != "all"]
    assert len(rows) == 12
    assert (rows["landscape"] == "within_buffer").all()
    # brute-force reference for the first site (fold 0): train on every sample farther
    # than the buffer (NumPy distances), score the background within the buffer (which
    # the fold's model never saw), AUC by scikit-learn.
    xy = table[["x", "y"]].to_numpy()
    dist = np.hypot(*(xy - xy[0]).T)
    train = dist > buffer
    assert rows["n_train"].iloc[0] == train.sum()
    est = fit_learner(make_learner("logistic", random_state=0), table.loc[train, FEATURES],
                      table.loc[train, "label"], sample_weight=table.loc[train, "weight"])
    score = est.predict_proba(table[FEATURES])[:, 1]
    land = (table["label"] == 0).to_numpy() & ~train
    assert rows["n_test_background"].iloc[0] == land.sum() > 0
    y = np.concatenate(([1], np.zeros(land.sum())))
    expected = roc_auc_score(y, np.concatenate(([score[0]], score[land])))
    # lbfgs logistic regression is deterministic; rtol 1e-7 for float64 round-off
    assert rows["auc"].iloc[0] == pytest.approx(expected, rel=1e-7)
    # the per-site fold column of buffered leave-one-out (-1 for background) must come with its splitter
    table["fold"] = np.where(table["label"] == 1, np.arange(len(table)), -1)
    with pytest.raises(InputError, match="BufferedLeaveOneSiteOut"):
        cross_validate(table, features=FEATURES, learners={"logistic": _learners()["logistic"]})


class _SpyClassifier(ClassifierMixin, BaseEstimator):
    """Records the ``rid`` of the background rows it is trained on and of every row it scores."""

    calls = []

    def fit(self, X, y, sample_weight=None):
        self.classes_ = np.array([0, 1])
        self.trained_ = set(X["rid"][np.asarray(y) == 0].astype(int))
        return self

    def predict_proba(self, X):
        type(self).calls.append((self.trained_, X["rid"].astype(int).to_numpy()))
        return np.column_stack([np.full(len(X), 0.5), np.full(len(X), 0.5)])


@pytest.mark.parametrize("method", ["blocks", "buffered"])
def test_no_landscape_row_of_a_fold_is_a_training_row(virtual, method):
    # Issue 7: each fold scores its held-out sites against background its model was not
    # trained on. The spy sees the training rows and the scored rows; the scored
    # background must be disjoint from the trained background in every fold.
    from mlsites.folds import BufferedLeaveOneSiteOut

    table = virtual.copy()
    splitter = None
    if method == "buffered":
        sites = table[table["label"] == 1].iloc[:8]
        table = pd.concat([sites, table[table["label"] == 0].iloc[:600]], ignore_index=True)
        site_id = np.where(table["label"] == 1, table["site_id"], None)
        splitter = BufferedLeaveOneSiteOut(table["x"], table["y"], site_id, buffer=200.0)
    table["rid"] = np.arange(len(table))
    bg_rid = set(table.loc[table["label"] == 0, "rid"])
    _SpyClassifier.calls.clear()
    res = cross_validate(table, features=["rid"] + FEATURES, learners={"spy": _SpyClassifier},
                         splitter=splitter)
    assert len(_SpyClassifier.calls) == len(res.by_fold) - 1
    for trained, scored in _SpyClassifier.calls:
        scored_background = set(scored) & bg_rid
        assert scored_background and not scored_background & trained
    expected = "within_buffer" if method == "buffered" else "held_out"
    assert (res.by_fold["landscape"] == expected).all()


def test_buffer_without_background_is_refused_before_fitting(virtual):
    from mlsites.folds import BufferedLeaveOneSiteOut

    sites = virtual[virtual["label"] == 1].iloc[:6]
    far = virtual[(virtual["label"] == 0)].iloc[:300]
    table = pd.concat([sites, far], ignore_index=True)
    site_id = np.where(table["label"] == 1, table["site_id"], None)
    splitter = BufferedLeaveOneSiteOut(table["x"], table["y"], site_id, buffer=0.0)
    with pytest.raises(InsufficientDataError, match="no background outside its .* training rows"):
        cross_validate(table, features=FEATURES, learners=_learners(), splitter=splitter)


def test_bad_zone_targets_refused_before_fitting(virtual):
    calls = []

    def factory():
        calls.append(1)
        return make_learner("logistic")

    with pytest.raises(InputError, match="increasing"):
        cross_validate(virtual, features=FEATURES, learners={"logistic": factory},
                       zone_targets={"high": 0.9, "medium": 0.7})
    assert calls == []
