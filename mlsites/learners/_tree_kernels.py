"""Numba kernels that walk flattened scikit-learn tree ensembles.

The kernels see only arrays: a block of encoded rows and the node arrays built by
:mod:`mlsites.learners._fast_predict`. Rows are split into fixed blocks that run in
parallel; inside a block every tree is walked for every row of the block while the
block stays in cache, and each row's sum runs over the trees in their fitted order,
so the result does not depend on the number of threads or on the block size.
"""

import numpy as np

from mlsites._numba import ngjit, pjit, prange

#: Rows per parallel block: the encoded block (a few hundred kB) stays in the core's cache.
BLOCK_ROWS = 2048


@ngjit
def _block_rows(b, n):
    """First and one-past-last row of block ``b`` of ``n`` rows."""
    lo = b * BLOCK_ROWS
    return lo, min(n, lo + BLOCK_ROWS)


@pjit
def _forest_kernel(Z, feature, threshold, children, value, roots, out):
    """Mean leaf value over the trees of a forest, four rows walked side by side.

    ``children[2 * node + go_right]`` is the next node; a leaf points to itself and
    has threshold +inf, so the walk stops when a node maps to itself. Four
    independent walks in one loop keep the processor busy while each waits for its
    next node (a lone walk is bound by memory latency, not by arithmetic).
    """
    n = Z.shape[0]
    for b in prange((n + BLOCK_ROWS - 1) // BLOCK_ROWS):
        lo, hi = _block_rows(b, n)
        acc = np.zeros(hi - lo)
        for t in range(roots.size):
            r = roots[t]
            i = lo
            while i < hi:
                # rows past the block end repeat the last row; their leaves are not added
                i1, i2, i3 = min(i + 1, hi - 1), min(i + 2, hi - 1), min(i + 3, hi - 1)
                n0 = n1 = n2 = n3 = r
                while True:
                    m0 = children[2 * n0 + (Z[i, feature[n0]] > threshold[n0])]
                    m1 = children[2 * n1 + (Z[i1, feature[n1]] > threshold[n1])]
                    m2 = children[2 * n2 + (Z[i2, feature[n2]] > threshold[n2])]
                    m3 = children[2 * n3 + (Z[i3, feature[n3]] > threshold[n3])]
                    if m0 == n0 and m1 == n1 and m2 == n2 and m3 == n3:
                        break
                    n0, n1, n2, n3 = m0, m1, m2, m3
                acc[i - lo] += value[n0]
                if i + 1 < hi:
                    acc[i + 1 - lo] += value[n1]
                if i + 2 < hi:
                    acc[i + 2 - lo] += value[n2]
                if i + 3 < hi:
                    acc[i + 3 - lo] += value[n3]
                i += 4
        for i in range(lo, hi):
            out[i] = acc[i - lo] / roots.size


@pjit
def _boosting_kernel(Z, feature, threshold, left, right, is_leaf, missing_left, is_categorical,
                     bitset_row, category_bits, known_row, known_bits, value, roots, baseline, out):
    """Baseline plus the sum of leaf values of histogram gradient boosting trees.

    Decisions follow scikit-learn's prediction from raw (unbinned) data: NaN goes
    the node's missing side; a categorical node sends a category left if its bit is
    set in the node's bitset, right if the category was seen in fit, else (unseen,
    negative or not below 256) the missing side; a numeric node goes left when the
    value is <= the float64 threshold.
    """
    n = Z.shape[0]
    for b in prange((n + BLOCK_ROWS - 1) // BLOCK_ROWS):
        lo, hi = _block_rows(b, n)
        acc = np.zeros(hi - lo)
        for i in range(hi - lo):
            acc[i] += baseline  # 0 + baseline, as scikit-learn starts from zeros
        for t in range(roots.size):
            for i in range(lo, hi):
                node = roots[t]
                while not is_leaf[node]:
                    x = Z[i, feature[node]]
                    if np.isnan(x):
                        go_left = missing_left[node]
                    elif is_categorical[node]:
                        code = int(x) if 0.0 <= x < 256.0 else -1
                        if code < 0:
                            go_left = missing_left[node]
                        elif (category_bits[bitset_row[node], code >> 5] >> (code & 31)) & 1:
                            go_left = True
                        elif (known_bits[known_row[feature[node]], code >> 5] >> (code & 31)) & 1:
                            go_left = False
                        else:
                            go_left = missing_left[node]
                    else:
                        go_left = x <= threshold[node]
                    node = left[node] if go_left else right[node]
                acc[i - lo] += value[node]
        for i in range(lo, hi):
            out[i] = acc[i - lo]
