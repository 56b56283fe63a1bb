"""Numba kernel for the mean pairwise distance of the area of applicability.

Arrays in, arrays out; the wrapper in ``_applicability.py`` validates and embeds.
"""

import numpy as np

from mlsites._numba import ngjit, pjit, prange

__all__ = ["_pairwise_distance_sums_kernel"]


@ngjit
def _distance_sum_after(zt, ct, penalty, i, buf):
    """Sum of distances from point i to every point j > i.

    ``zt`` holds the continuous coordinates one point per column (dimensions x
    points), so the innermost loops run over contiguous points and vectorise;
    ``ct`` holds category indices the same way, and a differing category adds its
    ``penalty`` to the squared distance. ``buf`` has room for all points.
    """
    q, n = zt.shape
    m = n - i - 1
    for j in range(m):
        buf[j] = 0.0
    for c in range(q):
        v = zt[c, i]
        row = zt[c]
        for j in range(m):
            diff = v - row[i + 1 + j]
            buf[j] += diff * diff
    for c in range(ct.shape[0]):
        code = ct[c, i]
        row_codes = ct[c]
        pen = penalty[c]
        for j in range(m):
            if row_codes[i + 1 + j] != code:
                buf[j] += pen
    s = 0.0
    for j in range(m):
        s += np.sqrt(buf[j])
    return s


@pjit
def _pairwise_distance_sums_kernel(zt, ct, penalty):
    """Per point i, the sum of its distances to all later points j > i.

    The squared distance of two points is the squared Euclidean distance of their
    columns of ``zt`` (continuous, q x n) plus ``penalty[c]`` for each row c of
    ``ct`` (category indices, L x n) where they differ. The total of the returned
    array is the sum over all n (n - 1) / 2 pairs; memory is O(n) per thread,
    never an n x n matrix. Row t is paired with row n - 1 - t in one parallel task
    so every task has about n pairs (the triangle is uneven). Each entry is summed
    in a fixed order, so the result does not depend on the number of threads.
    """
    n = zt.shape[1]
    out = np.zeros(n)
    half = (n + 1) // 2
    for t in prange(half):
        buf = np.empty(n)
        out[t] = _distance_sum_after(zt, ct, penalty, t, buf)
        if n - 1 - t != t:
            out[n - 1 - t] = _distance_sum_after(zt, ct, penalty, n - 1 - t, buf)
    return out
