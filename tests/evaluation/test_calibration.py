"""Zones calibrated on held-out sites (mlsites.evaluation._calibration).

References: METHODS.md §13 (the definition; its Wilson check values are tested in
test_checks.py) and hand-worked small cases written out in each test.
"""

import numpy as np
import pytest

from mlsites.errors import InputError
from mlsites.evaluation import (
    area_ranks,
    calibrate_zone_areas,
    cut_for_area_share,
    nearest_tie_cut,
)


def test_area_ranks_count_ties_in_the_zone():
    # hand-worked: landscape (0.8, 0.6, 0.5, 0.3); a site at 0.5 needs the three cells
    # scoring >= 0.5 (ties join a zone "score >= t"), one above all cells needs none
    land = [0.8, 0.6, 0.5, 0.3]
    np.testing.assert_array_equal(area_ranks([0.9, 0.6, 0.5, 0.4, 0.1], land), [0.0, 0.5, 0.75, 0.75, 1.0])


def test_area_ranks_brute_force(global_random_seed):
    # reference: the definition, share of landscape scores >= each site score, by NumPy
    rng = np.random.default_rng(global_random_seed)
    land = rng.integers(0, 20, 300) / 20.0  # many ties
    sites = rng.integers(0, 20, 50) / 20.0
    expected = [(land >= s).mean() for s in sites]
    np.testing.assert_allclose(area_ranks(sites, land), expected, rtol=0, atol=1e-15)


def test_calibrated_area_is_the_least_share_reaching_each_target():
    # hand-worked: ranks 0.05, 0.1, 0.2, 0.4, 0.8; 60 % of sites (3 of 5) are within
    # area 0.2, 80 % within 0.4, 100 % only at 0.8
    ranks = [0.4, 0.05, 0.8, 0.2, 0.1]
    assert calibrate_zone_areas(ranks, targets={"high": 0.6, "medium": 0.8}) == {"high": 0.2, "medium": 0.4}
    assert calibrate_zone_areas(ranks, targets={"high": 0.61}) == {"high": 0.4}
    # weights: the site at 0.05 counts for 3 of 7, so 0.05 alone holds 3/7 < 0.5 and
    # 0.05 + 0.1 hold 4/7 >= 0.5
    w = [1, 3, 1, 1, 1]
    assert calibrate_zone_areas(ranks, targets={"high": 0.5}, site_weight=w) == {"high": 0.1}


def test_calibration_refuses_bad_input():
    with pytest.raises(InputError, match=r"\[0, 1\]"):
        calibrate_zone_areas([0.1, 1.5], targets={"high": 0.7})
    with pytest.raises(InputError, match="increasing order"):
        calibrate_zone_areas([0.1, 0.5], targets={"high": 0.9, "medium": 0.7})


@pytest.mark.parametrize("share", [0.0, 0.1, 0.25, 0.333, 0.5, 0.77, 1.0])
def test_cut_without_ties_is_within_half_a_cell(share, global_random_seed):
    # continuous scores (no ties): the zone holds round(share * n) cells, so its area
    # is within half a cell of the wanted share (the nearest whole number of cells)
    rng = np.random.default_rng(global_random_seed)
    scores = rng.random(1001)
    t = cut_for_area_share(scores, share)
    n_in = int((scores >= t).sum())
    assert abs(n_in - share * scores.size) <= 0.5


def test_cut_keeps_tie_groups_whole_and_nearest():
    # hand-worked: 10 cells, 4 tied at 0.5 below three higher cells
    scores = np.array([0.9, 0.8, 0.7, 0.5, 0.5, 0.5, 0.5, 0.2, 0.1, 0.0])
    # 40 % = 4 cells: 3 (above the ties) is nearer than 7 (with them)
    assert (scores >= cut_for_area_share(scores, 0.4)).sum() == 3
    # 60 % = 6 cells: 7 is nearer than 3
    assert (scores >= cut_for_area_share(scores, 0.6)).sum() == 7
    # 50 % = 5 cells: 3 and 7 are equally near; the larger zone is kept
    assert (scores >= cut_for_area_share(scores, 0.5)).sum() == 7
    assert nearest_tie_cut(3, 7, 5.0) is True
    assert nearest_tie_cut(3, 7, 4.9) is False

