"""Tests of the validation measures against METHODS.md §5, scikit-learn and brute force."""

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from sklearn.metrics import roc_auc_score

from mlsites.errors import InputError, InsufficientDataError
from mlsites.evaluation import (
    area_under_capture_curve,
    boyce_curve,
    boyce_index,
    capture_curve,
    evaluate_scores,
    kvamme_gain,
    roc_auc,
    site_share_in_top_area,
)

# METHODS.md §5 tolerance for its check values (computed to 6 decimals).
TOL = 1e-6
# Two double-precision computations of the same sum: rank sum vs trapezoids, which
# differ only by rounding of O(n) additions.
ROUND = 1e-12

# METHODS.md §5, 10-cell capture-curve example.
CELLS = np.array([0.9, 0.8, 0.8, 0.7, 0.6, 0.5, 0.4, 0.3, 0.2, 0.1])
SITES_PER_CELL = np.array([3, 1, 0, 2, 0, 1, 0, 0, 0, 0])

# METHODS.md §5, Boyce example (Hirzel et al. 2006 continuous Boyce index).
BOYCE_LANDSCAPE = (np.arange(100) + 0.5) / 100  # 0.005, 0.015, ..., 0.995
BOYCE_SITES = np.array([0.955, 0.915, 0.855, 0.825, 0.755, 0.725, 0.655, 0.555, 0.355, 0.935])


def brute_auc(sites, landscape, sw, lw):
    """Weighted Mann-Whitney by an explicit double loop over pairs, ties 1/2."""
    total = 0.0
    for s, a in zip(sites, sw):
        for v, b in zip(landscape, lw):
            total += a * b * (1.0 if s > v else 0.5 if s == v else 0.0)
    return total / (sum(sw) * sum(lw))


# --------------------------------------------------------------------- Kvamme's gain


def test_kvamme_gain_methods_check_value():
    # METHODS.md §5: 85 % of sites in 33 % of area -> 0.611765 (Kvamme 1988, as cited by Verhagen 2007)
    assert kvamme_gain(0.85, 0.33) == pytest.approx(0.611765, abs=TOL)


def test_kvamme_gain_worked_fact():
    # the worked fact: 76 % of the sites in 35 % of the area, G = 1 - 0.35/0.76 (about 0.54)
    gain = kvamme_gain(0.76, 0.35)
    assert gain == pytest.approx(1 - 0.35 / 0.76, rel=1e-12)
    assert gain == pytest.approx(0.54, abs=0.005)


def test_kvamme_gain_chance_undefined_and_arrays():
    # G = 0 when sites are spread like the area; undefined (NaN) without sites (METHODS.md §5)
    out = kvamme_gain([0.5, 0.0, 0.2], [0.5, 0.3, 0.4])
    assert out[0] == 0.0
    assert np.isnan(out[1])
    assert out[2] == pytest.approx(-1.0, rel=1e-12)  # worse than chance: 1 - 0.4/0.2
    assert isinstance(kvamme_gain(0.5, 0.25), float)


@pytest.mark.parametrize("site_share, area_share", [(85, 0.33), (0.8, -0.1), (float("nan"), 0.2)])
def test_kvamme_gain_rejects_non_shares(site_share, area_share):
    with pytest.raises(InputError, match=r"outside \[0, 1\]"):
        kvamme_gain(site_share, area_share)


# --------------------------------------------------------------------- ROC AUC


def test_roc_auc_methods_example():
    # METHODS.md §5: y = (1,1,1,0,0,0,0), s = (0.9,0.6,0.4,0.6,0.3,0.2,0.1) -> AUC 0.875 exactly
    assert roc_auc([0.9, 0.6, 0.4], [0.6, 0.3, 0.2, 0.1]) == 0.875


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("n_levels", [3, 20, None])
def test_roc_auc_equals_sklearn(global_random_seed, weighted, n_levels):
    # reference: sklearn.metrics.roc_auc_score on pooled scores with labels and sample_weight
    rng = np.random.default_rng(global_random_seed)
    sites = rng.beta(3, 2, size=40)
    land = rng.beta(2, 3, size=300)
    if n_levels is not None:  # coarse levels make many ties within and across the groups
        sites = np.round(sites * n_levels) / n_levels
        land = np.round(land * n_levels) / n_levels
    sw = rng.uniform(0, 3, size=sites.size) if weighted else None
    lw = rng.uniform(0, 3, size=land.size) if weighted else None
    y = np.r_[np.ones(sites.size), np.zeros(land.size)]
    weight = None if not weighted else np.r_[sw, lw]
    expected = roc_auc_score(y, np.r_[sites, land], sample_weight=weight)
    got = roc_auc(sites, land, site_weight=sw, landscape_weight=lw)
    assert got == pytest.approx(expected, abs=ROUND)


def test_roc_auc_brute_force_small():
    # reference: explicit pair loop (Mann-Whitney with ties 1/2)
    sites, land = [0.2, 0.5, 0.5, 0.9], [0.1, 0.5, 0.5, 0.7, 0.9, 0.0]
    sw, lw = [1.0, 2.0, 0.0, 0.5], [1.0, 1.0, 3.0, 1.0, 2.0, 0.5]
    got = roc_auc(sites, land, site_weight=sw, landscape_weight=lw)
    assert got == pytest.approx(brute_auc(sites, land, sw, lw), abs=ROUND)


# --------------------------------------------------------------------- capture curve


def test_capture_curve_methods_ten_cells():
    # METHODS.md §5, 10 cells: X = (0,.1,.3,.4,.5,...,1), Y = (0,3/7,4/7,6/7,6/7,1,...)
    curve = capture_curve(CELLS, CELLS, site_weight=SITES_PER_CELL)
    x_expected = [0, 0.1, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0]
    y_expected = [0, 0.428571, 0.571429, 0.857143, 0.857143, 1, 1, 1, 1, 1]
    np.testing.assert_allclose(curve["area_share"], x_expected, rtol=0, atol=TOL)
    np.testing.assert_allclose(curve["site_share"], y_expected, rtol=0, atol=TOL)
    assert curve["threshold"].iloc[0] == np.inf
    np.testing.assert_allclose(curve["threshold"].iloc[1:], np.unique(CELLS)[::-1], rtol=0, atol=0)


def test_area_under_capture_curve_methods_ten_cells():
    # METHODS.md §5: A = 0.771429 = roc_auc_score(sites repeated per count vs all 10 cells), 2A - 1 = 0.542857
    repeated = np.repeat(CELLS, SITES_PER_CELL)
    area = area_under_capture_curve(repeated, CELLS)
    assert area == pytest.approx(0.771429, abs=TOL)
    assert 2 * area - 1 == pytest.approx(0.542857, abs=TOL)
    y = np.r_[np.ones(repeated.size), np.zeros(CELLS.size)]
    assert area == pytest.approx(roc_auc_score(y, np.r_[repeated, CELLS]), abs=ROUND)
    # per-cell weights count each site once, as repetition does
    weighted = area_under_capture_curve(CELLS, CELLS, site_weight=SITES_PER_CELL)
    assert weighted == pytest.approx(area, abs=ROUND)
    assert roc_auc(CELLS, CELLS, site_weight=SITES_PER_CELL) == pytest.approx(area, abs=ROUND)


def test_capture_curve_vertical_step_for_site_between_cells():
    # a site score no cell has: the area stays, the site share jumps (hand-worked)
    curve = capture_curve([0.8], [0.9, 0.7])
    assert curve["area_share"].tolist() == [0.0, 0.5, 0.5, 1.0]
    assert curve["site_share"].tolist() == [0.0, 0.0, 1.0, 1.0]


scores = st.lists(st.integers(0, 6), min_size=1, max_size=25)
weights = st.floats(0.05, 5.0, allow_nan=False)


@settings(max_examples=150, deadline=None)
@given(data=st.data(), sites=scores, land=scores)
def test_capture_area_equals_auc_property(data, sites, land):
    # property: trapezoids under the capture curve = rank-sum AUC = sklearn's roc_auc_score
    sw = data.draw(st.lists(weights, min_size=len(sites), max_size=len(sites)))
    lw = data.draw(st.lists(weights, min_size=len(land), max_size=len(land)))
    area = area_under_capture_curve(sites, land, site_weight=sw, landscape_weight=lw)
    auc = roc_auc(sites, land, site_weight=sw, landscape_weight=lw)
    assert area == pytest.approx(auc, abs=ROUND)
    y = np.r_[np.ones(len(sites)), np.zeros(len(land))]
    assert auc == pytest.approx(roc_auc_score(y, np.r_[sites, land], sample_weight=np.r_[sw, lw]), abs=ROUND)
    curve = capture_curve(sites, land, site_weight=sw, landscape_weight=lw)
    assert np.all(np.diff(curve["area_share"]) >= 0) and np.all(np.diff(curve["site_share"]) >= 0)
    assert curve["area_share"].iloc[-1] == 1.0 and curve["site_share"].iloc[-1] == 1.0


# --------------------------------------------------------------------- top area


def brute_top_share(cell_scores, sites_per_cell, n_top):
    """Mean share of sites in the first n_top cells over every order of tied cells."""
    groups = [np.flatnonzero(cell_scores == v) for v in np.unique(cell_scores)[::-1]]
    shares = []
    for orders in itertools.product(*(itertools.permutations(g) for g in groups)):
        ranked = np.concatenate(orders)
        shares.append(sites_per_cell[ranked[:n_top]].sum() / sites_per_cell.sum())
    return float(np.mean(shares))


@pytest.mark.parametrize("n_top", range(1, 11))
def test_site_share_in_top_area_random_tie_breaking(n_top):
    # reference: expected capture when ties among the 10 METHODS.md §5 cells are broken at random
    expected = brute_top_share(CELLS, SITES_PER_CELL, n_top)
    got = site_share_in_top_area(CELLS, CELLS, n_top / 10, site_weight=SITES_PER_CELL)
    assert got == pytest.approx(expected, abs=ROUND)


def test_site_share_in_top_area_heavy_ties():
    # 6 cells in two tie groups, sites on them; brute force over all tie orders
    cells = np.array([0.5, 0.5, 0.5, 0.5, 0.2, 0.2])
    sites = np.array([2, 0, 1, 0, 1, 1])
    for n_top in range(1, 7):
        got = site_share_in_top_area(cells, cells, n_top / 6, site_weight=sites)
        assert got == pytest.approx(brute_top_share(cells, sites, n_top), abs=ROUND)


def test_site_share_in_top_area_default_shares_and_vertical_step():
    land = np.arange(100) / 100.0
    sites = np.array([0.995, 0.905, 0.895, 0.805, 0.705, 0.665, 0.05])
    got = site_share_in_top_area(sites, land)
    # hand count: top 10 cells are 0.90..0.99; 0.895 lies between cells 0.89 and 0.90,
    # adds no area and counts in the top 10 % (upper end of the step, documented choice)
    np.testing.assert_allclose(got, [3 / 7, 4 / 7, 6 / 7], rtol=0, atol=ROUND)


@pytest.mark.parametrize("shares", [0.0, 1.5, [0.1, 20], []])
def test_site_share_in_top_area_rejects_bad_shares(shares):
    with pytest.raises(InputError, match="area_shares"):
        site_share_in_top_area([0.5], [0.1, 0.9], shares)


# --------------------------------------------------------------------- Boyce


def test_boyce_curve_methods_ten_windows():
    # METHODS.md §5: E = 0.1 in every window, F = (0,0,0,1,0,1,1,2,2,3)
    curve = boyce_curve(BOYCE_SITES, BOYCE_LANDSCAPE, n_windows=10, score_range=(0, 1))
    np.testing.assert_allclose(curve["area_share"], 0.1, rtol=0, atol=TOL)
    np.testing.assert_allclose(curve["site_density_ratio"], [0, 0, 0, 1, 0, 1, 1, 2, 2, 3], rtol=0, atol=TOL)
    np.testing.assert_allclose(curve["window_start"], np.arange(10) / 10, rtol=0, atol=1e-12)


@pytest.mark.parametrize(
    "n_windows, drop_repeated, expected",
    [
        (10, False, 0.908968),  # METHODS.md §5, a = k/10
        (91, False, 0.896002),  # METHODS.md §5, a = k/100
        (91, True, 0.878310),  # METHODS.md §5, consecutive repeated F removed (8 left)
    ],
)
def test_boyce_index_methods_values(n_windows, drop_repeated, expected):
    got = boyce_index(
        BOYCE_SITES, BOYCE_LANDSCAPE, n_windows=n_windows, score_range=(0, 1), drop_repeated=drop_repeated
    )
    assert got == pytest.approx(expected, abs=TOL)
    # same windows given explicitly as starts k / n (METHODS.md §5 advice)
    starts = np.arange(n_windows) / (10 if n_windows == 10 else 100)
    explicit = boyce_index(
        BOYCE_SITES, BOYCE_LANDSCAPE, window_starts=starts, score_range=(0, 1), drop_repeated=drop_repeated
    )
    assert explicit == pytest.approx(expected, abs=TOL)


@pytest.mark.parametrize("n_windows, expected", [(10, -0.908968), (91, -0.896002)])
def test_boyce_index_mirrored(n_windows, expected):
    # METHODS.md §5: sites' predictions mirrored (1 - p) give the negative values
    got = boyce_index(1 - BOYCE_SITES, BOYCE_LANDSCAPE, n_windows=n_windows, score_range=(0, 1))
    assert got == pytest.approx(expected, abs=TOL)


def test_boyce_windows_are_closed():
    # hand-worked: edges 0, 0.25, 0.5, 0.75, 1 are exact in binary; the site at 0.5 and the
    # cells on the edges count in every window that touches them
    curve = boyce_curve([0.5], [0.0, 0.25, 0.5, 0.75, 1.0], window=0.5, n_windows=3, score_range=(0, 1))
    assert curve["window_start"].tolist() == [0.0, 0.25, 0.5]
    assert curve["site_share"].tolist() == [1.0, 1.0, 1.0]
    assert curve["area_share"].tolist() == [0.6, 0.6, 0.6]


def brute_boyce(sites, land, sw, lw, window, n_windows):
    """Closed windows over the landscape range, loops, F = P/E, Spearman via scipy."""
    lo, hi = min(land), max(land)
    f, centre = [], []
    for k in range(n_windows):
        a = lo + (hi - lo) * k * (1 - window) / (n_windows - 1)
        b = a + (hi - lo) * window
        p = sum(w for s, w in zip(sites, sw) if a <= s <= b) / sum(sw)
        e = sum(w for s, w in zip(land, lw) if a <= s <= b) / sum(lw)
        if e > 0:
            f.append(p / e)
            centre.append((a + b) / 2)
    return stats.spearmanr(f, centre).statistic


def test_boyce_index_brute_force_weighted(global_random_seed):
    # reference: loop implementation of the definition (Hirzel et al. 2006), default range
    rng = np.random.default_rng(global_random_seed)
    land = rng.uniform(0, 1, 400) ** 2
    sites = rng.uniform(0, 1, 60) ** 0.7
    sw, lw = rng.uniform(0.5, 2, sites.size), rng.uniform(0.5, 2, land.size)
    expected = brute_boyce(sites, land, sw, lw, 0.1, 50)
    got = boyce_index(sites, land, site_weight=sw, landscape_weight=lw, n_windows=50)
    assert got == pytest.approx(expected, abs=ROUND)


def test_boyce_skips_empty_windows_and_constant_ratio():
    # landscape with a gap in (0.3, 0.7): windows inside it have E = 0 and are skipped
    land = np.r_[np.linspace(0, 0.3, 31), np.linspace(0.7, 1, 31)]
    curve = boyce_curve([0.9], land, n_windows=101, window=0.1, score_range=(0, 1))
    assert curve["site_density_ratio"].isna().sum() == (curve["area_share"] == 0).sum() > 0
    assert np.isfinite(boyce_index([0.9], land, n_windows=101, score_range=(0, 1)))
    # sites spread exactly like the landscape -> F = 1 everywhere -> rho undefined (NaN)
    assert np.isnan(boyce_index(land, land, n_windows=10))


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"window": 0}, "window=0"),
        ({"window": 1.5}, "window=1.5"),
        ({"n_windows": 1}, "n_windows=1"),
        ({"window_starts": [0.2, 0.1]}, "window_starts"),
        ({"score_range": (1, 0)}, "score_range"),
    ],
)
def test_boyce_rejects_bad_windows(kwargs, match):
    with pytest.raises(InputError, match=match):
        boyce_index([0.5], [0.1, 0.9], **kwargs)


# --------------------------------------------------------------------- input checks


def test_nan_scores_are_refused_with_count():
    with pytest.raises(InputError, match=r"site_scores holds 2 NaN and 1 infinite value\(s\) out of 5"):
        roc_auc([0.1, np.nan, np.nan, np.inf, 0.3], [0.2, 0.4])
    with pytest.raises(InputError, match="landscape_scores holds 1 NaN"):
        boyce_index([0.1], [0.2, np.nan])


def test_empty_and_badly_shaped_inputs():
    with pytest.raises(InsufficientDataError, match="site_scores is empty"):
        capture_curve([], [0.1, 0.2])
    with pytest.raises(InsufficientDataError, match="landscape_scores is empty"):
        roc_auc([0.1], np.array([]))
    with pytest.raises(InputError, match=r"shape \(2, 2\)"):
        roc_auc([0.1], np.zeros((2, 2)))


@pytest.mark.parametrize(
    "weight, match",
    [([1.0], "one weight per score"), ([1.0, -1.0], "negative or non-finite"), ([0.0, 0.0], "sums to 0")],
)
def test_bad_weights(weight, match):
    with pytest.raises(InputError, match=match):
        roc_auc([0.1, 0.2], [0.3], site_weight=weight)


# --------------------------------------------------------------------- one fold


def test_evaluate_scores_matches_single_measures(global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    land = rng.uniform(0, 1, 500)
    sites = rng.uniform(0, 1, 40) ** 0.5
    out = evaluate_scores(sites, land)
    assert out["auc"] == roc_auc(sites, land)
    assert out["boyce"] == boyce_index(sites, land)
    top = site_share_in_top_area(sites, land, (0.10, 0.20, 0.33))
    assert [out["captured_top_10"], out["captured_top_20"], out["captured_top_33"]] == top.tolist()
    assert out["gain_top_20"] == kvamme_gain(top[1], 0.20)
    # default zones: high holds >= 70 % of these sites; its gain is Kvamme's gain of the zone
    assert out["site_share_high"] >= 0.70
    assert out["gain_high"] == pytest.approx(1 - out["area_share_high"] / out["site_share_high"], rel=1e-12)
    zone_keys = [k for k in out if k.startswith("area_share_")]
    assert zone_keys == ["area_share_high", "area_share_medium", "area_share_low"]
    assert sum(out[k] for k in zone_keys) == pytest.approx(1.0, abs=ROUND)
    assert 0 <= out["gini_zones"] <= 1
    assert out["n_sites"] == 40 and out["n_landscape"] == 500


def test_evaluate_scores_with_given_thresholds_and_odd_share():
    out = evaluate_scores(
        [0.9, 0.5], [0.9, 0.7, 0.5, 0.1], thresholds={"high": 0.8, "medium": 0.3}, top_area_shares=[0.125]
    )
    # hand-worked: high zone = {0.9} -> 1/4 of area, 1/2 of sites
    assert out["threshold_high"] == 0.8
    assert out["area_share_high"] == 0.25 and out["site_share_high"] == 0.5
    assert out["gain_high"] == 0.5
    assert "captured_top_12_5" in out


def test_evaluate_scores_rejects_duplicate_top_shares():
    with pytest.raises(InputError, match="repeats a share"):
        evaluate_scores([0.9], [0.9, 0.1], top_area_shares=[0.1, 0.1])
