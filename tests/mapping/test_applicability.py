"""Tests of the dissimilarity index and area of applicability (Meyer & Pebesma 2021)."""

import pickle

import numba
import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import cdist, pdist
from sklearn.exceptions import NotFittedError

from mlsites.errors import DataQualityWarning, InputError, InsufficientDataError
from mlsites.mapping import ApplicabilityModel, mean_pairwise_distance

# METHODS.md §8 check values: training X, folds, weights (2, 1).
SHEET_X = np.array([[1, 10], [2, 12], [3, 11], [4, 15], [5, 14], [6, 18]], dtype=float)
SHEET_FOLDS = np.array([0, 0, 1, 1, 2, 2])
SHEET_NEW = np.array([[3.5, 13], [10, 30], [1, 18], [-0.5, 16]], dtype=float)


@pytest.fixture
def sheet_model():
    return ApplicabilityModel().fit(SHEET_X, SHEET_FOLDS, weights=[2, 1])


# --------------------------------------------------------------------- METHODS.md §8


def test_sheet_check_values(sheet_model):
    # METHODS.md §8 check values, tolerance 1e-6 as printed in the sheet
    m = sheet_model
    np.testing.assert_allclose(m.mean_, [3.5, 13.333333], atol=1e-6)
    np.testing.assert_allclose(m.scale_, [1.870829, 2.943920], atol=1e-6)
    assert m.mean_distance_ == pytest.approx(2.823891, abs=1e-6)
    np.testing.assert_allclose(
        m.training_dissimilarity_, [0.766639, 0.397223, 0.397223, 0.397223, 0.397223, 0.838744], atol=1e-6
    )
    np.testing.assert_allclose(m.quartiles_, [0.397223, 0.674285], atol=1e-6)
    assert m.fence_ == pytest.approx(1.089878, abs=1e-6)
    assert m.threshold_ == pytest.approx(0.838744, abs=1e-6)


def test_sheet_new_points_and_discriminating_case(sheet_model):
    # METHODS.md §8 check values: DI of the four new points and inside/outside
    di = sheet_model.dissimilarity(SHEET_NEW)
    np.testing.assert_allclose(di, [0.306116, 2.092048, 0.814995, 0.918348], atol=1e-6)
    assert sheet_model.applicable(SHEET_NEW).tolist() == [True, False, True, False]
    # The discriminating case: (-0.5, 16) is above the threshold but below the fence,
    # so a rule using the fence itself would call it inside (METHODS.md §8).
    assert sheet_model.threshold_ < di[3] < sheet_model.fence_


def test_training_rows_have_dissimilarity_zero(sheet_model):
    # analytic: a training sample is its own nearest neighbour
    np.testing.assert_array_equal(sheet_model.dissimilarity(SHEET_X), 0.0)


# --------------------------------------------------------------------- brute force


def _brute_force(X, folds, weights, categorical, Xnew, keep=None):
    """Meyer & Pebesma (2021) steps written out with scipy.spatial.distance.cdist.

    Categorical columns as one-hot columns of w / sqrt(2) (one per category seen in
    training, plus one for unseen ones), as documented by ApplicabilityModel.
    """
    X = np.asarray(X, float)
    keep = np.ones(len(X), bool) if keep is None else keep
    ref, f = X[keep], folds[keep]
    w = np.maximum(np.asarray(weights, float), 0)
    cont = [j for j in range(X.shape[1]) if j not in categorical]
    mu, sd = ref[:, cont].mean(0), ref[:, cont].std(0, ddof=1)

    def embed(A):
        parts = [(A[:, cont] - mu) / sd * w[cont]]
        for j in categorical:
            cats = np.unique(ref[:, j])
            block = np.zeros((len(A), cats.size + 1))
            for r, v in enumerate(A[:, j]):
                hit = np.flatnonzero(cats == v)
                block[r, hit[0] if hit.size else cats.size] = w[j] / np.sqrt(2)
            parts.append(block)
        return np.hstack(parts)

    Z = embed(ref)
    D = cdist(Z, Z)
    d_bar = D[np.triu_indices(len(Z), 1)].mean()
    tdi = np.full(len(Z), np.nan)
    for i in range(len(Z)):
        if f[i] >= 0:
            tdi[i] = D[i, f != f[i]].min() / d_bar
    held = tdi[np.isfinite(tdi)]
    q1, q3 = np.percentile(held, [25, 75])
    threshold = held[held <= q3 + 1.5 * (q3 - q1)].max()
    ok = np.isfinite(Xnew).all(1)
    di = np.full(len(Xnew), np.nan)
    di[ok] = cdist(embed(Xnew[ok]), Z).min(1) / d_bar
    full_tdi = np.full(len(X), np.nan)
    full_tdi[keep] = tdi
    return d_bar, full_tdi, threshold, di


def _random_case(seed):
    rng = np.random.default_rng(seed)
    n = 240
    soil = rng.integers(1, 5, size=n)
    X = np.column_stack([
        rng.normal(size=n),
        rng.gamma(2.0, 3.0, size=n),
        rng.uniform(-5, 5, size=n),
        soil.astype(float),  # categorical, codes 1..4
        ((soil + rng.integers(0, 2, size=n)) % 3).astype(float),  # categorical, 3 codes, tied to soil
    ])
    folds = rng.integers(0, 4, size=n)
    folds[rng.random(n) < 0.1] = -1  # never held out
    Xnew = np.column_stack([
        rng.normal(0, 2, 300), rng.gamma(2.0, 4.0, 300), rng.uniform(-8, 8, 300),
        rng.integers(0, 6, 300).astype(float),  # codes 0 and 5 unseen in training
        rng.integers(0, 3, 300).astype(float),  # combinations unseen in training
    ])
    Xnew[::37, 1] = np.nan
    return X, folds, Xnew


@pytest.mark.parametrize("seed", [0, 1])
def test_matches_brute_force_numpy(seed):
    # reference: scipy.spatial.distance.cdist on an explicit one-hot embedding
    X, folds, Xnew = _random_case(seed)
    weights = [1.5, 0.7, -0.3, 0.8, 2.5]  # the negative weight must act as 0
    m = ApplicabilityModel().fit(X, folds, weights=weights, categorical=[3, 4])
    d_bar, tdi, threshold, di = _brute_force(X, folds, weights, [3, 4], Xnew)
    assert m.mean_distance_ == pytest.approx(d_bar, rel=1e-12)
    np.testing.assert_allclose(m.training_dissimilarity_, tdi, rtol=1e-12, atol=1e-15, equal_nan=True)
    assert m.threshold_ == pytest.approx(threshold, rel=1e-12)
    got = m.dissimilarity(Xnew)
    np.testing.assert_allclose(got, di, rtol=1e-12, atol=1e-15, equal_nan=True)
    np.testing.assert_array_equal(m.applicable(Xnew), np.nan_to_num(di, nan=np.inf) <= threshold)
    assert np.isnan(got[::37]).all()


def test_sample_weight_zero_rows_are_left_out():
    # a zero weight must be the same as dropping the row (brute force on the kept rows)
    X, folds, Xnew = _random_case(2)
    sw = np.ones(len(X))
    sw[::5] = 0.0
    sw[1::5] = 3.7  # any positive weight counts the row once
    m = ApplicabilityModel().fit(X, folds, sample_weight=sw, categorical=[3, 4])
    d_bar, tdi, threshold, di = _brute_force(X, folds, [1, 1, 1, 1, 1], [3, 4], Xnew, keep=sw > 0)
    assert m.n_reference_ == int((sw > 0).sum())
    assert m.mean_distance_ == pytest.approx(d_bar, rel=1e-12)
    np.testing.assert_allclose(m.training_dissimilarity_, tdi, rtol=1e-12, atol=1e-15, equal_nan=True)
    assert m.threshold_ == pytest.approx(threshold, rel=1e-12)
    np.testing.assert_allclose(m.dissimilarity(Xnew), di, rtol=1e-12, atol=1e-15, equal_nan=True)


def test_categorical_only_matches_brute_force():
    # reference: cdist on the one-hot columns alone
    X, folds, Xnew = _random_case(11)
    m = ApplicabilityModel().fit(X[:, 3:], folds, weights=[1.0, 0.4], categorical=[0, 1])
    d_bar, tdi, threshold, di = _brute_force(X[:, 3:], folds, [1.0, 0.4], [0, 1], Xnew[:, 3:])
    assert m.mean_distance_ == pytest.approx(d_bar, rel=1e-12)
    assert m.threshold_ == pytest.approx(threshold, rel=1e-12)
    np.testing.assert_allclose(m.dissimilarity(Xnew[:, 3:]), di, rtol=1e-12, atol=1e-15)


def test_splits_with_buffers_match_brute_force():
    # folds given as (train, test) pairs whose training sets leave out a buffer:
    # the nearest row is searched only among each split's training rows (cdist)
    rng = np.random.default_rng(3)
    X = rng.normal(size=(150, 3))
    test_sets = np.array_split(rng.permutation(150), 5)
    splits = []
    for test in test_sets:
        train = np.setdiff1d(np.arange(150), test)
        train = train[rng.random(train.size) > 0.3]  # drop a "buffer"
        splits.append((train, test))
    m = ApplicabilityModel().fit(X, splits)
    Z = (X - X.mean(0)) / X.std(0, ddof=1)
    D = cdist(Z, Z)
    d_bar = D[np.triu_indices(150, 1)].mean()
    expected = np.empty(150)
    for train, test in splits:
        expected[test] = D[np.ix_(test, train)].min(1) / d_bar
    np.testing.assert_allclose(m.training_dissimilarity_, expected, rtol=1e-12)


def test_fold_labels_equal_their_splits():
    # the two forms of folds describe the same cross-validation (equivalence)
    X, folds, Xnew = _random_case(4)
    rows = np.arange(len(X))
    splits = [(rows[folds != k], rows[folds == k]) for k in range(4)]
    a = ApplicabilityModel().fit(X, folds, categorical=[3, 4])
    b = ApplicabilityModel().fit(X, splits, categorical=[3, 4])
    np.testing.assert_array_equal(a.training_dissimilarity_, b.training_dissimilarity_)
    assert a.threshold_ == b.threshold_


# --------------------------------------------------------------------- invariances


@pytest.mark.parametrize("factor", [0.01, 7.3])
def test_invariant_to_common_rescaling_of_weights(factor):
    # METHODS.md §8 [derived]: DI and threshold do not change when all weights scale
    X, folds, Xnew = _random_case(5)
    w = np.array([1.5, 0.7, 0.2, 0.8, 1.1])
    a = ApplicabilityModel().fit(X, folds, weights=w, categorical=[3, 4])
    b = ApplicabilityModel().fit(X, folds, weights=w * factor, categorical=[3, 4])
    assert b.threshold_ == pytest.approx(a.threshold_, rel=1e-12)
    np.testing.assert_allclose(b.dissimilarity(Xnew), a.dissimilarity(Xnew), rtol=1e-12, equal_nan=True)


def test_chunks_jobs_pickle_and_float32_give_identical_results():
    # equivalences: any chunk size, worker count, a pickled copy, float32 input
    X, folds, Xnew = _random_case(6)
    a = ApplicabilityModel().fit(X, folds, categorical=[3, 4])
    expected = a.dissimilarity(Xnew)
    for chunk, jobs in ((1, 1), (7, 2), (1000, -1)):
        b = ApplicabilityModel(n_jobs=jobs, chunk_size=chunk).fit(X, folds, categorical=[3, 4])
        np.testing.assert_array_equal(b.dissimilarity(Xnew), expected)
    c = pickle.loads(pickle.dumps(a))
    np.testing.assert_array_equal(c.dissimilarity(Xnew), expected)
    x32 = Xnew.astype(np.float32)
    np.testing.assert_array_equal(a.dissimilarity(x32), a.dissimilarity(x32.astype(np.float64)))


def test_dataframe_columns_by_name():
    # equivalence: DataFrame input with names (weights and categorical by name),
    # columns reordered at prediction time
    X, folds, Xnew = _random_case(7)
    names = ["height", "slope", "wetness", "soil", "landform"]
    a = ApplicabilityModel().fit(X, folds, weights=[1, 2, 0.5, 1, 3], categorical=[3, 4])
    b = ApplicabilityModel().fit(
        pd.DataFrame(X, columns=names), folds,
        weights={"soil": 1, "slope": 2, "height": 1, "wetness": 0.5, "landform": 3},
        categorical=["landform", "soil"],
    )
    new = pd.DataFrame(Xnew, columns=names)[["soil", "wetness", "landform", "height", "slope"]]
    np.testing.assert_array_equal(b.dissimilarity(new), a.dissimilarity(Xnew))
    with pytest.raises(InputError, match=r"lacks the predictor column\(s\) \['slope'\]"):
        b.dissimilarity(new.drop(columns="slope"))


# --------------------------------------------------------------------- synthetic truth


def test_excluded_environment_is_outside_by_construction():
    # A fictional landscape (mlsites.synthetic); training cells come only from the
    # lower 70 % of heights. A cell whose height exceeds every training height by
    # more than threshold * d_bar (in weighted sd units) is at least that far from
    # every training sample whatever its slope, so it must be outside.
    from mlsites.synthetic import make_landscape
    from mlsites.terrain import slope

    land = make_landscape((160, 160), random_state=11)
    dem = land.dem.astype(np.float64)
    features = np.column_stack([dem.ravel(), slope(dem, 10.0).ravel()])
    ok = np.isfinite(features).all(1)
    lower = ok & (features[:, 0] <= np.quantile(features[ok, 0], 0.7))
    rng = np.random.default_rng(0)
    rows = rng.choice(np.flatnonzero(lower), 1500, replace=False)
    m = ApplicabilityModel().fit(features[rows], rng.integers(0, 5, rows.size))
    margin = m.threshold_ * m.mean_distance_ * m.scale_[0] / m.weights_[0]
    excluded = ok & (features[:, 0] > features[rows, 0].max() + margin)
    assert excluded.sum() > 500  # the landscape has such a region
    inside = m.applicable(features)
    assert not inside[excluded].any()
    # and the environment it was trained on is mostly inside (common practice: the
    # threshold drops only the outliers of the training DI, a few per cent)
    assert inside[lower].mean() > 0.9


# --------------------------------------------------------------------- kernel


def test_mean_pairwise_distance_matches_pdist_and_threads():
    # reference: scipy.spatial.distance.pdist; categories as one-hot of w / sqrt(2)
    rng = np.random.default_rng(8)
    z = rng.normal(size=(501, 4))
    codes = rng.integers(0, 3, size=(501, 2))
    pen = np.array([0.5, 2.0])
    onehot = np.hstack([z] + [np.eye(3)[codes[:, j]] * np.sqrt(pen[j] / 2) for j in range(2)])
    assert mean_pairwise_distance(z) == pytest.approx(pdist(z).mean(), rel=1e-12)
    assert mean_pairwise_distance(z, codes, pen) == pytest.approx(pdist(onehot).mean(), rel=1e-12)
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = mean_pairwise_distance(z, codes, pen)
    finally:
        numba.set_num_threads(before)
    assert one == mean_pairwise_distance(z, codes, pen)


# --------------------------------------------------------------------- bad input


def test_bad_input_messages():
    X, folds, _ = _random_case(9)
    bad = X.copy()
    bad[17, 2] = np.nan
    with pytest.raises(InputError, match="first at row 17, column 2"):
        ApplicabilityModel().fit(bad, folds)
    with pytest.raises(InputError, match=r"folds has shape \(3,\)"):
        ApplicabilityModel().fit(X, [0, 1, 2])
    with pytest.raises(InputError, match="integer fold numbers"):
        ApplicabilityModel().fit(X, folds + 0.5)
    with pytest.raises(InsufficientDataError, match="at least two folds"):
        ApplicabilityModel().fit(X, np.zeros(len(X), int))
    with pytest.raises(InputError, match="expected 5 numbers"):
        ApplicabilityModel().fit(X, folds, weights=[1, 2])
    with pytest.raises(InputError, match="at least one positive weight"):
        ApplicabilityModel().fit(X, folds, weights=[-1, 0, -2, 0, 0])
    with pytest.raises(InputError, match="no column names"):
        ApplicabilityModel().fit(X, folds, weights={"a": 1})
    rows = np.arange(len(X))
    with pytest.raises(InputError, match="held out already"):
        ApplicabilityModel().fit(X, [(rows[:100], rows[100:]), (rows[:50], rows[50:])])
    with pytest.raises(NotFittedError):
        ApplicabilityModel().dissimilarity(X)
    m = ApplicabilityModel().fit(X, folds)
    with pytest.raises(InputError, match="3 predictor column"):
        m.dissimilarity(X[:, :3])
    with pytest.raises(InputError, match="2-D array"):
        m.dissimilarity(X[0])
    with pytest.raises(InputError, match="chunk_size=0"):
        ApplicabilityModel(chunk_size=0).fit(X, folds).dissimilarity(X)


def test_constant_predictor_warns_and_is_ignored():
    X, folds, Xnew = _random_case(10)
    X = X.copy()
    X[:, 2] = 4.0
    with pytest.warns(DataQualityWarning, match="column 'wetness' is constant"):
        m = ApplicabilityModel().fit(pd.DataFrame(X, columns=["a", "b", "wetness", "c", "d"]), folds)
    assert m.weights_[2] == 0.0
    ref = ApplicabilityModel().fit(X, folds, weights=[1, 1, 0, 1, 1])
    np.testing.assert_array_equal(m.dissimilarity(Xnew), ref.dissimilarity(Xnew))
