"""Exact top-share cuts from bit-pattern counts (mlsites.mapping._quantile).

Reference: :func:`mlsites.evaluation.cut_for_area_share` on the whole array (sorting),
and numpy's ordering of float32 values for the bit-pattern property.
"""

import numpy as np
import pytest

from mlsites.evaluation import cut_for_area_share
from mlsites.mapping._quantile import coarse_counts, fine_counts, finish_cuts, plan_cuts


def histogram_cuts(values, shares, n_parts=3):
    """The two passes over ``values`` split into parts, as a map reads its windows."""
    parts = np.array_split(values, n_parts)
    counts = sum(coarse_counts(p) for p in parts)
    cuts = plan_cuts(counts, shares)
    bins = sorted({c.bin for c in cuts if c.threshold_bits is None})
    fine = {b: np.zeros(1 << 16, dtype=np.int64) for b in bins}
    for p in parts:
        for b, c in fine_counts(p, bins).items():
            fine[b] += c
    return finish_cuts(cuts, fine)


def test_bit_patterns_order_like_the_values(global_random_seed):
    # IEEE 754: for non-negative floats the bit pattern as an unsigned integer is monotone
    rng = np.random.default_rng(global_random_seed)
    v = np.sort(np.concatenate(([0.0, 1.0, np.float32(1e-45)], rng.random(1000)))).astype(np.float32)
    assert np.all(np.diff(v.view(np.uint32).astype(np.int64)) >= 0)


@pytest.mark.parametrize("kind", ["continuous", "ties", "plateau"])
def test_histogram_cut_equals_the_sorted_array_cut(kind, global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    if kind == "continuous":
        values = rng.random(20001).astype(np.float32)
    elif kind == "ties":
        values = (rng.integers(0, 50, 20001) / 49).astype(np.float32)
    else:  # a third of the cells at exactly 1 and a block at 0, as a fuzzy AND gives
        values = np.concatenate((np.ones(7000), np.zeros(4000), rng.random(9001))).astype(np.float32)
    shares = [0.0, 0.05, 0.3, 0.35, 0.7, 0.9, 1.0]
    cuts = histogram_cuts(values, shares)
    v = values.astype(np.float64)  # compare in float64: a Python float meets a float32 array in float32
    for share, cut in zip(shares, cuts):
        expected = cut_for_area_share(v, share)
        assert (v >= cut.threshold).sum() == (v >= expected).sum() == cut.n_cells, share
    # the thresholds never rise as the share grows, so zones nest
    assert all(a.threshold >= b.threshold for a, b in zip(cuts, cuts[1:]))


def test_empty_and_full_zones():
    values = np.array([0.2, 0.4, 0.4, 0.9], dtype=np.float32)
    empty, full = histogram_cuts(values, [0.0, 1.0], n_parts=2)
    v = values.astype(np.float64)
    assert empty.n_cells == 0 and (v >= empty.threshold).sum() == 0
    assert full.n_cells == 4 and (v >= full.threshold).sum() == 4
