"""Numba kernels for the hydrology and distance layers.

Kernels see only arrays and scalars. Grids are C-contiguous 2-D arrays with row 0
north; kernels that walk flow paths work on flat views (cell ``p = row * n_cols +
col``). Validation, dtype handling and documentation live in
:mod:`mlsites.terrain._hydrology`.

Neighbour order and D8 codes (METHODS.md section 4)::

    k     0   1   2   3   4   5   6   7
    dir   E   SE  S   SW  W   NW  N   NE
    code  1   2   4   8   16  32  64  128

The neighbour opposite to ``k`` is ``(k + 4) % 8``. Code 0 means "no lower
neighbour" (an outlet), code 255 marks nodata.

The depression filling kernel works on the float32 elevations reinterpreted as
uint32 and mapped to *order keys*: an order-preserving bijection from finite
float32 values to uint32 (flip all bits of negatives, set the sign bit of
positives). Comparing keys compares elevations, and ``key + 1`` is the next
representable float32 above, i.e. ``nextafter(z, +inf)``; no float arithmetic is
needed inside the flood.
"""

import math

import numpy as np

from mlsites._numba import ngjit, pjit, prange

NODATA_CODE = 255
DONE = 255  # in-degree marker: cell processed or nodata (real in-degrees are <= 8)
D8_CODES = np.array([1, 2, 4, 8, 16, 32, 64, 128], dtype=np.uint8)
_DI = np.array([0, 1, 1, 1, 0, -1, -1, -1], dtype=np.int64)
_DJ = np.array([1, 1, 0, -1, -1, -1, 0, 1], dtype=np.int64)
# code -> neighbour index k; -1 for 0 (outlet) and 255 (nodata), -2 for invalid codes
_CODE_TO_K = np.full(256, -2, dtype=np.int64)
_CODE_TO_K[0] = -1
_CODE_TO_K[NODATA_CODE] = -1
for _k in range(8):
    _CODE_TO_K[1 << _k] = _k

_SIGN = np.uint32(0x80000000)
_ALL = np.uint32(0xFFFFFFFF)
_LOW31 = np.uint32(0x7FFFFFFF)
_EXP = np.uint32(0x7F800000)
_MANT = np.uint32(0x007FFFFF)
_NODATA_MARK = np.uint8(2)  # closed-flag value of nodata cells during the flood
_LOW32 = np.uint64(0xFFFFFFFF)
_SHIFT = np.uint64(32)
_MIN_QUEUE = 1024
_STRIP = 256  # columns per task in the column pass of the distance transform


# ---------------------------------------------------------------- order keys ----
@ngjit
def _is_nan_bits(b):
    return (b & _EXP) == _EXP and (b & _MANT) != 0


@ngjit
def _to_key(b):
    if b == _SIGN:  # -0.0 becomes +0.0 so that key + 1 is strictly above it
        b = np.uint32(0)
    if b & _SIGN:
        return _ALL - b
    return b | _SIGN


@ngjit
def _from_key(k):
    if k & _SIGN:
        return k & _LOW31
    return _ALL - k


# ------------------------------------------------------------- binary heap ------
@ngjit
def _heap_push(hkey, hidx, size, key, idx):
    """Insert (key, idx) into the min-heap holding ``size`` entries; return new size."""
    pos = size
    while pos > 0:
        parent = (pos - 1) >> 1
        if hkey[parent] <= key:
            break
        hkey[pos] = hkey[parent]
        hidx[pos] = hidx[parent]
        pos = parent
    hkey[pos] = key
    hidx[pos] = idx
    return size + 1


@ngjit
def _heap_pop(hkey, hidx, size):
    """Remove the root of a heap of ``size`` entries; return (idx, new size)."""
    top = hidx[0]
    size -= 1
    key = hkey[size]
    idx = hidx[size]
    pos = 0
    while True:
        child = 2 * pos + 1
        if child >= size:
            break
        if child + 1 < size and hkey[child + 1] < hkey[child]:
            child += 1
        if key <= hkey[child]:
            break
        hkey[pos] = hkey[child]
        hidx[pos] = hidx[child]
        pos = child
    hkey[pos] = key
    hidx[pos] = idx
    return top, size


@ngjit
def _grown(a, n_used, limit):
    b = np.empty(min(2 * a.size, max(limit, a.size + 1)), dtype=a.dtype)
    for t in range(n_used):  # an explicit loop compiles much faster than a slice copy
        b[t] = a[t]
    return b


@ngjit
def _grown_ring(a, head, n_used, limit):
    """Double a ring buffer, unrolling it so the oldest entry sits at index 0."""
    b = np.empty(min(2 * a.size, max(limit, a.size + 1)), dtype=a.dtype)
    for t in range(n_used):
        b[t] = a[(head + t) % a.size]
    return b


# ------------------------------------------------------------ priority-flood ----
@ngjit
def _flood_setup_kernel(z, closed, n_rows, n_cols):
    """Turn elevations into keys and mark nodata and seeds.

    Returns (seed cells, valid cells, infinite cells).
    """
    n = n_rows * n_cols
    n_valid = 0
    n_inf = 0
    for p in range(n):
        b = z[p]
        if _is_nan_bits(b):
            closed[p] = _NODATA_MARK
            continue
        closed[p] = 0
        n_valid += 1
        if (b & _EXP) == _EXP:
            n_inf += 1
        z[p] = _to_key(b)
    n_seeds = 0
    for p in range(n):
        if closed[p] == _NODATA_MARK:
            continue
        i, j = p // n_cols, p % n_cols
        seed = i == 0 or j == 0 or i == n_rows - 1 or j == n_cols - 1
        for k in range(8):
            if seed:
                break
            seed = closed[(i + _DI[k]) * n_cols + j + _DJ[k]] == _NODATA_MARK
        if seed:
            closed[p] = 3  # seeds are pushed in raster order by the flood kernel
            n_seeds += 1
    return n_seeds, n_valid, n_inf


@ngjit
def _priority_flood_kernel(z, closed, n_rows, n_cols, epsilon):
    """Fill depressions in place on flat uint32 elevation bits ``z``.

    ``closed`` (uint8, same size) is scratch: it ends as 1 on valid cells and 2
    on nodata. Returns (valid cells, infinite cells, largest priority-queue size,
    largest pit-queue size); with infinite or no valid cells nothing is filled
    and ``z`` is left as keys.
    """
    n = n_rows * n_cols
    n_seeds, n_valid, n_inf = _flood_setup_kernel(z, closed, n_rows, n_cols)
    if n_inf > 0 or n_valid == 0:
        return n_valid, n_inf, 0, 0
    # Queues start small and grow; each cell is queued once, so n_valid bounds them.
    cap = min(max(_MIN_QUEUE, 2 * n_seeds), n_valid)
    hkey = np.empty(cap, dtype=np.uint64)
    hidx = np.empty(cap, dtype=np.int32)
    pit = np.empty(min(_MIN_QUEUE, n_valid), dtype=np.int32)
    size = 0
    counter = 0
    for p in range(n):
        if closed[p] == 3:
            closed[p] = 1
            key = (np.uint64(z[p]) << _SHIFT) | np.uint64(counter)
            size = _heap_push(hkey, hidx, size, key, p)
            counter += 1
    head = 0
    n_pit = 0
    max_heap = size
    max_pit = 0
    lift = np.uint32(1) if epsilon else np.uint32(0)
    while size > 0 or n_pit > 0:
        # A queued cell at exactly the pit's level goes first (after Barnes et al. 2014,
        # from memory), so its neighbours rise from its level, not from later pit steps.
        if n_pit > 0 and not (size > 0 and (hkey[0] >> _SHIFT) == np.uint64(z[pit[head]])):
            c = np.int64(pit[head])
            head = (head + 1) % pit.size
            n_pit -= 1
        else:
            c, size = _heap_pop(hkey, hidx, size)
        zc = z[c] + lift
        i, j = c // n_cols, c % n_cols
        for k in range(8):
            ii, jj = i + _DI[k], j + _DJ[k]
            if ii < 0 or jj < 0 or ii >= n_rows or jj >= n_cols:
                continue
            q = ii * n_cols + jj
            if closed[q]:
                continue
            closed[q] = 1
            if z[q] <= zc:
                z[q] = zc
                if n_pit == pit.size:
                    pit = _grown_ring(pit, head, n_pit, n_valid)
                    head = 0
                pit[(head + n_pit) % pit.size] = q
                n_pit += 1
                max_pit = max(max_pit, n_pit)
            else:
                if size == hkey.size:
                    hkey = _grown(hkey, size, n_valid)
                    hidx = _grown(hidx, size, n_valid)
                key = (np.uint64(z[q]) << _SHIFT) | np.uint64(counter)
                size = _heap_push(hkey, hidx, size, key, q)
                counter += 1
                max_heap = max(max_heap, size)
    for p in range(n):
        if closed[p] != _NODATA_MARK:
            z[p] = _from_key(z[p])
    return n_valid, n_inf, max_heap, max_pit


# --------------------------------------------------------------------- D8 -------
@pjit
def _flow_direction_kernel(z, dx, dy, out):
    """Steepest-descent D8 code of every cell (ties: first in E..NE order)."""
    n_rows, n_cols = z.shape
    dist = np.empty(8, dtype=np.float64)
    for k in range(8):
        dist[k] = math.hypot(_DJ[k] * dx, _DI[k] * dy)
    for i in prange(n_rows):
        for j in range(n_cols):
            zc = np.float64(z[i, j])
            if math.isnan(zc):
                out[i, j] = NODATA_CODE
                continue
            best = 0.0
            code = 0
            for k in range(8):
                ii, jj = i + _DI[k], j + _DJ[k]
                if ii < 0 or jj < 0 or ii >= n_rows or jj >= n_cols:
                    continue
                drop = (zc - np.float64(z[ii, jj])) / dist[k]
                if drop > best:  # NaN neighbours compare False
                    best = drop
                    code = D8_CODES[k]
            out[i, j] = code


# -------------------------------------------------------- flow accumulation -----
@ngjit
def _indegree_kernel(direction, indeg):
    """Count the neighbours draining into each cell.

    Returns (cells with invalid codes, valid cells).
    """
    n_rows, n_cols = direction.shape
    n_bad = 0
    n_valid = 0
    for i in range(n_rows):
        for j in range(n_cols):
            d = direction[i, j]
            if _CODE_TO_K[d] == -2:
                n_bad += 1
            if d == NODATA_CODE:
                indeg[i, j] = DONE
                continue
            n_valid += 1
            count = 0
            for k in range(8):
                ii, jj = i + _DI[k], j + _DJ[k]
                if 0 <= ii < n_rows and 0 <= jj < n_cols and direction[ii, jj] == D8_CODES[(k + 4) % 8]:
                    count += 1
            indeg[i, j] = count
    return n_bad, n_valid


@ngjit
def _receiver(direction, c, n_rows, n_cols):
    """Flat index of the valid cell ``c`` drains to, or -1 (outlet, edge, nodata)."""
    k = _CODE_TO_K[direction[c]]
    if k < 0:
        return -1
    ii, jj = c // n_cols + _DI[k], c % n_cols + _DJ[k]
    if ii < 0 or jj < 0 or ii >= n_rows or jj >= n_cols:
        return -1
    r = ii * n_cols + jj
    if direction[r] == NODATA_CODE:
        return -1
    return r


@ngjit
def _accumulate_kernel(direction, indeg, acc, n_rows, n_cols):
    """Kahn's topological sweep on flat arrays; return the number of cells done.

    Sources (in-degree 0) start a walk downstream; the walk continues into a
    receiver only when its last inflow has arrived, so every cell is finished
    exactly once and no explicit queue is needed.
    """
    n_done = 0
    for p in range(n_rows * n_cols):
        if indeg[p] != 0:
            continue
        c = p
        while True:
            indeg[c] = DONE
            n_done += 1
            a = acc[c] + np.uint32(1)
            acc[c] = a
            r = _receiver(direction, c, n_rows, n_cols)
            if r < 0:
                break
            acc[r] += a
            indeg[r] -= 1
            if indeg[r] != 0:
                break
            c = r
    return n_done


# ------------------------------------------------------------------ streams -----
@ngjit
def _stream_cells_kernel(acc, min_cells, out):
    n_rows, n_cols = acc.shape
    for i in range(n_rows):
        for j in range(n_cols):
            a = acc[i, j]
            if a == 0:
                out[i, j] = NODATA_CODE
            else:
                out[i, j] = 1 if a >= min_cells else 0


# --------------------------------------------------------------------- HAND -----
@ngjit
def _hand_kernel(z, direction, streams, out, n_rows, n_cols):
    """Height above the first stream cell on the D8 path (or its last cell), on flat arrays.

    ``out`` first memoises the elevation of the drainage stream cell of every
    resolved cell (-inf = not yet resolved), so each cell is walked at most twice.
    """
    n = n_rows * n_cols
    for p in range(n):
        out[p] = np.nan if direction[p] == NODATA_CODE else -np.inf
    for p in range(n):
        if out[p] != -np.inf:
            continue
        c = p
        while True:
            v = out[c]
            if v != -np.inf:
                break
            if streams[c] == 1:
                v = z[c]
                break
            r = _receiver(direction, c, n_rows, n_cols)
            if r < 0:
                # The path ends without a stream (it leaves the grid at an edge or
                # nodata cell, or stops on a flat): its last cell is the drainage.
                v = z[c]
                break
            c = r
        end = c
        c = p
        while True:
            out[c] = v
            if c == end:
                break
            c = _receiver(direction, c, n_rows, n_cols)
    for p in range(n):
        out[p] = np.float64(z[p]) - np.float64(out[p])


# ------------------------------------------------------ Euclidean distance -------
@pjit
def _column_pass_kernel(grid, target, out):
    """Distance in cells to the nearest ``target`` cell of the same column (inf if none)."""
    n_rows, n_cols = grid.shape
    n_strips = (n_cols + _STRIP - 1) // _STRIP
    for s in prange(n_strips):
        j0 = s * _STRIP
        j1 = min(n_cols, j0 + _STRIP)
        for j in range(j0, j1):
            out[0, j] = 0.0 if grid[0, j] == target else np.inf
        for i in range(1, n_rows):
            for j in range(j0, j1):
                out[i, j] = 0.0 if grid[i, j] == target else out[i - 1, j] + 1.0
        for i in range(n_rows - 2, -1, -1):
            for j in range(j0, j1):
                out[i, j] = min(out[i, j], out[i + 1, j] + 1.0)


@ngjit
def _lower_envelope_1d(f, spacing, v, zb, d):
    """Felzenszwalb & Huttenlocher (2012) 1-D squared distance transform.

    ``d[q] = min_p ((q - p) * spacing) ** 2 + f[p]``; entries of ``f`` that are
    inf take no part. ``v`` (int) and ``zb`` (float, n + 1) are scratch.
    """
    n = f.size
    k = -1
    for q in range(n):
        if f[q] == np.inf:
            continue
        xq = q * spacing
        if k < 0:
            k = 0
            v[0] = q
            zb[0] = -np.inf
            zb[1] = np.inf
            continue
        while True:
            xp = v[k] * spacing
            s = 0.5 * ((f[q] - f[v[k]]) / (xq - xp) + xq + xp)
            if s > zb[k]:
                break
            k -= 1
        k += 1
        v[k] = q
        zb[k] = s
        zb[k + 1] = np.inf
    if k < 0:
        d[:] = np.inf
        return
    k = 0
    for q in range(n):
        xq = q * spacing
        while zb[k + 1] < xq:
            k += 1
        t = xq - v[k] * spacing
        d[q] = t * t + f[v[k]]


@pjit
def _row_pass_kernel(out, dx, dy):
    """Turn per-column cell distances in ``out`` into Euclidean metres, in place."""
    n_rows, n_cols = out.shape
    n_chunks = min(n_rows, 64)
    for c in prange(n_chunks):
        f = np.empty(n_cols, dtype=np.float64)
        d = np.empty(n_cols, dtype=np.float64)
        v = np.empty(n_cols, dtype=np.int64)
        zb = np.empty(n_cols + 1, dtype=np.float64)
        for i in range(c * n_rows // n_chunks, (c + 1) * n_rows // n_chunks):
            for j in range(n_cols):
                t = out[i, j] * dy
                f[j] = t * t
            _lower_envelope_1d(f, dx, v, zb, d)
            for j in range(n_cols):
                out[i, j] = math.sqrt(d[j])


@ngjit
def _nan_where_kernel(out, grid, value):
    """Set ``out`` to NaN where ``grid == value`` (no temporary mask)."""
    n_rows, n_cols = out.shape
    for i in range(n_rows):
        for j in range(n_cols):
            if grid[i, j] == value:
                out[i, j] = np.nan
