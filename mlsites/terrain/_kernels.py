"""Numba kernels for the local terrain derivatives.

Kernels see only arrays and scalars: a 2-D elevation array (float32 or float64,
NaN = nodata, row 0 north) and per-row cell sizes ``dx`` and ``dy`` in metres (one
value per row, so degree grids whose east-west spacing shrinks with latitude are
handled). They fill float64 output arrays that the caller allocates with NumPy
(which backs large arrays with transparent huge pages, so first touch is cheap),
and read float32 input through ``np.float64(...)`` (numba's ``float()`` keeps
float32). Validation, dtype handling and documentation live in
:mod:`mlsites.terrain._derivatives`.

3x3 window labels (centre ``e``)::

    a b c    row r-1 (north)
    d e f    row r
    g h i    row r+1 (south)

Per-row spacing rule shared by all 3x3 kernels: an east-west difference taken
within row k uses ``dx[k]``; the north-south distance from the centre of row r to
the centre of row r-1 is ``(dy[r-1] + dy[r]) / 2`` (and likewise to row r+1). With
constant spacing every formula reduces to its textbook form.
"""

import math

import numpy as np

from mlsites._numba import ngjit, pjit, prange

_RAD_TO_DEG = 180.0 / math.pi
_FULL_CIRCLE_DEG = 360.0
# Relative slack when deciding whether a cell centre lies exactly on a TPI radius,
# so that cells at distance == radius are included despite rounding of sqrt.
_RADIUS_SLACK = 1e-9

# Rational approximation of atan on |u| <= 0.66 (Cephes library, atan.c, S. L.
# Moshier), error about 1 ulp. Used instead of libm's atan/atan2: those are scalar
# calls that stop the row loop from vectorising and cost several times the rest
# of the Horn computation.
_ATAN_P = (-8.750608600031904122785e-1, -1.615753718733365076637e1,
           -7.500855792314704667340e1, -1.228866684490136173410e2,
           -6.485021904942025371773e1)
_ATAN_Q = (2.485846490142306297962e1, 1.650270098316988542046e2,
           4.328810604912902668951e2, 4.853903996359136964868e2,
           1.945506571482613964425e2)
_ATAN_MOREBITS = 6.123233995736765886130e-17
_HALF_PI = 0.5 * math.pi
_QUARTER_PI = 0.25 * math.pi


@ngjit
def _atan2_deg_row(y, x, out):
    """out[c] = atan2(y[c], x[c]) in degrees, in [-180, 180]; NaN propagates.

    Branch-free so the loop vectorises. Unlike libm the sign of a zero is ignored
    (atan2(0, -1) = +180); only flat cells could tell, and callers mask those.
    """
    for c in range(out.shape[0]):
        ax = abs(x[c])
        ay = abs(y[c])
        swap = ay > ax
        big_side = ay if swap else ax  # NaN if x is NaN (the comparison is False)
        small_side = ax if swap else ay
        # reduce atan(small/big) in [0, pi/4] to |u| <= 0.66 with one division;
        # np.true_divide, unlike "/", has no zero check whose branch would stop
        # the loop from vectorising
        shifted = small_side > 0.66 * big_side  # then atan = pi/4 + atan(u)
        u = np.true_divide(small_side - big_side if shifted else small_side,
                           small_side + big_side if shifted else big_side)
        u = 0.0 if big_side == 0.0 else u
        z = u * u
        num = (((_ATAN_P[0] * z + _ATAN_P[1]) * z + _ATAN_P[2]) * z + _ATAN_P[3]) * z + _ATAN_P[4]
        den = ((((z + _ATAN_Q[0]) * z + _ATAN_Q[1]) * z + _ATAN_Q[2]) * z + _ATAN_Q[3]) * z + _ATAN_Q[4]
        a = u + u * np.true_divide(z * num, den)
        a = _QUARTER_PI + (a + 0.5 * _ATAN_MOREBITS) if shifted else a
        a = _HALF_PI - a if swap else a
        a = math.pi - a if x[c] < 0.0 else a
        out[c] = _RAD_TO_DEG * (-a if y[c] < 0.0 else a)


@ngjit
def _nan_edge_rows(out):
    """Set the first and last rows of ``out`` to NaN (strict edge rule).

    The first and last columns are set by the row loops: done here, one thread
    would touch every page of a fresh array and take all its page faults.
    """
    n_rows, n_cols = out.shape
    for c in range(n_cols):
        out[0, c] = np.nan
        out[n_rows - 1, c] = np.nan


@ngjit
def _nan_row_ends(out, r):
    out[r, 0] = np.nan
    out[r, out.shape[1] - 1] = np.nan


@ngjit
def _row_spacing(dx, dy, r):
    """Return (dx north row, dx centre row, dx south row, gap north, gap south)."""
    gap_n = 0.5 * (dy[r - 1] + dy[r])
    gap_s = 0.5 * (dy[r] + dy[r + 1])
    return dx[r - 1], dx[r], dx[r + 1], gap_n, gap_s


@ngjit
def _horn_row(dem, dx, dy, r, east, north, grad):
    """Downslope vector (-p, -q) of Horn's (1981) gradient for interior row ``r``.

    Fills ``east[c]``, ``north[c]`` and the magnitude ``grad[c]`` for
    c = 1 .. n_cols-2 (m/m).
    """
    dxn, dxc, dxs, gap_n, gap_s = _row_spacing(dx, dy, r)
    kn, kc, ks = 0.125 / dxn, 0.25 / dxc, 0.125 / dxs
    ky = 0.25 / (gap_n + gap_s)
    for c in range(1, dem.shape[1] - 1):
        a, b, cc = np.float64(dem[r - 1, c - 1]), np.float64(dem[r - 1, c]), np.float64(dem[r - 1, c + 1])
        d, e, f = np.float64(dem[r, c - 1]), np.float64(dem[r, c]), np.float64(dem[r, c + 1])
        g, h, i = np.float64(dem[r + 1, c - 1]), np.float64(dem[r + 1, c]), np.float64(dem[r + 1, c + 1])
        # (e - e) is 0 for valid e and NaN for nodata: Horn ignores e but the
        # strict edge rule needs all nine cells.
        p_east = kn * (a - cc) + kc * (d - f) + ks * (g - i) + (e - e)
        q_north = ky * ((g + 2.0 * h + i) - (a + 2.0 * b + cc))
        east[c] = p_east
        north[c] = q_north
        grad[c] = math.sqrt(p_east * p_east + q_north * q_north)


@ngjit
def _horn_layers_row(dem, dx, dy, r, flat_tol, slope_row, aspect_row, percent):
    """Horn slope and/or aspect of row ``r``; an output of length 0 is skipped.

    Slope is in degrees (percent if ``percent``); aspect is the downslope azimuth
    in degrees clockwise from north in [0, 360), NaN where |grad| <= flat_tol.
    """
    n_cols = dem.shape[1]
    east = np.empty(n_cols)
    north = np.empty(n_cols)
    grad = np.empty(n_cols)
    _horn_row(dem, dx, dy, r, east, north, grad)
    if aspect_row.shape[0] > 0:
        _atan2_deg_row(east[1:-1], north[1:-1], aspect_row[1:-1])
        for c in range(1, n_cols - 1):
            az = aspect_row[c] + _FULL_CIRCLE_DEG if aspect_row[c] < 0.0 else aspect_row[c]
            az = 0.0 if az >= _FULL_CIRCLE_DEG else az
            aspect_row[c] = np.nan if grad[c] <= flat_tol else az
    if slope_row.shape[0] > 0:
        if percent:
            for c in range(1, n_cols - 1):
                slope_row[c] = 100.0 * grad[c]
        else:
            east[:] = 1.0
            _atan2_deg_row(grad[1:-1], east[1:-1], slope_row[1:-1])


@ngjit
def _aspect_component_row(dem, dx, dy, r, flat_tol, north_component, out_row):
    """Northness (cos of aspect) or eastness (sin) of row ``r``; flat cells 0."""
    n_cols = dem.shape[1]
    east = np.empty(n_cols)
    north = np.empty(n_cols)
    grad = np.empty(n_cols)
    _horn_row(dem, dx, dy, r, east, north, grad)
    comp = north if north_component else east
    for c in range(1, n_cols - 1):
        # flat: comp * 0 is 0 for valid cells and still NaN for nodata
        out_row[c] = comp[c] * (0.0 if grad[c] <= flat_tol else np.true_divide(1.0, grad[c]))


# Modes of _horn_kernel; the wrappers pass one of these.
_HORN_SLOPE, _HORN_SLOPE_PERCENT, _HORN_ASPECT, _HORN_NORTHNESS, _HORN_EASTNESS, _HORN_SLOPE_ASPECT = range(6)


@pjit
def _horn_kernel(dem, dx, dy, flat_tol, mode, out, out_aspect):
    """Horn (1981) layers of ``dem`` written into ``out`` (and ``out_aspect``).

    ``mode``: _HORN_SLOPE (degrees), _HORN_SLOPE_PERCENT, _HORN_ASPECT (degrees, flat
    NaN), _HORN_NORTHNESS / _HORN_EASTNESS (flat 0), or _HORN_SLOPE_ASPECT (slope into
    ``out``, aspect into ``out_aspect``; otherwise ``out_aspect`` is not touched).
    Outputs are passed in so that windowed callers can reuse them: first-touch
    page faults of fresh output memory can cost more than the computation. One
    kernel with a mode, rather than one per layer, keeps numba compile time down.
    """
    skip = np.empty(0)
    _nan_edge_rows(out)
    if mode == _HORN_SLOPE_ASPECT:
        _nan_edge_rows(out_aspect)
    for r in prange(1, dem.shape[0] - 1):
        ri = np.int64(r)  # prange indices may be typed unsigned
        _nan_row_ends(out, ri)
        if mode == _HORN_SLOPE_ASPECT:
            _nan_row_ends(out_aspect, ri)
        if mode == _HORN_SLOPE or mode == _HORN_SLOPE_PERCENT:
            _horn_layers_row(dem, dx, dy, ri, flat_tol, out[r], skip, mode == _HORN_SLOPE_PERCENT)
        elif mode == _HORN_ASPECT:
            _horn_layers_row(dem, dx, dy, ri, flat_tol, skip, out[r], False)
        elif mode == _HORN_SLOPE_ASPECT:
            _horn_layers_row(dem, dx, dy, ri, flat_tol, out[r], out_aspect[r], False)
        else:
            _aspect_component_row(dem, dx, dy, ri, flat_tol, mode == _HORN_NORTHNESS, out[r])


@pjit
def _curvature_kernel(dem, dx, dy, flat_tol, mode, out):
    """Zevenbergen & Thorne (1987) curvature, 1/m, positive convex.

    ``mode`` 0 profile, 1 plan, 2 total. Flat cells (|grad| <= flat_tol) get 0 for
    profile and plan.
    """
    n_rows, n_cols = dem.shape
    _nan_edge_rows(out)
    for r in prange(1, n_rows - 1):
        _nan_row_ends(out, r)
        dxn, dxc, dxs, gap_n, gap_s = _row_spacing(dx, dy, r)
        gap = gap_n + gap_s
        for c in range(1, n_cols - 1):
            a, b, cc = np.float64(dem[r - 1, c - 1]), np.float64(dem[r - 1, c]), np.float64(dem[r - 1, c + 1])
            d, e, f = np.float64(dem[r, c - 1]), np.float64(dem[r, c]), np.float64(dem[r, c + 1])
            g, h, i = np.float64(dem[r + 1, c - 1]), np.float64(dem[r + 1, c]), np.float64(dem[r + 1, c + 1])
            # D = z_xx/2, E = z_yy/2 (three-point rule for unequal row gaps), F = z_xy
            cd = (0.5 * (d + f) - e) / (dxc * dxc)
            ce = (gap_s * b + gap_n * h - gap * e) / (gap_n * gap_s * gap)
            cf = ((cc - a) / (2.0 * dxn) - (i - g) / (2.0 * dxs)) / gap
            cg = (f - d) / (2.0 * dxc)
            ch = (b - h) / gap
            g2 = cg * cg + ch * ch
            if mode == 2:
                out[r, c] = -2.0 * (cd + ce) + 0.0 * cf  # 0 * cf: NaN corners count too
            elif math.sqrt(g2) <= flat_tol:
                # 0 * (...) keeps NaN from any of the nine cells
                out[r, c] = 0.0 * (cd + ce + cf)
            elif mode == 0:
                out[r, c] = -2.0 * (cd * cg * cg + ce * ch * ch + cf * cg * ch) / g2
            else:
                out[r, c] = -2.0 * (cd * ch * ch + ce * cg * cg - cf * cg * ch) / g2


@pjit
def _window3_kernel(dem, mode, out):
    """3x3 statistics of the differences z_k - z_0 over the 8 neighbours.

    ``mode`` 0 TPI (z0 - mean of 8), 1 TRI Riley sqrt(sum d^2), 2 mean |d|
    (Wilson), 3 roughness (max - min of all 9 cells).
    """
    n_rows, n_cols = dem.shape
    _nan_edge_rows(out)
    for r in prange(1, n_rows - 1):
        _nan_row_ends(out, r)
        for c in range(1, n_cols - 1):
            z0 = np.float64(dem[r, c])
            s = 0.0
            s2 = 0.0
            sa = 0.0
            lo = z0
            hi = z0
            for dr in range(-1, 2):
                for dc in range(-1, 2):
                    z = np.float64(dem[r + dr, c + dc])
                    dz = z - z0
                    s += dz
                    s2 += dz * dz
                    sa += abs(dz)
                    lo = min(lo, z)
                    hi = max(hi, z)
            if mode == 0:
                out[r, c] = -s / 8.0
            elif mode == 1:
                out[r, c] = math.sqrt(s2)
            elif mode == 2:
                out[r, c] = sa / 8.0
            else:
                # s is NaN if any cell is NaN; min/max may skip NaN, so add 0 * s
                out[r, c] = hi - lo + 0.0 * s


@ngjit
def _ring_half_widths(dx, dy, outer, inner, w_out, w_in):
    """Fill the half-widths (in cells) of a TPI annulus, row offset k at index k + K.

    ``w_out[k + K]`` is the largest |j| with (k dy)^2 + (j dx)^2 <= outer^2 (-1 if
    the row is beyond ``outer``); ``w_in[k + K]`` is the largest |j| with distance
    < ``inner`` (-1 if none), and is at least 0 on row 0 so the centre is excluded.
    Returns K, the vertical reach in rows, and the number of cells in the ring.
    """
    n_k = (w_out.shape[0] - 1) // 2
    reach = min(int(math.floor(outer / dy * (1.0 + _RADIUS_SLACK))), n_k)
    n_cells = 0
    for k in range(-n_k, n_k + 1):
        vy2 = (k * dy) ** 2
        rem_out = outer * outer * (1.0 + _RADIUS_SLACK) - vy2
        w_o = int(math.floor(math.sqrt(rem_out) / dx)) if (abs(k) <= reach and rem_out >= 0.0) else -1
        rem_in = inner * inner * (1.0 - _RADIUS_SLACK) - vy2
        w_i = int(math.ceil(math.sqrt(rem_in) / dx)) - 1 if rem_in > 0.0 else -1
        if k == 0:
            w_i = max(w_i, 0)
        w_i = min(w_i, w_o)
        w_out[k + n_k] = w_o
        w_in[k + n_k] = w_i
        n_cells += (2 * w_o + 1 if w_o >= 0 else 0) - (2 * w_i + 1 if w_i >= 0 else 0)
    return reach, n_cells


@ngjit
def _ring_tables(dx, dy, outer, inner, max_reach):
    """Half-width tables of the TPI ring for every row, and its cell count per row.

    Returns ``w_out``, ``w_in`` of shape (n_rows, 2 max_reach + 1) as filled by
    :func:`_ring_half_widths` from each row's own dx and dy, and ``n_cells``.
    """
    n_rows = dx.shape[0]
    w_out = np.empty((n_rows, 2 * max_reach + 1), dtype=np.int64)
    w_in = np.empty((n_rows, 2 * max_reach + 1), dtype=np.int64)
    n_cells = np.empty(n_rows, dtype=np.int64)
    for r in range(n_rows):
        n_cells[r] = _ring_half_widths(dx[r], dy[r], outer, inner, w_out[r], w_in[r])[1]
    return w_out, w_in, n_cells


@ngjit
def _row_prefix_sums(dem, pad, r, sums, counts):
    """Prefix sums of row ``r``: elevations of valid cells, and valid counts.

    Column ``j + pad`` holds the sum over columns < j; the ``pad`` columns on each
    side repeat the end values, so a window sum needs no clamping at the edges.
    """
    n_cols = dem.shape[1]
    s = 0.0
    n = 0.0
    sums[r, : pad + 1] = 0.0
    counts[r, : pad + 1] = 0.0
    for c in range(n_cols):
        z = np.float64(dem[r, c])
        valid = not math.isnan(z)
        s += z if valid else 0.0
        n += 1.0 if valid else 0.0
        sums[r, c + pad + 1] = s
        counts[r, c + pad + 1] = n
    sums[r, n_cols + pad + 1:] = s
    counts[r, n_cols + pad + 1:] = n


@ngjit
def _add_row_segments(sums, counts, rr, half, pad, c0, sign, total, n_valid):
    """Add ``sign`` times the window sums over columns c-half..c+half of row ``rr``.

    For the columns c = c0 .. c0 + len(total) - 1; slicing first keeps the loop
    indices provably non-negative, so the loop vectorises.
    """
    width = total.shape[0]
    lo = c0 + pad - half
    hi = c0 + pad + half + 1
    s_hi, s_lo = sums[rr, hi:hi + width], sums[rr, lo:lo + width]
    n_hi, n_lo = counts[rr, hi:hi + width], counts[rr, lo:lo + width]
    for j in range(width):
        total[j] += sign * (s_hi[j] - s_lo[j])
        n_valid[j] += sign * (n_hi[j] - n_lo[j])


@ngjit
def _tpi_stripe(dem, sums, counts, w_out, w_in, pad, c0, c1, out):
    """TPI of columns c0 .. c1-1 for every row, top to bottom.

    Working down one stripe keeps the prefix-sum rows of the ring in cache from one
    row to the next (the ring of row r+1 shares all but one row with that of r).
    """
    n_rows = dem.shape[0]
    reach = (w_out.shape[1] - 1) // 2
    total = np.empty(c1 - c0)
    n_valid = np.empty(c1 - c0)
    for r in range(n_rows):
        total[:] = 0.0
        n_valid[:] = 0.0
        for k in range(max(-reach, -r), min(reach, n_rows - 1 - r) + 1):
            if w_out[r, k + reach] >= 0:
                _add_row_segments(sums, counts, r + k, w_out[r, k + reach], pad, c0, 1.0, total, n_valid)
            if w_in[r, k + reach] >= 0:
                _add_row_segments(sums, counts, r + k, w_in[r, k + reach], pad, c0, -1.0, total, n_valid)
        for j in range(c1 - c0):
            # n_valid holds exact small integers, so > 0.5 means at least one cell
            mean = total[j] / n_valid[j] if n_valid[j] > 0.5 else np.nan
            out[r, c0 + j] = np.float64(dem[r, c0 + j]) - mean


_TPI_STRIPE_COLS = 512  # with a 50-cell reach the ring's stripe of prefix sums fits in L2


@pjit
def _tpi_kernel(dem, w_out, w_in, sums, counts, out):
    """TPI into ``out`` on the ring given by per-row half-width tables.

    ``w_out``, ``w_in`` come from :func:`_ring_tables`; ``sums`` and ``counts`` are
    scratch arrays of shape (n_rows, n_cols + 1 + 2 pad), pad > the widest half-width.
    Mean over the valid cells of the ring, NaN if the centre is NaN or no ring cell
    is valid. Cost per cell is O(number of ring rows): each ring row adds a
    difference of two row prefix sums. The sums are of raw elevations, so a cell's
    result does not depend on which rows a window holds (a row of 20 000 cells at
    4000 m sums to 8e7, where float64 rounding is 1e-8 m). Parallel over column
    stripes.
    """
    n_rows, n_cols = dem.shape
    pad = (sums.shape[1] - n_cols - 1) // 2
    for r in prange(n_rows):
        _row_prefix_sums(dem, pad, r, sums, counts)
    n_stripes = (n_cols + _TPI_STRIPE_COLS - 1) // _TPI_STRIPE_COLS
    for s in prange(n_stripes):
        c0 = np.int64(s) * _TPI_STRIPE_COLS
        _tpi_stripe(dem, sums, counts, w_out, w_in, pad, c0, min(c0 + _TPI_STRIPE_COLS, n_cols), out)


@ngjit
def _row_moments_kernel(a, sums, squares, counts, lows, highs):
    """Per row of ``a``: sum, sum of squares, number, min and max of the valid cells.

    Sums run left to right in float64 within each row, so a strip of whole rows
    gives the same numbers whatever window it came in. Rows without a valid cell
    get count 0, sums 0 and min/max NaN. One pass and no temporaries: the NumPy
    version allocated four grid-sized arrays per call, which cost more than the
    terrain kernels themselves on large windows. Serial: at about 1 ns per cell a
    parallel loop would cost more in thread wake-ups than it saves.
    """
    for r in range(a.shape[0]):
        s = 0.0
        q = 0.0
        n = 0
        lo = np.inf
        hi = -np.inf
        for c in range(a.shape[1]):
            v = np.float64(a[r, c])
            if not np.isnan(v):
                s += v
                q += v * v
                n += 1
                lo = min(lo, v)
                hi = max(hi, v)
        sums[r] = s
        squares[r] = q
        counts[r] = n
        lows[r] = lo if n else np.nan
        highs[r] = hi if n else np.nan
