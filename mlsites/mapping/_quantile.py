"""Exact top-share cuts of a float32 map without holding its scores in memory.

The bit pattern of a non-negative float32, read as an unsigned integer, is
ordered like the number itself. A first pass counts the cells per value of the
upper 16 bits (at most 65536 counters); the boundary cell of each wanted area
share then lies in one known bin, and a second pass counts the lower 16 bits of
the cells in those bins only. Together they give the exact boundary value and
the number of cells above and at it, whatever the map size.
"""

from __future__ import annotations

import numpy as np

from mlsites.evaluation import nearest_tie_cut

__all__ = ["BIN_COUNT", "coarse_counts", "ZoneCut", "plan_cuts", "fine_counts", "finish_cuts"]

#: Counters of the first pass: every upper-16-bit value of a float32.
BIN_COUNT = 1 << 16
_LOW_MASK = np.uint32(0xFFFF)
#: Bit pattern of float32 1.0; a threshold one step above it leaves every score out.
_ONE_BITS = int(np.float32(1.0).view(np.uint32))


def _bits(values):
    """uint32 bit patterns of non-negative float32 values (-0.0 must already be +0.0)."""
    return np.ascontiguousarray(values, dtype=np.float32).view(np.uint32)


def coarse_counts(values):
    """Cells per upper-16-bit value of finite, non-negative float32 ``values`` (1-D)."""
    return np.bincount(_bits(values) >> 16, minlength=BIN_COUNT).astype(np.int64)


class ZoneCut:
    """The cut of one cumulative area share: boundary bin, then exact threshold.

    Attributes (after :func:`finish_cuts`)
    --------------------------------------
    threshold_bits : int
        Cells whose score's bit pattern is at least this lie in the zone (or above).
    threshold : float
        The same threshold as a float (a float32 value).
    n_cells : int
        Cells in the zone and all zones above it.
    """

    def __init__(self, area_share, n_valid):
        self.area_share = float(area_share)
        self.want = self.area_share * n_valid
        self.n_valid = int(n_valid)
        # rank (1 = highest score) of the cell that crosses the wanted count
        self.rank = min(self.n_valid, int(np.ceil(self.want - 1e-9))) if self.want > 0 else 0
        self.bin = None
        self.above_bin = 0
        self.threshold_bits = None
        self.n_cells = None

    @property
    def threshold(self):
        return float(np.uint32(self.threshold_bits).view(np.float32))


def plan_cuts(counts, area_shares):
    """Cuts of each cumulative area share, with the bin of their boundary cell.

    Parameters
    ----------
    counts : numpy.ndarray of int64, shape (BIN_COUNT,)
        Summed :func:`coarse_counts` of the whole map.
    area_shares : sequence of float
        Cumulative area shares in [0, 1].

    Returns
    -------
    list of ZoneCut
        Cuts with an empty zone (share 0 or no valid cell) are finished at once.
    """
    n_valid = int(counts.sum())
    # cells above each bin, counting from the top
    above = np.concatenate((np.cumsum(counts[::-1])[::-1][1:], [0]))
    cuts = []
    for share in area_shares:
        cut = ZoneCut(share, n_valid)
        if cut.rank == 0:
            cut.threshold_bits, cut.n_cells = _ONE_BITS + 1, 0
        else:
            # highest bin b whose cells and those above reach the rank
            reach = above + counts
            cut.bin = int(np.flatnonzero(reach >= cut.rank)[-1])
            cut.above_bin = int(above[cut.bin])
        cuts.append(cut)
    return cuts


def fine_counts(values, bins):
    """Cells per lower-16-bit value in each of ``bins``: dict bin -> counts.

    Parameters
    ----------
    values : numpy.ndarray of float32 (1-D)
        Finite, non-negative scores of one window.
    bins : iterable of int
        Upper-16-bit values wanted.
    """
    bits = _bits(values)
    upper = bits >> 16
    out = {}
    for b in bins:
        low = bits[upper == b] & _LOW_MASK
        out[b] = np.bincount(low, minlength=BIN_COUNT).astype(np.int64)
    return out


def finish_cuts(cuts, fine):
    """Exact thresholds from the summed :func:`fine_counts` of the boundary bins.

    The tie group of the boundary value joins the zone or not, whichever leaves
    the count nearer the wanted ``area_share * n_valid``
    (:func:`mlsites.evaluation.nearest_tie_cut`), as
    :func:`mlsites.evaluation.cut_for_area_share` does on an array.
    """
    for cut in cuts:
        if cut.threshold_bits is not None:
            continue
        counts = fine[cut.bin]
        above = np.concatenate((np.cumsum(counts[::-1])[::-1][1:], [0]))
        k = cut.rank - cut.above_bin
        low = int(np.flatnonzero(above + counts >= k)[-1])
        n_above = cut.above_bin + int(above[low])
        n_including = n_above + int(counts[low])
        boundary = (cut.bin << 16) | low
        if nearest_tie_cut(n_above, n_including, cut.want):
            cut.threshold_bits, cut.n_cells = boundary, n_including
        else:
            cut.threshold_bits, cut.n_cells = boundary + 1, n_above
    return cuts
