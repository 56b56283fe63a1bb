"""Tests for the cross-validation splitters and the fold-invariant checker."""

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter
from scipy.special import expit
from sklearn.cluster import KMeans
from sklearn.ensemble import RandomForestClassifier
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score
from sklearn.model_selection import PredefinedSplit, cross_val_score
from sklearn.preprocessing import StandardScaler

from mlsites.errors import InputError, InsufficientDataError
from mlsites.folds import (
    BufferedLeaveOneSiteOut,
    EnvironmentalFolds,
    PrecomputedFolds,
    RandomFolds,
    SpatialBlockFolds,
    block_ids,
    check_split_invariants,
)


def _landscape(seed, n_background=300, n_sites=25, extent=4000.0):
    """Uniform background plus sites of 1..10 cells clustered around random centres."""
    rng = np.random.default_rng(seed)
    size = rng.integers(1, 11, n_sites)
    cx, cy = rng.uniform(0, extent, (2, n_sites))
    x = np.r_[rng.uniform(0, extent, n_background), np.repeat(cx, size) + rng.normal(0, 40, size.sum())]
    y = np.r_[rng.uniform(0, extent, n_background), np.repeat(cy, size) + rng.normal(0, 40, size.sum())]
    site = np.r_[np.full(n_background, -1), np.repeat(np.arange(n_sites), size)]
    label = (site >= 0).astype(int)
    return x, y, site, label


def _partition(labels):
    return {frozenset(np.flatnonzero(labels == k).tolist()) for k in np.unique(labels)}


# ---------------------------------------------------------- invariant checker


def test_invariant_checker_accepts_a_partition_and_rejects_violations():
    site = np.array([0, 0, 1, -1, -1, 2])
    good = [(np.array([2, 3, 4, 5]), np.array([0, 1])), (np.array([0, 1]), np.array([2, 3, 4, 5]))]
    assert len(check_split_invariants(good, 6, site_id=site)) == 2
    with pytest.raises(InputError, match="both train and test"):
        check_split_invariants([(np.array([0, 1, 2]), np.array([2, 3, 4, 5]))], 6)
    with pytest.raises(InputError, match="has cells in train and in test"):
        check_split_invariants([(np.array([1, 2, 3]), np.array([0, 4, 5]))], 6, site_id=site)
    with pytest.raises(InputError, match="Sample 5 is in 0 test set"):
        check_split_invariants([(np.array([5]), np.array([0, 1, 2, 3, 4]))], 6)
    with pytest.raises(InputError, match="Sample 0 is in 2 test set"):
        check_split_invariants(good + [(np.array([1]), np.array([0]))], 6)
    with pytest.raises(InputError, match="outside"):
        check_split_invariants([(np.array([6]), np.array([0]))], 6)


# ------------------------------------------------------------ PrecomputedFolds


def test_precomputed_folds_equal_sklearn_predefined_split():
    # reference implementation: scikit-learn's PredefinedSplit with the same fold array
    fold = np.random.default_rng(0).integers(0, 4, 50)
    ours = list(PrecomputedFolds(fold).split(np.zeros((50, 2))))
    ref = list(PredefinedSplit(fold).split())
    assert len(ours) == len(ref) == PrecomputedFolds(fold).get_n_splits() == 4
    for (tr, te), (rtr, rte) in zip(ours, ref):
        assert np.array_equal(tr, rtr) and np.array_equal(te, rte)
    check_split_invariants(ours, 50)


def test_precomputed_folds_work_in_cross_val_score():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(60, 2))
    y = (X[:, 0] > 0).astype(int)
    scores = cross_val_score(LogisticRegression(), X, y, cv=PrecomputedFolds(np.arange(60) % 3))
    assert scores.shape == (3,)


@pytest.mark.parametrize(
    "fold, match",
    [([0, 2, 2, 0], "every fold"), ([0.5, 1.0], "dtype"), ([1, 1, 2], "every fold")],
)
def test_precomputed_folds_reject_gaps_and_fractions(fold, match):
    with pytest.raises(InputError, match=match):
        PrecomputedFolds(np.array(fold)).get_n_splits()


def test_precomputed_folds_check_sample_count():
    with pytest.raises(InputError, match="X has 3 sample"):
        list(PrecomputedFolds([0, 1]).split(np.zeros((3, 1))))


# ----------------------------------------------------------- SpatialBlockFolds


@pytest.mark.parametrize("kind", ["square", "hexagon"])
def test_spatial_block_folds_invariants(kind):
    x, y, site, label = _landscape(0)
    cv = SpatialBlockFolds(x, y, site_id=site, block_size=700, n_splits=5, kind=kind, random_state=0)
    splits = check_split_invariants(cv.split(np.zeros((x.size, 1)), label), x.size, site_id=site)
    assert len(splits) == cv.get_n_splits() == 5
    # background never straddles a block: each block's background is on one side
    bid = block_ids(x, y, kind=kind, block_size=700)
    bg = site < 0
    for train, test in splits:
        assert not np.intersect1d(bid[train][bg[train]], bid[test][bg[test]]).size
        assert label[test].sum() > 0


def test_spatial_block_folds_equal_their_saved_assignment():
    x, y, site, label = _landscape(1)
    cv = SpatialBlockFolds(x, y, site_id=site, block_size=600, n_splits=4, random_state=3)
    res = cv.assign(crs="EPSG:3035")
    assert res.blocks.crs.to_epsg() == 3035
    assert {"block_id", "fold", "geometry"} <= set(res.blocks.columns)
    direct = list(cv.split())
    saved = list(PrecomputedFolds(res.fold).split())
    for (a, b), (c, d) in zip(direct, saved):
        assert np.array_equal(a, c) and np.array_equal(b, d)
    assert np.array_equal(cv.fold_array(), res.fold)
    assert cv.describe()["block_size_m"] == 600.0


def test_spatial_block_folds_error_suggests_smaller_blocks():
    x, y, site, _ = _landscape(2)
    with pytest.raises(InsufficientDataError, match="smaller block"):
        list(SpatialBlockFolds(x, y, site_id=site, block_size=10_000, n_splits=3).split())


# ------------------------------------------------------ BufferedLeaveOneSiteOut


def test_buffered_loo_methods_check_values():
    # METHODS.md §6 check values (Le Rest et al. 2014; Roberts et al. 2017):
    # 10 points at x = 0..9, r = 2.5, test point x = 5 -> training {0, 1, 2, 8, 9}
    x = np.arange(10.0)
    cv = BufferedLeaveOneSiteOut(x, np.zeros(10), np.arange(10), buffer=2.5)
    splits = list(cv.split())
    assert len(splits) == cv.get_n_splits() == 10
    train, test = splits[5]
    assert test.tolist() == [5]
    assert train.tolist() == [0, 1, 2, 8, 9]  # METHODS.md §6, exact


def test_buffered_loo_distance_equal_to_buffer_is_excluded():
    # the rule is train iff distance > buffer, so a neighbour exactly at r is dropped
    cv = BufferedLeaveOneSiteOut([0.0, 3.0, 6.0], [0.0, 0.0, 0.0], [0, 1, 2], buffer=3.0)
    train, test = next(iter(cv.split()))
    assert test.tolist() == [0] and train.tolist() == [2]


def _brute_force_train(x, y, cells, buffer):
    d = np.hypot(x[:, None] - x[cells][None, :], y[:, None] - y[cells][None, :])
    ok = (d > buffer).all(axis=1)
    ok[cells] = False
    return np.flatnonzero(ok)


@pytest.mark.parametrize("background_in_test", [False, True])
def test_buffered_loo_matches_brute_force_distances(background_in_test):
    # Reference: full NumPy distance matrix, train = {j: d(j, every held-out cell) > r}
    x, y, site, _ = _landscape(3, n_background=250, n_sites=15)
    buffer = 450.0
    cv = BufferedLeaveOneSiteOut(x, y, site, buffer=buffer, background_in_test=background_in_test)
    splits = list(cv.split(np.zeros((x.size, 2))))
    assert len(splits) == 15
    for s, (train, test) in enumerate(splits):
        cells = np.flatnonzero(site == s)
        assert np.array_equal(train, _brute_force_train(x, y, cells, buffer))
        d_min = np.hypot(x[train][:, None] - x[cells], y[train][:, None] - y[cells]).min()
        assert d_min > buffer  # no training sample within the buffer of the held-out site
        if background_in_test:
            near_bg = np.flatnonzero(
                (site < 0) & (np.hypot(x[:, None] - x[cells], y[:, None] - y[cells]) <= buffer).any(axis=1)
            )
            assert np.array_equal(test, np.union1d(cells, near_bg))
        else:
            assert np.array_equal(test, cells)
    check_split_invariants(splits, x.size, site_id=site, require_coverage=False)


def test_buffered_loo_buffer_covering_all_sites_is_an_error():
    with pytest.raises(InsufficientDataError, match="smaller buffer"):
        list(BufferedLeaveOneSiteOut([0.0, 1.0, 2.0], [0.0, 0.0, 0.0], [0, 1, -1], buffer=5.0).split())


# ------------------------------------------------------------ EnvironmentalFolds


def test_environmental_folds_methods_check_partition():
    # METHODS.md §6 check values: standardised predictors, k = 2 -> {0,1,2} / {3,4,5}
    X = np.array([(0, 0), (0, 1), (1, 0), (10, 10), (10, 11), (11, 10)], dtype=float)
    fold = EnvironmentalFolds(2, random_state=0).fold_array(X)
    assert _partition(fold) == {frozenset({0, 1, 2}), frozenset({3, 4, 5})}  # exact


def test_environmental_folds_equal_sklearn_kmeans_on_standardised_predictors():
    # reference implementation: StandardScaler + KMeans with the same settings
    rng = np.random.default_rng(4)
    X = rng.normal(size=(200, 3)) * [1.0, 50.0, 0.01] + [0, 1000, 5]
    fold = EnvironmentalFolds(4, n_init=10, random_state=11).fold_array(X)
    ref = KMeans(4, n_init=10, random_state=np.random.RandomState(11)).fit_predict(
        StandardScaler().fit_transform(X)
    )
    assert _partition(fold) == _partition(ref)


def test_environmental_folds_keep_sites_whole():
    x, y, site, label = _landscape(5)
    rng = np.random.default_rng(5)
    X = np.c_[x / 1000 + rng.normal(0, 0.5, x.size), rng.normal(size=x.size)]
    cv = EnvironmentalFolds(3, random_state=0)
    splits = check_split_invariants(cv.split(X, label, site), x.size, site_id=site)
    assert len(splits) == 3


def test_environmental_folds_reject_missing_predictors():
    X = np.ones((10, 2))
    X[4, 1] = np.nan
    with pytest.raises(InputError, match="first row 4"):
        EnvironmentalFolds(2).fold_array(X)


# ------------------------------------------------------------------ RandomFolds


def test_random_folds_stratified_and_grouped():
    x, y, site, label = _landscape(6, n_background=301, n_sites=23)
    cv = RandomFolds(5, random_state=0)
    splits = check_split_invariants(cv.split(np.zeros((x.size, 1)), label, site), x.size, site_id=site)
    sites_per_fold = [np.unique(site[te][site[te] >= 0]).size for _, te in splits]
    bg_per_fold = [(site[te] < 0).sum() for _, te in splits]
    # units dealt round-robin: counts per label differ by at most one between folds
    assert max(sites_per_fold) - min(sites_per_fold) <= 1 and sum(sites_per_fold) == 23
    assert max(bg_per_fold) - min(bg_per_fold) <= 1 and sum(bg_per_fold) == 301


def test_random_folds_without_groups_stratify_labels():
    y = np.r_[np.ones(12, int), np.zeros(40, int)]
    splits = check_split_invariants(RandomFolds(4, random_state=1).split(None, y), 52)
    assert sorted(int(y[te].sum()) for _, te in splits) == [3, 3, 3, 3]


def test_random_folds_too_few_sites():
    with pytest.raises(InsufficientDataError, match="fewer folds"):
        RandomFolds(5).fold_array(np.zeros((8, 1)), None, [0, 1, 2, -1, -1, -1, -1, -1])


# ----------------------------------------- Roberts et al. (2017): random CV flatters


def _cv_auc(cv, X, y, groups=None):
    aucs = []
    for train, test in cv.split(X, y, groups):
        rf = RandomForestClassifier(n_estimators=60, min_samples_leaf=2, random_state=0, n_jobs=1)
        rf.fit(X[train], y[train])
        aucs.append(roc_auc_score(y[test], rf.predict_proba(X[test])[:, 1]))
    return float(np.mean(aucs))


def test_random_folds_flatter_a_random_forest_on_autocorrelated_data():
    # METHODS.md §6 property test, after Roberts et al. 2017 (Ecography 40:913-929,
    # doi:10.1111/ecog.02881): 60x60 field of Gaussian-filtered noise (sigma 6 cells,
    # seed 0), 600 sampled cells, presences drawn with probability expit(3 f - 1.5),
    # predictors x, y and an unrelated smooth covariate. Random 5-fold CV must give a
    # higher AUC than 15-cell spatial blocks; margin 0.05 AUC so that noise alone
    # cannot pass (the direction is the published finding, not its size).
    rng = np.random.default_rng(0)
    n, cell = 60, 10.0
    field = gaussian_filter(rng.standard_normal((n, n)), 6, mode="wrap")
    field = (field - field.mean()) / field.std()
    other = gaussian_filter(rng.standard_normal((n, n)), 6, mode="wrap")
    idx = rng.choice(n * n, 600, replace=False)
    row, col = np.divmod(idx, n)
    x, y = (col + 0.5) * cell, (n - row - 0.5) * cell  # row 0 is north
    label = (rng.random(600) < expit(3 * field.ravel()[idx] - 1.5)).astype(int)
    X = np.c_[x, y, other.ravel()[idx]]
    site = np.where(label == 1, np.arange(600), -1)
    auc_random = _cv_auc(RandomFolds(5, random_state=0), X, label, site)
    blocks = SpatialBlockFolds(x, y, site_id=site, block_size=15 * cell, n_splits=5, random_state=0)
    auc_block = _cv_auc(blocks, X, label)
    assert auc_random - auc_block > 0.05


def test_each_fold_method_has_one_name_in_files_and_descriptions():
    # issue 7: the name a splitter writes into fold files is the one experiment files use
    from mlsites.experiment._config import FOLD_METHODS

    rng = np.random.default_rng(0)
    x, y = rng.uniform(0, 1000, (2, 60))
    site = np.where(np.arange(60) < 20, np.arange(60) % 10, -1)
    names = [SpatialBlockFolds(x, y, site_id=site, block_size=250, n_splits=2, kind=kind).describe()["method"]
             for kind in ("square", "hexagon")]
    names += [BufferedLeaveOneSiteOut(x, y, site, buffer=10.0).describe()["method"],
              EnvironmentalFolds(2).describe()["method"], RandomFolds(2).describe()["method"]]
    assert names == list(FOLD_METHODS)
