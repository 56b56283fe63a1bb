"""Tests of the statistics of checks on later-found sites."""

import numpy as np
import pytest
from scipy.stats import binomtest
from sklearn.metrics import roc_auc_score

from mlsites.errors import InputError, InsufficientDataError
from mlsites.evaluation import binomial_greater_pvalue, new_site_check, wilson_interval

# METHODS.md §13 check values: (k, n, p) -> Wilson 95 % interval, one-sided p-value, gain
SHEET_ROWS = [
    (8, 10, 0.35, (0.490162, 0.943318), 0.004821, 0.5625),
    (4, 10, 0.35, (0.168180, 0.687326), 0.486173, 0.125),
    (0, 10, 0.35, (0.0, 0.277533), 1.0, np.nan),
    (31, 40, 0.35, (0.624969, 0.876839), 4.88335e-08, 0.548387),
]


@pytest.mark.parametrize("k, n, p, interval, pvalue, gain", SHEET_ROWS)
def test_sheet_rows(k, n, p, interval, pvalue, gain):
    # METHODS.md §13 check values (6 printed digits)
    low, high = wilson_interval(k, n)
    assert low == pytest.approx(interval[0], abs=1e-6)
    assert high == pytest.approx(interval[1], abs=1e-6)
    assert binomial_greater_pvalue(k, n, p) == pytest.approx(pvalue, rel=1e-5, abs=1e-6)
    # the same numbers through new_site_check: k sites in "high", the rest in "low"
    table = new_site_check(
        np.r_[np.full(k, 0.9), np.full(n - k, 0.1)], np.r_[np.full(k, 2), np.full(n - k, 1)],
        np.linspace(0, 1, 101), {"high": p, "low": 1 - p},
    )
    high_row = table.iloc[0]
    assert high_row["gain"] == pytest.approx(gain, abs=1e-6, nan_ok=True)
    assert high_row["site_share_low"] == pytest.approx(interval[0], abs=1e-6)
    assert high_row["p_value"] == pytest.approx(pvalue, rel=1e-5, abs=1e-6)


@pytest.mark.parametrize("n", [1, 5, 10, 37, 250])
@pytest.mark.parametrize("p", [0.05, 0.35, 0.8])
def test_match_scipy_binomtest(n, p):
    # reference: scipy.stats.binomtest, proportion_ci(method="wilson") and
    # alternative="greater", on every k of n
    for k in range(n + 1):
        ci = binomtest(k, n, p).proportion_ci(confidence_level=0.95, method="wilson")
        low, high = wilson_interval(k, n)
        assert low == pytest.approx(ci.low, rel=1e-9, abs=1e-12)
        assert high == pytest.approx(ci.high, rel=1e-9, abs=1e-12)
        ref = binomtest(k, n, p, alternative="greater").pvalue
        assert binomial_greater_pvalue(k, n, p) == pytest.approx(ref, rel=1e-9, abs=1e-300)
    ci90 = binomtest(3, n + 3, p).proportion_ci(confidence_level=0.9, method="wilson")
    assert wilson_interval(3, n + 3, confidence=0.9) == pytest.approx((ci90.low, ci90.high), rel=1e-9)


def test_fractional_counts_lie_between_whole_counts():
    # property of the continuous extension: between the values at the whole counts
    # on either side (the tail falls, the interval rises with k)
    assert binomial_greater_pvalue(3, 10, 0.35) > binomial_greater_pvalue(3.5, 10, 0.35) > binomial_greater_pvalue(
        4, 10, 0.35
    )
    lo3, hi3 = wilson_interval(3, 10)
    lo, hi = wilson_interval(3.5, 10)
    lo4, hi4 = wilson_interval(4, 10)
    assert lo3 < lo < lo4 and hi3 < hi < hi4


def test_constructed_case_gain_of_the_high_zone():
    # issue 8 "Must show": 76 % of new sites in a high zone of 35 % of the area gives
    # Kvamme's gain 1 - 0.35 / 0.76 (about 0.54); 19 of 25 sites, zones by assign_zones
    # codes (3 high, 2 medium, 1 low)
    rng = np.random.default_rng(0)
    landscape = rng.uniform(size=5000)
    scores = np.r_[np.full(19, 0.9), np.full(4, 0.5), np.full(2, 0.1)]
    zones = np.r_[np.full(19, 3), np.full(4, 2), np.full(2, 1)]
    table = new_site_check(scores, zones, landscape, {"high": 0.35, "medium": 0.35, "low": 0.30})
    high = table.set_index("zone").loc["high"]
    assert high["site_share"] == pytest.approx(0.76, abs=1e-12)
    assert high["gain"] == pytest.approx(1 - 0.35 / 0.76, abs=1e-12)
    assert high["gain"] == pytest.approx(0.54, abs=0.005)
    assert high["p_value"] == pytest.approx(binomtest(19, 25, 0.35, alternative="greater").pvalue, rel=1e-9)
    assert "more than its area share" in high["verdict"]
    assert "Only" not in high["verdict"]  # 25 sites is not "few" (more than 10)
    assert table["zone"].tolist() == ["high", "medium", "low", "all"]
    assert table.loc[table["zone"] != "all", "sites_in_zone"].sum() == 25


def test_few_sites_cannot_tell_the_model_from_chance():
    # METHODS.md §13: 4 of 10 in 35 % of the area, interval 0.168-0.687 spans 0.35
    table = new_site_check(
        np.r_[np.full(4, 0.8), np.full(6, 0.2)], np.r_[np.full(4, 2), np.full(6, 1)],
        np.linspace(0, 1, 50), {"high": 0.35, "low": 0.65},
    )
    verdict = table.iloc[0]["verdict"]
    assert "cannot tell the model from chance" in verdict
    assert "Only 10 new sites" in verdict
    assert "Only 10 new sites" in table.iloc[-1]["verdict"]


def test_multi_cell_sites_auc_and_applicability():
    # Sites covering several cells count once (weights 1 / n_cells); a site split
    # between zones counts its share in each. AUC reference: sklearn roc_auc_score
    # with sample weights on sites (label 1) pooled with the landscape (label 0).
    scores = np.array([0.9, 0.85, 0.7, 0.4, 0.3, 0.2])
    zones = np.array([2, 2, 2, 1, 1, 1])
    site_of_cell = np.array([0, 0, 1, 1, 2, 3])
    weight = 1.0 / np.bincount(site_of_cell)[site_of_cell]
    applicable = np.array([True, True, False, False, True, True])
    landscape = np.linspace(0.0, 1.0, 21)
    table = new_site_check(
        scores, zones, landscape, {"high": 0.3, "low": 0.7},
        site_weight=weight, site_applicable=applicable,
    )
    high, low, total = (table.iloc[i] for i in range(3))
    assert total["n_sites"] == 4
    assert high["sites_in_zone"] == pytest.approx(1.5)  # site 0 whole, half of site 1
    assert low["sites_in_zone"] == pytest.approx(2.5)
    assert high["share_applicable"] == pytest.approx(1.0 / 1.5)  # site 0 in, site 1's high cell out
    assert total["share_applicable"] == pytest.approx(0.75)  # 3 of 4 sites by weight
    y = np.r_[np.ones(scores.size), np.zeros(landscape.size)]
    ref = roc_auc_score(y, np.r_[scores, landscape], sample_weight=np.r_[weight, np.ones(landscape.size)])
    assert total["auc"] == pytest.approx(ref, rel=1e-12)
    assert "3 of 4 new sites lie inside the area of applicability" in total["verdict"]
    assert np.isnan(table["auc"].iloc[:2]).all()


def test_check_bad_input():
    s, z, land = np.array([0.9, 0.1]), np.array([2, 1]), np.linspace(0, 1, 11)
    with pytest.raises(InputError, match=r"code\(s\) \[7\]"):
        new_site_check(s, np.array([7, 1]), land, {"high": 0.3, "low": 0.7})
    with pytest.raises(InputError, match="sum to 0.9"):
        new_site_check(s, z, land, {"high": 0.3, "low": 0.6})
    with pytest.raises(InputError, match="add up to the number of sites"):
        new_site_check(s, z, land, {"high": 0.3, "low": 0.7}, site_weight=[0.5, 0.7])
    with pytest.raises(InputError, match="NaN"):
        new_site_check(np.array([np.nan, 0.1]), z, land, {"high": 0.3, "low": 0.7})
    with pytest.raises(InputError, match="site_applicable"):
        new_site_check(s, z, land, {"high": 0.3, "low": 0.7}, site_applicable=[1, 0])
    with pytest.raises(InsufficientDataError):
        new_site_check([], np.array([], dtype=int), land, {"high": 0.3, "low": 0.7})
    with pytest.raises(InputError, match="0 <= k <= n"):
        wilson_interval(11, 10)
    with pytest.raises(InputError, match="whole number of sites"):
        binomial_greater_pvalue(1, 2.5, 0.3)
