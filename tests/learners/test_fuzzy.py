"""Tests of the percentile-fuzzy suitability baseline.

Expected numbers come from METHODS.md §10 (check values computed there with numpy 2.4;
operators after Zimmermann & Zysno 1980 and An, Moon & Rencz 1991), from numpy's
``np.percentile`` (Hyndman & Fan 1996 type 7) and from hand calculations shown in the
comments. Tolerances: 1e-9 for percentiles and 1e-6 for memberships, as METHODS.md
§10 states; 1e-12 where two float64 computations of the same quantity are compared.
"""

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import brentq
from sklearn.utils.estimator_checks import parametrize_with_checks

from mlsites.errors import InputError, InsufficientDataError
from mlsites.learners import (
    FuzzySuitability,
    category_memberships,
    fuzzy_combine,
    fuzzy_membership,
    weighted_percentile,
)

# METHODS.md §10 check values
SITES = np.array([12, 15, 18, 20, 22, 25, 27, 30, 35, 48], dtype=float)
P_EXPECTED = [13.35, 18.5, 29.25, 42.15]
X_PROBE = np.array([10, 14, 19, 26, 31, 40, 50], dtype=float)
MU_LINEAR = [0, 0.126214, 1, 1, 0.864341, 0.166667, 0]
MU_COSINE = [0, 0.038793, 1, 1, 0.955275, 0.066987, 0]
# the method as METHODS.md §10 states it: P5/25/75/95, trapezoids reaching 0, one layer
# (every layer: the rule choosing a subset of layers is ours, tested under "layer selection")
PLAIN = dict(percentiles=(5, 25, 75, 95), membership_floor=0.0, operator="minimum", layer_selection="all")


@pytest.fixture
def global_random_seed():
    return 20240611


def _sites_and_background(values, background=(0.0, 100.0)):
    X = np.concatenate([values, background])[:, None]
    y = np.r_[np.ones(len(values)), np.zeros(len(background))]
    return X, y


# -- weighted percentiles -------------------------------------------------------------


def test_percentiles_match_methods_check_values():
    # METHODS.md §10: P5, P25, P75, P95 = 13.35, 18.5, 29.25, 42.15, tol 1e-9
    got = weighted_percentile(SITES, [5, 25, 75, 95])
    np.testing.assert_allclose(got, P_EXPECTED, rtol=0, atol=1e-9)
    # the weighted path with equal (non-unit) weights must give the same numbers
    got_w = weighted_percentile(SITES, [5, 25, 75, 95], np.full(SITES.size, 0.37))
    np.testing.assert_allclose(got_w, P_EXPECTED, rtol=0, atol=1e-9)


@pytest.mark.parametrize("n", [2, 3, 7, 50])
def test_equal_weights_equal_numpy_linear(n, global_random_seed):
    # reference: np.percentile(method="linear"), Hyndman & Fan (1996) type 7
    rng = np.random.default_rng(global_random_seed + n)
    x = np.round(rng.normal(size=n), 1)  # rounding creates ties
    q = np.linspace(0, 100, 41)
    expected = np.percentile(x, q, method="linear")
    got = weighted_percentile(x, q, np.full(n, 2.5))
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-12)


def _brute_force_weighted_percentile(x, q, w):
    """Loop version of the definition: p_k = (weight before k) / (W - w_k)."""
    pairs = sorted((xi, wi) for xi, wi in zip(x, w) if wi > 0)
    xs = [p[0] for p in pairs]
    ws = [p[1] for p in pairs]
    total = sum(ws)
    positions, before = [], 0.0
    for wk in ws:
        positions.append(before / (total - wk))
        before += wk
    out = []
    for qi in np.atleast_1d(q) / 100.0:
        for k in range(len(xs) - 1):
            if positions[k] <= qi <= positions[k + 1]:
                t = (qi - positions[k]) / (positions[k + 1] - positions[k])
                out.append(xs[k] + t * (xs[k + 1] - xs[k]))
                break
    return np.array(out)


def test_weighted_percentile_hand_example():
    # hand calculation from the definition: x = (1, 2, 3), w = (1, 2, 1), W = 4;
    # positions 0/3 = 0, 1/2 = 0.5, 3/3 = 1, so P25 = 1.5, P50 = 2, P75 = 2.5
    got = weighted_percentile([3, 1, 2], [0, 25, 50, 75, 100], [1, 1, 2])
    np.testing.assert_allclose(got, [1, 1.5, 2, 2.5, 3], rtol=0, atol=1e-12)


def test_weighted_percentile_brute_force_and_invariances(global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    x = rng.normal(size=40)
    w = rng.uniform(0.1, 3.0, size=40)
    q = np.linspace(0, 100, 21)
    got = weighted_percentile(x, q, w)
    np.testing.assert_allclose(got, _brute_force_weighted_percentile(x, q, w), atol=1e-12)
    # scale invariance, row-order invariance
    np.testing.assert_allclose(weighted_percentile(x, q, 7.0 * w), got, rtol=1e-12, atol=1e-12)
    perm = rng.permutation(40)
    np.testing.assert_allclose(weighted_percentile(x[perm], q, w[perm]), got, atol=1e-12)
    # sign reversal maps P_q to -P_(100-q) (values are untied)
    np.testing.assert_allclose(
        weighted_percentile(-x, 100 - q, w), -got, rtol=1e-12, atol=1e-12
    )
    # zero weight equals dropping the row
    w0 = w.copy()
    w0[:10] = 0
    np.testing.assert_allclose(
        weighted_percentile(x, q, w0), weighted_percentile(x[10:], q, w[10:]), atol=1e-12
    )
    # P0 and P100 are the extremes
    assert weighted_percentile(x, 0, w) == x.min()
    assert weighted_percentile(x, 100, w) == x.max()


def test_weighted_percentile_heavy_row_pulls_towards_it():
    base = weighted_percentile(SITES, 50, np.ones(10))
    heavy = np.ones(10)
    heavy[-1] = 20.0  # the value 48
    assert weighted_percentile(SITES, 50, heavy) > base


def test_weighted_percentile_single_value_and_errors():
    assert weighted_percentile([4.0, 9.0], 30, [0, 2]) == 9.0
    with pytest.raises(InputError, match="All sample weights are zero"):
        weighted_percentile([1.0, 2.0], 50, [0, 0])
    with pytest.raises(InputError, match=r"\[0, 100\]"):
        weighted_percentile([1.0, 2.0], 101)
    with pytest.raises(InputError, match="non-finite"):
        weighted_percentile([1.0, np.nan], 50)
    with pytest.raises(InputError, match="negative"):
        weighted_percentile([1.0, 2.0], 50, [1, -1])


# -- membership functions ------------------------------------------------------------


@pytest.mark.parametrize("shape, expected", [("linear", MU_LINEAR), ("cosine", MU_COSINE)])
def test_membership_check_values(shape, expected):
    # METHODS.md §10: memberships at x = (10, 14, 19, 26, 31, 40, 50), tol 1e-6
    got = fuzzy_membership(X_PROBE, P_EXPECTED, shape=shape)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-6)


@pytest.mark.parametrize("shape, expected", [("linear", MU_LINEAR), ("cosine", MU_COSINE)])
def test_estimator_reproduces_check_values(shape, expected):
    # METHODS.md §10, end to end: control points from the sites, then memberships
    X, y = _sites_and_background(SITES)
    model = FuzzySuitability(shape=shape, **PLAIN).fit(X, y)
    np.testing.assert_allclose(model.control_points_[0], P_EXPECTED, rtol=0, atol=1e-9)
    proba = model.predict_proba(X_PROBE[:, None])
    np.testing.assert_allclose(proba[:, 1], expected, rtol=0, atol=1e-6)
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    # predict thresholds mu at 0.5 (mu = 0.166667 -> background, 0.864341 -> site)
    np.testing.assert_array_equal(model.predict(X_PROBE[:, None]), np.array(expected) > 0.5)


def test_degenerate_limbs_are_steps():
    # METHODS.md §10: a = b (or c = d) -> step, no division by zero; plateau is closed
    with np.errstate(all="raise"):
        got = fuzzy_membership([1.0, 2.0, 2.5, 3.0, 3.5], [2, 2, 3, 3], shape="linear")
        got_c = fuzzy_membership([1.0, 2.0, 2.5, 3.0, 3.5], [2, 2, 3, 3], shape="cosine")
    np.testing.assert_array_equal(got, [0, 1, 1, 1, 0])
    np.testing.assert_array_equal(got_c, [0, 1, 1, 1, 0])
    # all sites share one value: membership 1 only at that value
    X, y = _sites_and_background(np.full(6, 5.0))
    model = FuzzySuitability(**PLAIN).fit(X, y)
    np.testing.assert_array_equal(model.predict_proba([[4.9], [5.0], [5.1]])[:, 1], [0, 1, 0])


def test_monotone_memberships():
    # METHODS.md §10: monotone versions use c = d = +inf or a = b = -inf
    X, y = _sites_and_background(SITES)
    inc = FuzzySuitability(monotone={0: "increasing"}, **PLAIN).fit(X, y)
    dec = FuzzySuitability(monotone=["decreasing"], **PLAIN).fit(X, y)
    np.testing.assert_array_equal(inc.control_points_[0, 2:], [np.inf, np.inf])
    np.testing.assert_array_equal(dec.control_points_[0, :2], [-np.inf, -np.inf])
    with np.errstate(all="raise"):
        mu_inc = inc.predict_proba(X_PROBE[:, None])[:, 1]
        mu_dec = dec.predict_proba(X_PROBE[:, None])[:, 1]
    # rising limb as in MU_LINEAR, then 1; falling limb as in MU_LINEAR, 1 before it
    np.testing.assert_allclose(mu_inc, [0, 0.126214, 1, 1, 1, 1, 1], rtol=0, atol=1e-6)
    np.testing.assert_allclose(mu_dec, [1, 1, 1, 1, 0.864341, 0.166667, 0], rtol=0, atol=1e-6)


def test_membership_rejects_bad_control_points():
    with pytest.raises(InputError, match="non-decreasing"):
        fuzzy_membership([1.0], [3, 2, 4, 5])
    with pytest.raises(InputError, match="pairs"):
        fuzzy_membership([1.0], [-np.inf, 2, 4, 5])
    with pytest.raises(InputError, match="shape"):
        fuzzy_membership([1.0], [1, 2, 3, 4], shape="bell")


# -- operators -----------------------------------------------------------------------


@pytest.mark.parametrize(
    "operator, gamma, expected",
    [
        # METHODS.md §10, mu = (0.8, 0.2), tol 1e-6
        ("minimum", 0.9, 0.2),
        ("maximum", 0.9, 0.8),
        ("algebraic_product", 0.9, 0.16),
        ("algebraic_sum", 0.9, 0.84),
        ("gamma_operator", 0.5, 0.366606),
        ("gamma_operator", 0.75, 0.554932),
        ("gamma_operator", 0.9, 0.711645),
        # gamma = 0 and 1 reduce to product and sum (METHODS.md §10)
        ("gamma_operator", 0.0, 0.16),
        ("gamma_operator", 1.0, 0.84),
    ],
)
def test_operator_check_values_two_layers(operator, gamma, expected):
    got = fuzzy_combine([0.8, 0.2], operator=operator, gamma=gamma)
    assert got == pytest.approx(expected, abs=1e-6)


@pytest.mark.parametrize(
    "operator, expected",
    # METHODS.md §10, mu = (0.7, 0.5, 0.9): FAP 0.315, FAS 0.985, gamma 0.9 -> 0.878868
    [("algebraic_product", 0.315), ("algebraic_sum", 0.985), ("gamma_operator", 0.878868)],
)
def test_operator_check_values_three_layers(operator, expected):
    got = fuzzy_combine([[0.7, 0.5, 0.9]], operator=operator, gamma=0.9)
    np.testing.assert_allclose(got, [expected], rtol=0, atol=1e-6)


@pytest.mark.parametrize("target, expected", [(0.8, 0.970577), (0.2, 0.134567)])
def test_gamma_root_finding(target, expected):
    # METHODS.md §10: gamma at which mu_gamma = 0.8 and 0.2 for mu = (0.8, 0.2)
    def excess(g):
        return fuzzy_combine([0.8, 0.2], operator="gamma_operator", gamma=g) - target

    root = brentq(excess, 0.0, 1.0, xtol=1e-12)
    assert root == pytest.approx(expected, abs=1e-6)


def test_gamma_handles_zero_memberships():
    # 0**0 = 1: with a zero layer FAP = 0, and gamma = 1 must still give FAS
    with np.errstate(all="raise"):
        assert fuzzy_combine([0.0, 0.5], operator="gamma_operator", gamma=1.0) == pytest.approx(0.5)
        assert fuzzy_combine([0.0, 0.0], operator="gamma_operator", gamma=0.0) == 0.0


def test_estimator_combines_layers_like_reference():
    # two layers; reference: per-layer memberships from METHODS.md §10 (layer 1 is the
    # check-value layer, layer 2 its mirror image), combined with NumPy formulas
    X = np.column_stack([np.r_[SITES, 0, 100], -np.r_[SITES, 0, 100]])
    y = np.r_[np.ones(10), 0, 0]
    probe = np.column_stack([X_PROBE, -X_PROBE[::-1]])
    mu1 = np.array(MU_LINEAR)
    mu2 = np.array(MU_LINEAR)[::-1]
    fap, fas = mu1 * mu2, 1 - (1 - mu1) * (1 - mu2)
    for operator, expected in [
        ("minimum", np.minimum(mu1, mu2)),
        ("maximum", np.maximum(mu1, mu2)),
        ("gamma_operator", fas**0.7 * fap**0.3),
    ]:
        model = FuzzySuitability(operator=operator, gamma=0.7, percentiles=(5, 25, 75, 95), layer_selection="all",
                                 membership_floor=0.0, rescale_product=False).fit(X, y)
        got = model.predict_proba(probe)[:, 1]
        np.testing.assert_allclose(got, expected, rtol=0, atol=1e-5)
        np.testing.assert_allclose(
            model.predict_memberships(probe), np.column_stack([mu1, mu2]), atol=1e-6
        )


# -- categorical layers, weights, input types ----------------------------------------


def test_categorical_membership_is_relative_site_density():
    # Issue 7: a class's membership is its share of sites over its share of the landscape
    # (background), scaled so the densest class is 1. Hand calculation: sites 3 ridge,
    # 1 valley, 2 terrace (shares 1/2, 1/6, 1/3); background 4 ridge, 1 valley, 2 terrace,
    # 3 plain (shares 0.4, 0.1, 0.2, 0.3); densities 1.25, 5/3, 5/3, 0 -> divided by 5/3:
    # ridge 0.75, valley 1, terrace 1. (The raw share of sites would rank ridge first,
    # merely because ridges cover much of the study area.)
    land = ["ridge"] * 3 + ["valley"] + ["terrace"] * 2 + ["ridge"] * 4 + ["valley"] + ["terrace"] * 2 + ["plain"] * 3
    X = pd.DataFrame({"landform": land, "height": np.arange(16.0)})
    y = np.r_[np.ones(6), np.zeros(10)]
    model = FuzzySuitability(categorical_features=["landform"], **PLAIN).fit(X, y)
    assert model.category_memberships_[0] == pytest.approx({"ridge": 0.75, "valley": 1.0, "terrace": 1.0})
    probe = pd.DataFrame({"landform": ["ridge", "plain", "moraine"], "height": [2.5] * 3})
    # a class without sites ("plain") and an unseen class ("moraine") give 0 ...
    np.testing.assert_allclose(model.predict_memberships(probe)[:, 0], [0.75, 0, 0])
    assert np.isnan(model.control_points_[0]).all()
    # ... and the floor with membership_floor = 0.2: 0.2 + 0.8 * mu
    floored = FuzzySuitability(categorical_features=["landform"], membership_floor=0.2).fit(X, y)
    np.testing.assert_allclose(floored.predict_memberships(probe)[:, 0], [0.8, 0.2, 0.2], atol=1e-12)
    # with weights on the site rows: ridge 0.5 each (1.5), valley 3, terrace 1 each (2), of
    # 6.5; densities (1.5/6.5)/0.4, (3/6.5)/0.1, (2/6.5)/0.2 -> 0.125, 1, 1/3 of the largest
    w = np.r_[0.5, 0.5, 0.5, 3.0, 1.0, 1.0, np.ones(10)]
    weighted = FuzzySuitability(categorical_features=[0], **PLAIN).fit(X, y, sample_weight=w)
    assert weighted.category_memberships_[0] == pytest.approx({"ridge": 0.125, "valley": 1.0, "terrace": 1 / 3})


def test_class_missing_from_the_background_gets_half_a_row():
    # sites: A, A, B; background: A x 4. B gets a background share of half a row, 0.5/4;
    # densities (2/3)/1 and (1/3)/0.125 = 2.667 -> memberships 0.25 and 1
    got = category_memberships(["A", "A", "B"], ["A"] * 4)
    assert got == pytest.approx({"A": 0.25, "B": 1.0})


def test_numeric_category_codes_in_arrays():
    # codes stored as floats at fit and ints at predict must still match; sites 1, 1, 2,
    # background 3, 3: densities (2/3)/0.25 and (1/3)/0.25 -> 1 and 0.5; class 3 has no site
    X = np.column_stack([[1.0, 1.0, 2.0, 3.0, 3.0], [5.0, 6.0, 7.0, 8.0, 9.0]])
    y = np.array([1, 1, 1, 0, 0])
    model = FuzzySuitability(categorical_features=[0], **PLAIN).fit(X, y)
    probe = np.array([[1, 7], [2, 7], [3, 7]], dtype=object)
    np.testing.assert_allclose(model.predict_memberships(probe)[:, 0], [1.0, 0.5, 0.0])


def test_gamma_is_chosen_from_the_training_rows():
    # reference: the weighted training AUC of every gamma on the grid, computed here with
    # sklearn.metrics.roc_auc_score from the model's own memberships and the METHODS.md
    # §10 operator formulas; the smallest gamma within 0.001 of the best is kept.
    from sklearn.metrics import roc_auc_score

    rng = np.random.default_rng(5)
    y = np.r_[np.ones(60, int), np.zeros(240, int)]
    # two layers, sites concentrated in the middle of the first one only
    X = np.column_stack([np.where(y == 1, rng.normal(0, 0.5, 300), rng.normal(0, 2, 300)), rng.normal(size=300)])
    w = np.where(y == 1, 1.0, 0.25)
    model = FuzzySuitability(membership_floor=0.1, layer_selection="all").fit(X, y, sample_weight=w)
    mu = model.predict_memberships(X)
    fap, fas = mu.prod(axis=1), 1 - (1 - mu).prod(axis=1)
    grid = np.linspace(0, 1, 21)
    auc = np.array([roc_auc_score(y, fas**g * fap ** (1 - g), sample_weight=w) for g in grid])
    expected = grid[np.flatnonzero(auc >= auc.max() - 1e-3)[0]]
    assert model.gamma_ == pytest.approx(expected, abs=1e-12)
    np.testing.assert_allclose(model.gamma_auc_, auc, atol=1e-12)
    # reported as the square root (two layers), the geometric mean per layer
    np.testing.assert_allclose(model.predict_proba(X)[:, 1], (fas**expected * fap ** (1 - expected)) ** 0.5,
                               atol=1e-12)
    # a gamma given is used as it is
    assert FuzzySuitability(gamma=0.4).fit(X, y).gamma_ == 0.4
    # only the training rows count: a model refitted on half the rows chooses from those
    half = FuzzySuitability(membership_floor=0.1, layer_selection="all").fit(X[::2], y[::2], sample_weight=w[::2])
    mu_h = half.predict_memberships(X[::2])
    fap_h, fas_h = mu_h.prod(axis=1), 1 - (1 - mu_h).prod(axis=1)
    auc_h = [roc_auc_score(y[::2], fas_h**g * fap_h ** (1 - g), sample_weight=w[::2]) for g in grid]
    np.testing.assert_allclose(half.gamma_auc_, auc_h, atol=1e-12)


def test_rescaled_product_is_the_root_and_keeps_the_order():
    # the n-th root of the algebraic product (METHODS.md §10 FAP) is the geometric mean
    # of the memberships (reference: scipy.stats.gmean); ranks and hence AUC unchanged
    from scipy.stats import gmean, rankdata

    rng = np.random.default_rng(9)
    X = rng.normal(size=(200, 4))
    y = (rng.random(200) < 0.3).astype(int)
    kwargs = dict(operator="algebraic_product", membership_floor=0.1, layer_selection="all")
    root = FuzzySuitability(**kwargs).fit(X, y)
    plain = FuzzySuitability(rescale_product=False, **kwargs).fit(X, y)
    mu = root.predict_memberships(X)
    np.testing.assert_allclose(root.predict_proba(X)[:, 1], gmean(mu, axis=1), rtol=1e-12)
    np.testing.assert_allclose(plain.predict_proba(X)[:, 1], mu.prod(axis=1), rtol=1e-12)
    np.testing.assert_array_equal(rankdata(root.predict_proba(X)[:, 1]), rankdata(plain.predict_proba(X)[:, 1]))
    # minimum and maximum are already on the scale of one membership: no root
    low = FuzzySuitability(operator="minimum", membership_floor=0.1, layer_selection="all").fit(X, y)
    np.testing.assert_allclose(low.predict_proba(X)[:, 1], low.predict_memberships(X).min(axis=1), rtol=1e-12)


def test_floor_keeps_cells_apart():
    # Issue 7: memberships that reach 0 make the algebraic product (and the gamma operator
    # below 1) 0 wherever one layer is outside the site range, tying those cells; with a
    # floor the other layers still rank them. Two layers; probe points outside the first
    # layer's range at different values of the second.
    X, y = _sites_and_background(SITES)
    X = np.column_stack([X[:, 0], X[:, 0]])
    probe = np.column_stack([np.full(3, 100.0), [20.0, 30.0, 40.0]])
    both = dict(operator="algebraic_product", layer_selection="all")
    plain = FuzzySuitability(membership_floor=0.0, **both).fit(X, y)
    floored = FuzzySuitability(membership_floor=0.2, **both).fit(X, y)
    assert np.unique(plain.predict_proba(probe)[:, 1]).size == 1
    assert np.unique(floored.predict_proba(probe)[:, 1]).size == 3


def test_zero_weights_equal_dropping_rows_and_scale_invariance(global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    X = rng.normal(size=(60, 3))
    y = (rng.random(60) < 0.5).astype(int)
    w = rng.uniform(0.2, 2.0, size=60)
    w[:15] = 0.0
    probe = rng.normal(size=(30, 3))
    kwargs = dict(operator="gamma_operator", gamma=0.6, shape="cosine")
    weighted = FuzzySuitability(**kwargs).fit(X, y, sample_weight=w)
    dropped = FuzzySuitability(**kwargs).fit(X[15:], y[15:], sample_weight=w[15:])
    scaled = FuzzySuitability(**kwargs).fit(X, y, sample_weight=10 * w)
    np.testing.assert_allclose(weighted.control_points_, dropped.control_points_, atol=1e-12)
    np.testing.assert_allclose(weighted.control_points_, scaled.control_points_, atol=1e-12)
    np.testing.assert_allclose(
        weighted.predict_proba(probe), dropped.predict_proba(probe), atol=1e-12
    )
    # weights must matter: unweighted control points differ
    plain = FuzzySuitability(**kwargs).fit(X, y)
    assert not np.allclose(plain.control_points_, weighted.control_points_)


def test_dataframe_and_array_give_same_predictions(global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    frame = pd.DataFrame(
        {
            "elevation": rng.normal(300, 50, 80),
            "soil": rng.choice(["a", "b", "c"], 80),
            "slope": rng.gamma(2.0, 3.0, 80),
        }
    )
    y = (rng.random(80) < 0.4).astype(int)
    by_name = FuzzySuitability(categorical_features=["soil"], monotone={"slope": "decreasing"})
    by_index = FuzzySuitability(categorical_features=[1], monotone=[None, None, "decreasing"])
    by_name.fit(frame, y)
    by_index.fit(frame.to_numpy(dtype=object), y)
    np.testing.assert_array_equal(by_name.feature_names_in_, ["elevation", "soil", "slope"])
    assert not hasattr(by_index, "feature_names_in_")
    np.testing.assert_array_equal(
        by_name.predict_proba(frame), by_index.predict_proba(frame.to_numpy(dtype=object))
    )


def test_string_class_labels_use_the_larger_label_as_sites():
    X, _ = _sites_and_background(SITES)
    y = np.array(["site"] * 10 + ["background"] * 2)
    model = FuzzySuitability(**PLAIN).fit(X, y)
    np.testing.assert_array_equal(model.classes_, ["background", "site"])
    np.testing.assert_allclose(model.control_points_[0], P_EXPECTED, atol=1e-9)


@pytest.mark.parametrize(
    "params, y, error, match",
    [
        ({}, [0, 1, 2, 1, 0, 2], InputError, "Only binary classification"),
        ({"operator": "xor"}, [0, 1] * 3, InputError, "Unknown operator"),
        # the names of one desktop program are not ours (issue 7)
        ({"operator": "and"}, [0, 1] * 3, InputError, "Unknown operator 'and'; use one of .*minimum"),
        ({"membership_floor": 1.0}, [0, 1] * 3, InputError, "membership_floor must be"),
        ({"shape": "bell"}, [0, 1] * 3, InputError, "Unknown shape"),
        ({"gamma": 1.5}, [0, 1] * 3, InputError, "gamma must be"),
        ({"percentiles": (5, 75, 25, 95)}, [0, 1] * 3, InputError, "non-decreasing"),
        ({"percentiles": (5, 25, 95)}, [0, 1] * 3, InputError, "4 non-decreasing"),
        ({"categorical_features": ["soil"]}, [0, 1] * 3, InputError, "no column names"),
        ({"categorical_features": [7]}, [0, 1] * 3, InputError, r"\[7\], but X has 2 feature\(s\)"),
        ({"monotone": ["up", None]}, [0, 1] * 3, InputError, "monotone entry"),
        ({"monotone": {0: "increasing"}, "categorical_features": [0]}, [0, 1] * 3,
         InputError, "cannot be monotone"),
    ],
)
def test_errors(params, y, error, match):
    X = np.arange(12.0).reshape(6, 2)
    with pytest.raises(error, match=match):
        FuzzySuitability(**params).fit(X, np.array(y))


def test_error_when_no_weighted_site():
    X, y = _sites_and_background(SITES)
    w = np.r_[np.zeros(10), 1.0, 1.0]
    with pytest.raises(InsufficientDataError, match="positive weight"):
        FuzzySuitability().fit(X, y, sample_weight=w)
    with pytest.raises(InsufficientDataError, match="background class"):
        FuzzySuitability().fit(X, y, sample_weight=np.r_[np.ones(10), 0.0, 0.0])
    with pytest.raises(InputError, match="gamma must be"):
        fuzzy_combine([0.5, 0.5], operator="gamma_operator")


def test_error_names_column_with_missing_category():
    X = pd.DataFrame({"soil": ["a", None, "b", "a"], "h": [1.0, 2.0, 3.0, 4.0]})
    with pytest.raises(InputError, match="'soil' has 1 missing"):
        FuzzySuitability(categorical_features=["soil"]).fit(X, [1, 1, 0, 0])


# -- layer selection ------------------------------------------------------------------


def _signal_and_noise(rng, n_sites=300, n_background=1200, signal=0):
    """Three layers; sites sit in the middle of layer ``signal`` only (truth by construction).

    Background values of every layer and site values of the other layers are all drawn
    from N(0, 2), so those layers carry no information about sites.
    """
    y = np.r_[np.ones(n_sites, int), np.zeros(n_background, int)]
    X = rng.normal(0.0, 2.0, size=(y.size, 3))
    X[y == 1, signal] = rng.normal(0.0, 0.5, n_sites)
    return X, y


@pytest.mark.parametrize("params", [dict(layer_selection="forward"),
                                    dict(layer_selection="top_k", max_layers=1)])
def test_selection_keeps_the_signal_layer_and_drops_noise(params, global_random_seed):
    from sklearn.metrics import roc_auc_score

    X, y = _signal_and_noise(np.random.default_rng(global_random_seed))
    model = FuzzySuitability(**params).fit(X, y)
    np.testing.assert_array_equal(model.layers_used_, [0])
    # layer_auc_ is sklearn's weighted AUC of each layer's own membership (equal weights here)
    mu = model.predict_memberships(X)
    np.testing.assert_allclose(model.layer_auc_, [roc_auc_score(y, mu[:, j]) for j in range(3)], atol=1e-12)
    # the signal layer ranks sites well, the noise layers near chance (common practice: AUC 0.5 =
    # no skill; in-sample, percentiles fitted to the sites' own values lift noise a little above it)
    assert model.layer_auc_[0] > 0.65 and np.all(np.abs(model.layer_auc_[1:] - 0.5) < 0.08)
    # one layer left: the prediction is that layer's membership (gamma operator of one layer = itself)
    np.testing.assert_allclose(model.predict_proba(X)[:, 1], mu[:, 0], atol=1e-12)
    # and it ranks held-out rows of the same construction better than all three layers
    Xt, yt = _signal_and_noise(np.random.default_rng(global_random_seed + 1))
    every = FuzzySuitability(layer_selection="all").fit(X, y)
    assert roc_auc_score(yt, model.predict_proba(Xt)[:, 1]) > roc_auc_score(yt, every.predict_proba(Xt)[:, 1])


def test_forward_selection_follows_its_stopping_rule(global_random_seed):
    # reference: sklearn.metrics.roc_auc_score of the algebraic product (METHODS.md §10
    # FAP) of the chosen memberships, recomputed here; every step gains at least the
    # tolerance and no further layer would
    from sklearn.metrics import roc_auc_score

    rng = np.random.default_rng(global_random_seed)
    y = np.r_[np.ones(200, int), np.zeros(800, int)]
    X = rng.normal(0.0, 2.0, size=(y.size, 4))
    X[y == 1, 0] = rng.normal(0.0, 0.8, 200)  # two weaker signals in layers 0 and 2
    X[y == 1, 2] = rng.normal(0.0, 0.8, 200)
    w = np.where(y == 1, 1.0, 0.25)
    tol = 0.005
    model = FuzzySuitability(layer_selection="forward", selection_tolerance=tol).fit(X, y, sample_weight=w)
    used = model.layers_used_.tolist()
    assert sorted(used[:2]) == [0, 2]
    mu = model.predict_memberships(X)
    steps = [roc_auc_score(y, mu[:, used[:i]].prod(axis=1), sample_weight=w) for i in range(1, len(used) + 1)]
    np.testing.assert_allclose(model.selection_auc_, steps, atol=1e-12)
    assert np.all(np.diff(steps) >= tol)
    rest = [j for j in range(4) if j not in used]
    assert all(roc_auc_score(y, mu[:, used + [j]].prod(axis=1), sample_weight=w) - steps[-1] < tol for j in rest)
    # gamma is then chosen on the chosen layers only
    fap, fas = mu[:, used].prod(axis=1), 1 - (1 - mu[:, used]).prod(axis=1)
    auc = [roc_auc_score(y, fas**g * fap ** (1 - g), sample_weight=w) for g in np.linspace(0, 1, 21)]
    np.testing.assert_allclose(model.gamma_auc_, auc, atol=1e-12)
    # max_layers caps the count
    assert FuzzySuitability(layer_selection="forward", max_layers=1).fit(X, y, sample_weight=w).layers_used_.size == 1


def test_selection_uses_the_training_rows_only(global_random_seed):
    # the "training" half carries its signal in layer 0, the "held-out" half in layer 1:
    # each half alone chooses its own layer, and rows of weight 0 (or left out) do not
    # move the choice
    rng = np.random.default_rng(global_random_seed)
    Xa, ya = _signal_and_noise(rng, signal=0)
    Xb, yb = _signal_and_noise(rng, signal=1)
    X, y = np.vstack([Xa, Xb]), np.r_[ya, yb]
    w = np.r_[np.ones(ya.size), np.zeros(yb.size)]
    for params in (dict(layer_selection="forward"), dict(layer_selection="top_k", max_layers=1)):
        assert FuzzySuitability(**params).fit(Xa, ya).layers_used_.tolist() == [0]
        assert FuzzySuitability(**params).fit(Xb, yb).layers_used_.tolist() == [1]
        assert FuzzySuitability(**params).fit(X, y, sample_weight=w).layers_used_.tolist() == [0]


def test_all_layers_is_the_former_model(global_random_seed):
    # the former model by construction (METHODS.md §10 operators): gamma = the smallest
    # of 0, 0.05, ..., 1 whose weighted training AUC (sklearn) is within 0.001 of the
    # best, over every layer's membership, reported as the n-th root
    from sklearn.metrics import roc_auc_score

    rng = np.random.default_rng(global_random_seed)
    X = rng.normal(size=(400, 5))
    y = (X[:, 0] ** 2 + rng.normal(size=400) < 0.8).astype(int)
    w = rng.uniform(0.5, 2.0, 400)
    model = FuzzySuitability(layer_selection="all").fit(X, y, sample_weight=w)
    np.testing.assert_array_equal(model.layers_used_, np.arange(5))
    assert model.selection_auc_ is None
    mu = model.predict_memberships(X)
    fap, fas = mu.prod(axis=1), 1 - (1 - mu).prod(axis=1)
    grid = np.linspace(0, 1, 21)
    auc = np.array([roc_auc_score(y, fas**g * fap ** (1 - g), sample_weight=w) for g in grid])
    g = grid[np.flatnonzero(auc >= auc.max() - 1e-3)[0]]
    probe = rng.normal(size=(50, 5))
    mp = model.predict_memberships(probe)
    expected = ((1 - (1 - mp).prod(axis=1)) ** g * mp.prod(axis=1) ** (1 - g)) ** (1 / 5)
    np.testing.assert_allclose(model.predict_proba(probe)[:, 1], expected, rtol=1e-12, atol=1e-15)
    # top_k keeping every layer is the same model
    every = FuzzySuitability(layer_selection="top_k", max_layers=5).fit(X, y, sample_weight=w)
    np.testing.assert_array_equal(every.predict_proba(probe), model.predict_proba(probe))


@pytest.mark.parametrize(
    "params, match",
    [
        ({"layer_selection": "best"}, "Unknown layer_selection"),
        ({"layer_selection": "top_k"}, "needs max_layers"),
        ({"layer_selection": "forward", "max_layers": 0}, "max_layers must be"),
        ({"layer_selection": "forward", "max_layers": 2.5}, "max_layers must be"),
        ({"layer_selection": "forward", "selection_tolerance": -0.1}, "selection_tolerance must be"),
    ],
)
def test_selection_errors(params, match):
    X = np.arange(12.0).reshape(6, 2)
    with pytest.raises(InputError, match=match):
        FuzzySuitability(**params).fit(X, np.array([0, 1] * 3))


def test_methods_paragraph_names_the_layers_used(global_random_seed):
    # the report's fuzzy sentence (mlsites.report._methods) states the rule and the layers
    # the final model combines; by construction only "tpi" carries the signal
    from mlsites.report._methods import _fuzzy_layers, learner_settings

    X, y = _signal_and_noise(np.random.default_rng(global_random_seed), signal=2)
    frame = pd.DataFrame(X, columns=["slope", "northness", "tpi"])
    model = FuzzySuitability().fit(frame, y)
    folds = [FuzzySuitability().fit(frame.iloc[i::2], y[i::2]) for i in range(2)]
    text = _fuzzy_layers(learner_settings("fuzzy", {}), (model, folds))
    assert "forward selection" in text and "at least 0.005" in text
    assert "the final model combines tpi (1 of 3 layers), each fold 1 layer" in text
    assert _fuzzy_layers(learner_settings("fuzzy", {"layer_selection": "all"}), None) == "; every layer combined"


# -- scikit-learn estimator contract -------------------------------------------------


@parametrize_with_checks(
    [
        FuzzySuitability(),
        FuzzySuitability(operator="gamma_operator", gamma=0.3, shape="cosine", categorical_features=[0],
                         layer_selection="all"),
        FuzzySuitability(operator="maximum", membership_floor=0.0, monotone={1: "increasing"}, layer_selection="all"),
        FuzzySuitability(layer_selection="forward"),
        FuzzySuitability(layer_selection="top_k", max_layers=2, operator="algebraic_product"),
    ],
    # The one-class semantics are declared through tags (multi_class=False,
    # poor_score=True). Integer weights are not the same as repeated rows for the
    # control points: weighted percentiles treat weights as importances (type 7 itself
    # changes when rows repeat, see weighted_percentile). On scikit-learn's 15-row,
    # 30-layer check data that difference only shows once memberships stop at a floor
    # above 0 (with a floor of 0 both fits give products of 0), and the gamma chosen in
    # fit follows it.
    expected_failed_checks=lambda est: (
        {"check_sample_weight_equivalence_on_dense_data": "weighted percentiles are not repeated rows"}
        if est.membership_floor > 0 else {}
    ),
)
def test_sklearn_compatible(estimator, check):
    check(estimator)
