"""Period windows: each site's probability of belonging to a window, and the sites left out."""

import numpy as np
import pytest

from mlsites.errors import InputError, InsufficientDataError
from mlsites.periods import DateDensity, aoristic_weights, time_blocks, window_probabilities

IDS = ["A", "B", "C"]
START = [-3450.0, -3350.0, -2000.0]
END = [-3150.0, -3250.0, -1000.0]


def test_probability_is_the_aoristic_overlap():
    # overlap / duration (Ratcliffe 2000; METHODS.md §9): A has 100 of 300 years in [-3300, -3200)
    w = window_probabilities(IDS, START, END, {"mid": [-3300, -3200]}, min_probability=0.0)
    p = w.for_window("mid")
    assert p.to_dict() == pytest.approx({"A": 1 / 3, "B": 0.5})
    assert w.left_out.to_dict(orient="records") == [
        {"window": "mid", "site_id": "C", "probability": 0.0, "reason": "date range outside the window"}]
    assert w.windows.loc[0, "weight_sum"] == pytest.approx(1 / 3 + 0.5)


def test_window_equal_to_blocks_gives_the_block_weights():
    # a window that is one block gives each site its aoristic weight for that block
    blocks = time_blocks(100, span=(-3500, -3100))
    density = DateDensity("trapezoid", 0.2)
    w = window_probabilities(IDS[:2], START[:2], END[:2], {"b1": [-3400, -3300]}, density=density,
                             min_probability=0)
    np.testing.assert_allclose(w.for_window("b1").to_numpy(),
                               aoristic_weights(START[:2], END[:2], blocks, density=density)[:, 1], rtol=1e-12)


def test_sites_below_the_minimum_are_left_out_with_reasons():
    w = window_probabilities(IDS, START, END, {"mid": [-3300, -3200], "late": [-1500, -1000]},
                             min_probability=0.4)
    assert w.for_window("mid").index.tolist() == ["B"]
    reasons = dict(zip(zip(w.left_out["window"], w.left_out["site_id"]), w.left_out["reason"]))
    assert reasons[("mid", "A")] == "probability 0.333 below min_probability 0.4"
    assert reasons[("late", "A")] == "date range outside the window"
    assert w.windows["n_left_out"].tolist() == [2, 2]


def test_window_outside_every_range_is_a_one_line_error():
    with pytest.raises(InputError, match=r"time window 'far' \[500, 600\) overlaps no site's date range") as err:
        window_probabilities(IDS, START, END, {"far": [500, 600]})
    assert "\n" not in str(err.value)


def test_window_where_no_site_reaches_the_minimum():
    with pytest.raises(InsufficientDataError, match="no site reaches min_probability 0.9"):
        window_probabilities(IDS, START, END, {"edge": [-3160, -3150]}, min_probability=0.9)


@pytest.mark.parametrize("windows, match", [
    ({"w": [-3000, -3100]}, "ends before it starts"),
    ({"bad name": [-3000, -2900]}, "window name"),
    ({}, "no time windows"),
])
def test_bad_windows(windows, match):
    with pytest.raises(InputError, match=match):
        window_probabilities(IDS, START, END, windows)
