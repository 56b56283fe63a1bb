"""Tests of potential zones against METHODS.md §5 and brute-force NumPy references."""

import numpy as np
import pytest

from mlsites.errors import InputError
from mlsites.evaluation import (
    NODATA_ZONE,
    assign_zones,
    relative_site_density,
    kvamme_gain,
    zone_density_gini,
    zone_gains,
    zone_table,
    zone_thresholds,
)

# METHODS.md §5 tolerance for its check values (computed to 6 decimals).
TOL = 1e-6
# same quantity by two double-precision routes; only rounding differs
ROUND = 1e-12

# METHODS.md §5 zone example, zones listed from the highest down.
AREA = np.array([0.10, 0.25, 0.30, 0.35])
SITES = np.array([0.50, 0.30, 0.15, 0.05])


def gini_double_sum(site_shares, area_shares):
    """METHODS.md §5 second form: sum_i sum_j a_i a_j |d_i - d_j| / (2 d_mean)."""
    a = np.asarray(area_shares)
    d = np.asarray(site_shares) / a
    d_mean = np.sum(a * d)
    return np.sum(a[:, None] * a[None, :] * np.abs(d[:, None] - d[None, :])) / (2 * d_mean)


def example_landscape():
    """20 cells and 20 sites laid out so the zones have the METHODS.md §5 shares."""
    levels = np.array([0.9, 0.6, 0.4, 0.1])
    land = np.repeat(levels, (AREA * 20).round().astype(int))  # 2, 5, 6, 7 cells
    sites = np.repeat(levels, (SITES * 20).round().astype(int))  # 10, 6, 3, 1 sites
    return sites, land, {"top": 0.8, "upper": 0.5, "lower": 0.3}


# --------------------------------------------------------------------- METHODS §5 zone example


def test_relative_site_density_and_gains_methods_example():
    # METHODS.md §5: Kj = (5, 1.2, 0.5, 0.142857), zone gains (0.8, 0.166667, -1, -6)
    np.testing.assert_allclose(relative_site_density(SITES, AREA), [5, 1.2, 0.5, 0.142857], rtol=0, atol=TOL)
    np.testing.assert_allclose(zone_gains(SITES, AREA), [0.8, 0.166667, -1, -6], rtol=0, atol=TOL)
    # METHODS.md §5: cumulative gain top-1 = 0.8, top-2 = 0.5625
    cumulative = zone_gains(SITES, AREA, cumulative=True)
    np.testing.assert_allclose(cumulative[:2], [0.8, 0.5625], rtol=0, atol=TOL)
    assert cumulative[-1] == pytest.approx(0.0, abs=ROUND)  # all zones together = chance


def test_zone_density_gini_methods_example_both_formulas():
    # METHODS.md §5: Gini = 0.5825 by the Lorenz form and by the double-sum form
    assert zone_density_gini(SITES, AREA) == pytest.approx(0.5825, abs=TOL)
    assert gini_double_sum(SITES, AREA) == pytest.approx(0.5825, abs=TOL)


def test_zone_density_gini_agrees_with_double_sum_on_random_zones(global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    for n in (2, 3, 5, 9):
        area = rng.dirichlet(np.ones(n))
        sites = rng.dirichlet(np.ones(n))
        assert zone_density_gini(sites, area) == pytest.approx(gini_double_sum(sites, area), abs=ROUND)


def test_zone_density_gini_edges():
    # uniform density -> 0 (METHODS.md §5); order of zones does not matter
    assert zone_density_gini([0.2, 0.3, 0.5], [0.2, 0.3, 0.5]) == pytest.approx(0.0, abs=ROUND)
    assert zone_density_gini(SITES[::-1], AREA[::-1]) == pytest.approx(0.5825, abs=TOL)
    # all sites in a zone with no area (possible with a background sample): Lorenz curve
    # runs along the x axis then jumps, G = 1 (hand-worked)
    assert zone_density_gini([0.0, 1.0], [1.0, 0.0]) == pytest.approx(1.0, abs=ROUND)
    # an empty zone (no sites, no area) drops out
    assert zone_density_gini(np.r_[SITES, 0.0], np.r_[AREA, 0.0]) == pytest.approx(0.5825, abs=TOL)
    with pytest.raises(InputError, match="site_shares sum to 0.9"):
        zone_density_gini([0.5, 0.4], [0.5, 0.5])


def test_zone_table_reproduces_methods_example():
    sites, land, thresholds = example_landscape()
    table = zone_table(sites, land, thresholds)
    assert table["zone"].tolist() == ["top", "upper", "lower", "low"]
    np.testing.assert_allclose(table["area_share"], AREA, rtol=0, atol=ROUND)
    np.testing.assert_allclose(table["site_share"], SITES, rtol=0, atol=ROUND)
    # METHODS.md §5 check values
    np.testing.assert_allclose(table["site_density_ratio"], [5, 1.2, 0.5, 0.142857], rtol=0, atol=TOL)
    np.testing.assert_allclose(table["gain"], [0.8, 0.166667, -1, -6], rtol=0, atol=TOL)
    np.testing.assert_allclose(table["cumulative_gain"][:2], [0.8, 0.5625], rtol=0, atol=TOL)
    assert zone_density_gini(table["site_share"], table["area_share"]) == pytest.approx(0.5825, abs=TOL)
    assert table["upper_threshold"].tolist() == [np.inf, 0.8, 0.5, 0.3]
    assert table["lower_threshold"].tolist() == [0.8, 0.5, 0.3, -np.inf]


# --------------------------------------------------------------------- thresholds


def weighted_share_at_or_above(scores, weights, t):
    return weights[scores >= t].sum() / weights.sum()


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("n_levels", [5, 30, None])
def test_zone_thresholds_brute_force(global_random_seed, weighted, n_levels):
    # reference: scan every candidate threshold (all site and landscape scores)
    rng = np.random.default_rng(global_random_seed + (n_levels or 0) + weighted)
    sites = rng.beta(3, 2, 60)
    land = rng.beta(2, 3, 400)
    if n_levels is not None:
        sites, land = np.round(sites * n_levels) / n_levels, np.round(land * n_levels) / n_levels
    sw = rng.uniform(0.2, 2, sites.size) if weighted else np.ones(sites.size)
    targets = {"high": 0.5, "medium": 0.7, "fair": 0.9, "wide": 1.0}
    chosen = zone_thresholds(sites, targets=targets, site_weight=sw if weighted else None)
    assert list(chosen) == list(targets)
    candidates = np.unique(np.r_[sites, land])
    for name, target in targets.items():
        t = chosen[name]
        assert weighted_share_at_or_above(sites, sw, t) >= target - ROUND
        higher = candidates[candidates > t]
        if higher.size:
            # one step up the threshold (the next candidate) no longer holds the target
            assert weighted_share_at_or_above(sites, sw, higher.min()) < target - ROUND
        # least area among all thresholds that meet the target
        ok = [c for c in candidates if weighted_share_at_or_above(sites, sw, c) >= target - ROUND]
        least_area = min(np.mean(land >= c) for c in ok)
        assert np.mean(land >= t) == least_area
    values = list(chosen.values())
    assert all(a >= b for a, b in zip(values, values[1:]))


def test_zone_thresholds_ties_can_empty_a_zone():
    # hand-worked: 4 of 5 sites tied at 0.6 cross both 0.3 and 0.8 -> same threshold
    chosen = zone_thresholds([0.9, 0.6, 0.6, 0.6, 0.1], targets={"high": 0.3, "medium": 0.8})
    assert chosen == {"high": 0.6, "medium": 0.6}
    table = zone_table([0.9, 0.6, 0.6, 0.6, 0.1], [0.9, 0.6, 0.5, 0.1], chosen)
    assert table["area_share"].tolist() == [0.5, 0.0, 0.5]
    assert table["site_share"].tolist() == [0.8, 0.0, 0.2]
    assert np.isnan(table["site_density_ratio"].iloc[1]) and np.isnan(table["gain"].iloc[1])


@pytest.mark.parametrize(
    "targets, match",
    [
        ({"high": 0.9, "medium": 0.7}, "does not exceed"),
        ({"high": 0.7, "medium": 0.7}, "does not exceed"),
        ({"high": 70}, r"in \(0, 1\]"),
        ({"high": 0.0}, r"in \(0, 1\]"),
        ({"high": "a lot"}, r"in \(0, 1\]"),
        ({"low": 0.7}, "remainder"),
        ({}, "non-empty mapping"),
        ([("high", 0.7)], "non-empty mapping"),
    ],
)
def test_zone_thresholds_rejects_bad_targets(targets, match):
    with pytest.raises(InputError, match=match):
        zone_thresholds([0.1, 0.5, 0.9], targets=targets)


def test_zone_thresholds_rejects_nan_sites():
    with pytest.raises(InputError, match="1 NaN"):
        zone_thresholds([0.1, np.nan], targets={"high": 0.5})


# --------------------------------------------------------------------- codes and table


def test_assign_zones_codes_and_nodata():
    scores = np.array([[0.95, 0.7, 0.69], [0.3, 0.1, np.nan]])
    codes = assign_zones(scores, {"high": 0.7, "medium": 0.3})
    # our codes: 3 = high, 2 = medium, 1 = low, 0 = nodata; a score equal to a threshold goes up
    np.testing.assert_array_equal(codes, [[3, 3, 2], [2, 1, NODATA_ZONE]])
    assert codes.dtype == np.uint8
    np.testing.assert_array_equal(assign_zones([0.5, 0.2], [0.4]), [2, 1])


def test_assign_zones_rejects_rising_thresholds():
    with pytest.raises(InputError, match="rise"):
        assign_zones([0.5], {"high": 0.3, "medium": 0.6})


def test_zone_table_shares_sum_to_one_and_match_brute_force(global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    land = np.round(rng.uniform(0, 1, 300), 2)
    sites = np.round(rng.uniform(0, 1, 50) ** 0.5, 2)
    lw = rng.uniform(0.5, 1.5, land.size)
    thresholds = zone_thresholds(sites, targets={"high": 0.6, "medium": 0.85})
    table = zone_table(sites, land, thresholds, landscape_weight=lw)
    assert table["area_share"].sum() == pytest.approx(1.0, abs=ROUND)
    assert table["site_share"].sum() == pytest.approx(1.0, abs=ROUND)
    # reference: masks written out by hand for each zone
    t_high, t_med = thresholds["high"], thresholds["medium"]
    masks_land = [land >= t_high, (land >= t_med) & (land < t_high), land < t_med]
    masks_site = [sites >= t_high, (sites >= t_med) & (sites < t_high), sites < t_med]
    area = [lw[m].sum() / lw.sum() for m in masks_land]
    share = [m.mean() for m in masks_site]
    np.testing.assert_allclose(table["area_share"], area, rtol=0, atol=ROUND)
    np.testing.assert_allclose(table["site_share"], share, rtol=0, atol=ROUND)
    np.testing.assert_allclose(table["cumulative_area_share"], np.cumsum(area), rtol=0, atol=ROUND)
    np.testing.assert_allclose(
        table["cumulative_gain"], kvamme_gain(np.cumsum(share).clip(0, 1), np.cumsum(area).clip(0, 1)), atol=ROUND
    )
    assert table["site_share"].iloc[0] >= 0.6


def test_zone_table_requires_named_thresholds():
    with pytest.raises(InputError, match="mapping of zone name"):
        zone_table([0.5], [0.5], [0.4])
    with pytest.raises(InputError, match="also the remainder"):
        zone_table([0.5], [0.5], {"low": 0.4})
