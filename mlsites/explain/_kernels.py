"""Numba kernels of path-dependent TreeSHAP (Lundberg et al. 2020, Algorithm 2).

The kernels see flat arrays of a whole tree ensemble (see :mod:`mlsites.explain._trees`
for the layout) and the rows to explain, nothing else. Two things differ from the
reference C++ of the ``shap`` package, neither changes the algorithm:

- every split node names a *player* (a layer) besides the column it tests, so the
  one-hot columns of one categorical layer are one player: a path that splits on two
  columns of the same layer is unwound and extended as one feature, exactly as the
  algorithm treats two splits on the same column;
- a split is numeric (``x <= threshold`` goes left) or categorical (the category's bit
  in a left-category bitset, unknown categories follow missing values), the rule of
  scikit-learn's histogram gradient boosting predictor.
"""

import numpy as np

from mlsites._numba import ngjit, pjit, prange

#: Node kinds of the flat tree layout.
NUMERIC_SPLIT = 0
CATEGORICAL_SPLIT = 1


@ngjit
def _goes_left(v, kind, threshold, missing_left, bitset_row, known_row, bitsets, known):
    if np.isnan(v):
        return missing_left
    if kind == NUMERIC_SPLIT:
        return v <= threshold
    if v < 0 or v >= 256:
        return missing_left
    c = int(v)
    if (bitsets[bitset_row, c >> 5] >> (c & 31)) & 1:
        return True
    if (known[known_row, c >> 5] >> (c & 31)) & 1:
        return False
    return missing_left  # a category unseen in fit follows missing values


@ngjit
def _extend(feat, zero, one, pw, b, depth, zero_fraction, one_fraction, player):
    """Add a player to the path stored at ``b`` (Algorithm 2, EXTEND)."""
    feat[b + depth] = player
    zero[b + depth] = zero_fraction
    one[b + depth] = one_fraction
    pw[b + depth] = 1.0 if depth == 0 else 0.0
    for i in range(depth - 1, -1, -1):
        pw[b + i + 1] += one_fraction * pw[b + i] * (i + 1) / (depth + 1)
        pw[b + i] = zero_fraction * pw[b + i] * (depth - i) / (depth + 1)


@ngjit
def _unwind(feat, zero, one, pw, b, depth, k):
    """Remove path element ``k`` (Algorithm 2, UNWIND)."""
    one_fraction = one[b + k]
    zero_fraction = zero[b + k]
    next_one = pw[b + depth]
    for i in range(depth - 1, -1, -1):
        if one_fraction != 0.0:
            tmp = pw[b + i]
            pw[b + i] = next_one * (depth + 1) / ((i + 1) * one_fraction)
            next_one = tmp - pw[b + i] * zero_fraction * (depth - i) / (depth + 1)
        else:
            pw[b + i] = pw[b + i] * (depth + 1) / (zero_fraction * (depth - i))
    for i in range(k, depth):
        feat[b + i] = feat[b + i + 1]
        zero[b + i] = zero[b + i + 1]
        one[b + i] = one[b + i + 1]


@ngjit
def _unwound_sum(zero, one, pw, b, depth, k):
    """Total permutation weight of the path without element ``k``."""
    one_fraction = one[b + k]
    zero_fraction = zero[b + k]
    next_one = pw[b + depth]
    total = 0.0
    for i in range(depth - 1, -1, -1):
        if one_fraction != 0.0:
            tmp = next_one / ((i + 1) * one_fraction)
            total += tmp
            next_one = pw[b + i] - tmp * zero_fraction * (depth - i)
        else:
            total += pw[b + i] / (zero_fraction * (depth - i))
    return total * (depth + 1)


@ngjit
def _tree_shap_row(x, root, left, right, column, players, threshold, kind, missing_left, bitset_row,
                   known_row, cover, value, bitsets, known, phi, feat, zero, one, pw, stack_i, stack_f):
    """Algorithm 2 (RECURSE) for one row and one tree, with an explicit stack.

    A node's path lives at ``b = parent_offset + depth + 1``; descendants only write
    beyond it, so a parent's path is intact when its second child is taken from the
    stack. ``stack_i`` holds (node, depth, parent offset, player), ``stack_f`` the
    (zero, one) fractions.
    """
    top = 0
    stack_i[0, 0], stack_i[0, 1], stack_i[0, 2], stack_i[0, 3] = root, 0, 0, -1
    stack_f[0, 0], stack_f[0, 1] = 1.0, 1.0
    while top >= 0:
        node, depth, offset, player = stack_i[top, 0], stack_i[top, 1], stack_i[top, 2], stack_i[top, 3]
        zero_fraction, one_fraction = stack_f[top, 0], stack_f[top, 1]
        top -= 1
        b = offset + depth + 1
        for i in range(depth):  # copy the parent's path; slot ``depth`` is set by EXTEND
            feat[b + i] = feat[offset + i]
            zero[b + i] = zero[offset + i]
            one[b + i] = one[offset + i]
            pw[b + i] = pw[offset + i]
        _extend(feat, zero, one, pw, b, depth, zero_fraction, one_fraction, player)
        if left[node] < 0:
            leaf = value[node]
            for i in range(1, depth + 1):
                w = _unwound_sum(zero, one, pw, b, depth, i)
                phi[feat[b + i]] += w * (one[b + i] - zero[b + i]) * leaf
            continue
        if _goes_left(x[column[node]], kind[node], threshold[node], missing_left[node], bitset_row[node],
                      known_row[node], bitsets, known):
            hot, cold = left[node], right[node]
        else:
            hot, cold = right[node], left[node]
        incoming_zero = 1.0
        incoming_one = 1.0
        split = players[node]
        k = 0
        while k <= depth and feat[b + k] != split:
            k += 1
        if k <= depth:  # the path split on this player before: undo that split to redo it here
            incoming_zero = zero[b + k]
            incoming_one = one[b + k]
            _unwind(feat, zero, one, pw, b, depth, k)
            depth -= 1
        for child, one_f in ((cold, 0.0), (hot, incoming_one)):
            top += 1
            stack_i[top, 0], stack_i[top, 1], stack_i[top, 2], stack_i[top, 3] = child, depth + 1, b, split
            stack_f[top, 0], stack_f[top, 1] = cover[child] / cover[node] * incoming_zero, one_f


@pjit
def _tree_shap_kernel(X, roots, left, right, column, players, threshold, kind, missing_left, bitset_row,
                      known_row, cover, value, bitsets, known, n_players, max_depth):
    """Path-dependent SHAP values of every row of ``X`` for a tree ensemble.

    ``X`` holds the encoded columns the trees test (float64; float32-valued for
    scikit-learn trees, which compare in float32). Returns ``(n_rows, n_players)``. The
    root enters the path as the dummy player -1, which no leaf credits (Algorithm 2
    credits path elements 1 .. depth).
    """
    n = X.shape[0]
    phi = np.zeros((n, n_players))
    size = (max_depth + 2) * (max_depth + 3) // 2 + max_depth + 3
    for r in prange(n):
        feat = np.empty(size, dtype=np.int64)
        zero = np.empty(size)
        one = np.empty(size)
        pw = np.empty(size)
        stack_i = np.empty((max_depth + 3, 4), dtype=np.int64)
        stack_f = np.empty((max_depth + 3, 2))
        row_phi = np.zeros(n_players)
        x = X[r]
        for root in roots:
            _tree_shap_row(x, root, left, right, column, players, threshold, kind, missing_left, bitset_row,
                           known_row, cover, value, bitsets, known, row_phi, feat, zero, one, pw,
                           stack_i, stack_f)
        phi[r] = row_phi
    return phi


@ngjit
def _predict_kernel(X, roots, left, right, column, threshold, kind, missing_left, bitset_row, known_row,
                    value, bitsets, known):
    """Sum of the leaf values reached by each row (checks the flat layout against the model)."""
    out = np.zeros(X.shape[0])
    for r in range(X.shape[0]):
        for root in roots:
            node = root
            while left[node] >= 0:
                if _goes_left(X[r, column[node]], kind[node], threshold[node], missing_left[node],
                              bitset_row[node], known_row[node], bitsets, known):
                    node = left[node]
                else:
                    node = right[node]
            out[r] += value[node]
    return out
