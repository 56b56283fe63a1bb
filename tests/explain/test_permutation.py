"""Held-out permutation importance (METHODS.md §11) and its behaviour on virtual sites."""

import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.metrics import mean_squared_error, r2_score

from mlsites.errors import InputError, InsufficientDataError
from mlsites.explain import heldout_permutation_importance
from mlsites.learners import fit_learner, make_learner


class FirstLayer(RegressorMixin, BaseEstimator):
    """The METHODS.md §11 fold model f = x1."""

    def fit(self, X, y=None):
        return self

    def predict(self, X):
        return np.asarray(X, dtype=float)[:, 0]


FOLD = pd.DataFrame({"x1": [1.0, 2, 3, 4, 5], "x2": [5.0, 3, 8, 1, 7]})


def _reverse(rng, n):
    return np.arange(n)[::-1]


def test_methods_fold_example_r2():
    # METHODS.md §11: y = x1, f = x1, R² score, permutation = reverse order -> PI(x1) = 4.0
    # (R² 1 -> -3), PI(x2) = 0 exactly
    y = FOLD["x1"].to_numpy()
    result = heldout_permutation_importance(
        [(FirstLayer(), np.arange(5), None, [])], FOLD, n_repeats=3, permute=_reverse,
        scorer=lambda s, site, w: r2_score(y, s))
    s = result.summary.set_index("layer")
    assert s.loc["x1", "importance_mean"] == 4.0 and s.loc["x2", "importance_mean"] == 0.0
    assert s.loc["x1", "importance_sd"] == 0.0 and s.loc["x1", "rank"] == 1
    by = result.by_fold[result.by_fold["layer"] == "x1"]
    assert (by["baseline"] == 1.0).all() and (by["permuted"] == -3.0).all()


def test_methods_fold_example_mse():
    # METHODS.md §11: MSE 0 -> 8 when x1 is reversed (scorer = -MSE, so the drop is 8)
    y = FOLD["x1"].to_numpy()
    result = heldout_permutation_importance(
        [(FirstLayer(), [0, 1], None, [2, 3, 4])], FOLD, n_repeats=1, permute=_reverse,
        scorer=lambda s, site, w: -mean_squared_error(y, s))
    assert result.summary.set_index("layer").loc["x1", "importance_mean"] == 8.0


def test_same_result_for_any_n_jobs_and_input_left_alone():
    rng = np.random.default_rng(0)
    X = pd.DataFrame(rng.normal(size=(300, 3)), columns=["a", "b", "c"])
    y = (X["a"] + rng.normal(scale=0.5, size=300) > 0).astype(int).to_numpy()
    folds = []
    for k in range(3):
        test = np.arange(k, 300, 3)
        train = np.setdiff1d(np.arange(300), test)
        est = fit_learner(make_learner("logistic"), X.iloc[train], y[train])
        folds.append((est, test[y[test] == 1], None, test[y[test] == 0]))
    before = X.copy()
    one = heldout_permutation_importance(folds, X, n_repeats=4, random_state=3, n_jobs=1)
    two = heldout_permutation_importance(folds, X, n_repeats=4, random_state=3, n_jobs=2)
    pd.testing.assert_frame_equal(one.by_fold, two.by_fold)
    pd.testing.assert_frame_equal(X, before)
    assert one.summary.set_index("layer")["rank"]["a"] == 1


def test_bad_input():
    with pytest.raises(InputError, match="folds is empty"):
        heldout_permutation_importance([], FOLD)
    with pytest.raises(InputError, match="outside the table"):
        heldout_permutation_importance([(FirstLayer(), [7], None, [])], FOLD)
    with pytest.raises(InsufficientDataError, match="no held-out rows"):
        heldout_permutation_importance([(FirstLayer(), [], None, [])], FOLD)
    with pytest.raises(InputError, match="not columns"):
        heldout_permutation_importance([(FirstLayer(), [0], None, [1])], FOLD, layers=["roads"])
    with pytest.raises(InputError, match="permutation of"):
        heldout_permutation_importance([(FirstLayer(), [0, 1], None, [2])], FOLD, permute=lambda r, n: [0, 0, 1],
                                       scorer=lambda s, site, w: 0.0)


@pytest.fixture(scope="module")
def virtual_study():
    """Virtual sites (mlsites.synthetic) whose truth is known: a strong stream-distance term, a
    weaker slope term, and a pure-noise layer the sites never saw."""
    from mlsites.synthetic import make_landscape, make_virtual_sites
    from mlsites.terrain import distance_to_cells, slope

    land = make_landscape((160, 160), cellsize=10.0, random_state=3, valley_width_m=400.0, relief_m=60.0)
    dem = land.dem.astype(np.float64)
    rng = np.random.default_rng(11)
    layers = {"stream_distance": distance_to_cells(land.streams > 0, 10.0), "slope": slope(dem, 10.0),
              "noise": rng.normal(size=dem.shape)}
    truth = {"stream_distance": ("near", {"scale_m": 120.0, "weight": 4.0}),
             "slope": ("below", {"threshold": 6.0, "width": 1.5, "weight": 1.0})}
    sites = make_virtual_sites(layers, land.grid, n_sites=400, preference=truth, cluster_size=1.0,
                               detect_inside=1.0, detect_outside=1.0, random_state=5).all_sites
    rows, cols = land.grid.rowcol(sites.geometry.x.to_numpy(), sites.geometry.y.to_numpy())
    valid = np.flatnonzero(np.isfinite(layers["slope"]).ravel())
    bg = rng.choice(valid, size=2000, replace=False)
    r = np.concatenate([np.asarray(rows), bg // 160])
    c = np.concatenate([np.asarray(cols), bg % 160])
    X = pd.DataFrame({k: v[r, c] for k, v in layers.items()})
    y = np.r_[np.ones(len(sites), int), np.zeros(bg.size, int)]
    keep = np.isfinite(X.to_numpy()).all(axis=1)
    X, y, r, c = X[keep].reset_index(drop=True), y[keep], r[keep], c[keep]
    w = np.where(y == 1, 1.0, y.sum() / (1 - y).sum())
    fold = (r // 40 + c // 40) % 4  # spatial blocks of 40 x 40 cells, four folds
    return X, y, w, fold


@pytest.mark.parametrize("name, params", [
    ("random_forest", {"n_estimators": 60, "min_samples_leaf": 5}),
    ("gradient_boosting", {"max_iter": 100}),
    ("logistic", {"splines": 4}),
])
def test_virtual_sites_rank_the_true_driver_first(virtual_study, name, params):
    X, y, w, fold = virtual_study
    folds = []
    for k in range(4):
        train, test = np.flatnonzero(fold != k), np.flatnonzero(fold == k)
        est = fit_learner(make_learner(name, random_state=0, **params), X.iloc[train], y[train], w[train])
        sites = test[y[test] == 1]
        folds.append((est, sites, w[sites], test[y[test] == 0]))
    s = heldout_permutation_importance(folds, X, n_repeats=3, random_state=0).summary.set_index("layer")
    # truth: stream distance is the strongest term (weight 4 against 1); noise carries nothing
    assert s.loc["stream_distance", "rank"] == 1
    assert s.loc["noise", "rank"] == 3 or abs(s.loc["noise", "importance_mean"]) < 0.01
