"""Hydrology and distance layers on whole grids: fill, D8, accumulation, streams, HAND.

All functions take and return plain NumPy arrays on one grid: row 0 is north,
columns run east, NaN is nodata in elevation inputs. Cell sizes are in metres,
either one float for square cells or ``(dx, dy)``. The kernels live in
:mod:`mlsites.terrain._hydro_kernels`.

Memory: the chain run by :func:`hydrology_layers` keeps one float32 copy of the
DEM, a uint8 scratch grid that becomes the D8 grid, and only the grids still
needed, in the order fill -> D8 -> accumulation -> streams -> HAND -> distance.
Peaks measured on 4000 x 4000 float32 DEMs are given in its Notes
(``tests/benchmarks/bench_hydrology.py``).
"""

import numbers

import numpy as np

from mlsites._validation import check_cell_pair, masked_as_nan
from mlsites.errors import GridMismatchError, InputError
from mlsites.terrain import _hydro_kernels as _k

__all__ = [
    "fill_depressions",
    "flow_direction",
    "flow_accumulation",
    "stream_cells",
    "distance_to_cells",
    "height_above_drainage",
    "hydrology_layers",
    "HYDROLOGY_LAYERS",
]

#: Names :func:`hydrology_layers` can return, in the order they are computed.
HYDROLOGY_LAYERS = ("filled", "direction", "accumulation", "streams", "hand", "stream_distance")
_NEEDS = {
    "filled": set(),
    "direction": {"filled"},
    "accumulation": {"direction"},
    "streams": {"accumulation"},
    "hand": {"filled", "direction", "streams"},
    "stream_distance": {"streams"},
}
_M2_PER_KM2 = 1e6
# Relative slack on the stream threshold, so a threshold given as an exact multiple
# of the cell area is met despite rounding of km2 -> m2 -> cells.
_THRESHOLD_SLACK = 1e-9
_MAX_CELLS = 2**31 - 1  # the flood queues store flat cell indices as int32


# ------------------------------------------------------------------ checks ------
def _check_cellsize(cellsize):
    return check_cell_pair(cellsize, hint="hydrology and distance layers need a projected grid "
                           "with constant cell size, so reproject a geographic DEM first")


def _check_grid(array, name):
    """Return ``array`` as a non-empty 2-D ndarray (no copy; masked cells become NaN)."""
    a = np.asarray(masked_as_nan(array))
    if a.ndim != 2 or a.size == 0:
        raise InputError(f"{name} has shape {a.shape}; a non-empty 2-D grid (rows, cols) is needed")
    if a.size > _MAX_CELLS:
        raise InputError(f"{name} has {a.size} cells; at most {_MAX_CELLS} are supported, process tiles")
    return a


def _check_elevation(dem, name):
    a = _check_grid(dem, name)
    if a.dtype.kind not in "fiu":
        raise InputError(f"{name} has dtype {a.dtype}; a numeric elevation grid is needed")
    return a


def _check_same_shape(**grids):
    shapes = {name: g.shape for name, g in grids.items()}
    if len(set(shapes.values())) > 1:
        raise GridMismatchError(
            f"grids differ in shape: {shapes}; pass grids derived from the same DEM"
        )


def _float_grid(a):
    """float32/float64 grids as they are (C order), anything else as float64."""
    if a.dtype not in (np.float32, np.float64):
        a = a.astype(np.float64)
    return np.ascontiguousarray(a)


# ------------------------------------------------------------------ filling -----
def _fill(dem, epsilon):
    """Run the priority-flood; return (filled float32, uint8 scratch, queue peaks)."""
    a = _check_elevation(dem, "DEM")
    filled = np.array(a, dtype=np.float32, order="C", copy=True)
    scratch = np.empty(filled.shape, dtype=np.uint8)
    n_valid, n_inf, max_heap, max_pit = _k._priority_flood_kernel(
        filled.reshape(-1).view(np.uint32), scratch.reshape(-1), *filled.shape, bool(epsilon)
    )
    if n_inf:
        raise InputError(
            f"DEM has {n_inf} infinite cell(s) (after casting to float32); "
            "expected finite elevations with NaN as nodata; set them to NaN"
        )
    if n_valid == 0:
        raise InputError("DEM has no valid cell (all NaN); expected some elevations")
    return filled, scratch, (max_heap, max_pit)


def fill_depressions(dem, *, epsilon=True):
    """Fill depressions with the Priority-Flood algorithm.

    Parameters
    ----------
    dem : array_like of shape (rows, cols)
        Elevations in metres, NaN = nodata. Cast to float32.
    epsilon : bool, default True
        If True, every raised cell is set to the next float32 above the cell it
        was reached from, so filled flats keep a tiny gradient towards their
        outlet and D8 is defined everywhere (Priority-Flood+epsilon). If False,
        depressions become exactly flat.

    Returns
    -------
    filled : ndarray of float32, shape (rows, cols)
        Filled elevations in metres, never below ``dem``; NaN where ``dem`` is
        NaN. The input is not modified.

    Raises
    ------
    InputError
        If the grid is not 2-D numeric, holds +-inf, or has no valid cell.

    Notes
    -----
    Seeds are the edge cells of the grid and every valid cell with a NaN
    8-neighbour; they keep their elevation. Cells are taken from a binary min-heap
    keyed by elevation, ties broken by insertion order (so results are
    deterministic); cells raised on the way go to a FIFO "pit" queue that is
    emptied first (the improved variant, same output as the plain one). Without
    epsilon the result is the minimal fill in which every cell has a
    non-ascending path to a seed; with epsilon the path is strictly descending.
    The epsilon increments add up over very wide flats (one float32 step per
    cell, about 6e-5 m per cell at 1000 m elevation). The heap and pit queue
    start small and double when full; they hold the flood front only, a few
    per cent of the cells on real terrain (4 + 8 bytes per queued cell), but a
    pathological surface can queue most cells.

    References
    ----------
    Barnes, R., Lehman, C., Mulla, D. (2014). Priority-flood: An optimal
    depression-filling and watershed-labeling algorithm for digital elevation
    models. Computers & Geosciences 62:117-127. doi:10.1016/j.cageo.2013.04.024

    Examples
    --------
    >>> import numpy as np
    >>> dem = np.array([[5, 5, 5], [5, 1, 5], [5, 5, 4]], dtype=np.float32)
    >>> fill_depressions(dem, epsilon=False)[1, 1]
    np.float32(4.0)
    """
    return _fill(dem, epsilon)[0]


# ---------------------------------------------------------------------- D8 ------
def _direction_into(filled, dx, dy, out):
    _k._flow_direction_kernel(filled, dx, dy, out)
    return out


def flow_direction(filled, cellsize):
    """D8 flow direction: the neighbour with the steepest downhill drop.

    Parameters
    ----------
    filled : array_like of shape (rows, cols)
        Depression-filled elevations in metres (see :func:`fill_depressions`),
        NaN = nodata. float32 and float64 are used as given.
    cellsize : float or (float, float)
        Cell size in metres, or ``(dx, dy)`` for rectangular cells.

    Returns
    -------
    direction : ndarray of uint8, shape (rows, cols)
        1 = E, 2 = SE, 4 = S, 8 = SW, 16 = W, 32 = NW, 64 = N, 128 = NE;
        0 = no lower neighbour (an outlet, or a flat when the DEM was filled
        without epsilon); 255 = nodata.

    Notes
    -----
    The drop to a neighbour is ``(z_c - z_n) / d_n`` with ``d_n = dx`` (E, W),
    ``dy`` (N, S) or ``hypot(dx, dy)`` (diagonals); only drops > 0 count, ties
    go to the first direction in the order E, SE, S, SW, W, NW, N, NE
    (METHODS.md section 4). Neighbours outside the grid or NaN are ignored, so
    flow never leaves the grid: edge cells without a lower neighbour are
    outlets.

    References
    ----------
    O'Callaghan, J. F., Mark, D. M. (1984). The extraction of drainage networks
    from digital elevation data. Computer Vision, Graphics, and Image Processing
    28:323-344. doi:10.1016/S0734-189X(84)80011-0
    """
    z = _float_grid(_check_elevation(filled, "filled DEM"))
    dx, dy = _check_cellsize(cellsize)
    return _direction_into(z, dx, dy, np.empty(z.shape, dtype=np.uint8))


# ---------------------------------------------------------- accumulation ------
def flow_accumulation(direction):
    """Number of cells draining through each cell along D8, the cell included.

    Parameters
    ----------
    direction : array_like of uint8, shape (rows, cols)
        D8 codes as returned by :func:`flow_direction` (255 = nodata).

    Returns
    -------
    accumulation : ndarray of uint32, shape (rows, cols)
        Cell counts >= 1 on valid cells; 0 on nodata (exact up to 2**32 - 1
        cells, which float32 would not be beyond 2**24). Multiply by the cell
        area for the contributing area; subtract 1 for "upstream cells only".

    Raises
    ------
    InputError
        If a code is not one of 0, 1, 2, 4, ..., 128, 255, or the directions
        form a cycle (possible only in grids not made by :func:`flow_direction`).

    Notes
    -----
    Computed in topological order (Kahn's algorithm): in-degrees are counted,
    then every source starts a walk downstream that stops at a cell still
    waiting for other inflows. No recursion, O(n). A direction that points off
    the grid or into a nodata cell ends the path there. Over all outlets the
    accumulations sum to the number of valid cells.
    """
    d = np.ascontiguousarray(_check_grid(direction, "flow direction grid"))
    if d.dtype != np.uint8:
        if d.dtype.kind not in "iu" or d.min() < 0 or d.max() > 255:
            raise InputError(
                f"flow direction grid has dtype {d.dtype} and values outside 0..255; "
                "expected uint8 D8 codes (1, 2, 4, ..., 128; 0 outlet; 255 nodata)"
            )
        d = d.astype(np.uint8)
    indeg = np.empty(d.shape, dtype=np.uint8)
    n_bad, n_valid = _k._indegree_kernel(d, indeg)
    if n_bad:
        raise InputError(
            f"flow direction grid has {n_bad} cell(s) with codes other than "
            "0, 1, 2, 4, 8, 16, 32, 64, 128 or 255 (nodata); pass a grid from flow_direction"
        )
    acc = np.zeros(d.shape, dtype=np.uint32)
    n_done = _k._accumulate_kernel(d.reshape(-1), indeg.reshape(-1), acc.reshape(-1), *d.shape)
    if n_done != n_valid:
        raise InputError(
            f"flow direction grid has {n_valid - n_done} cell(s) on cycles; "
            "D8 directions must always lead downhill; derive them with flow_direction"
        )
    return acc


# ------------------------------------------------------------------- streams ----
def stream_cells(accumulation, *, threshold_km2, cell_area_m2):
    """Cells whose contributing area reaches a threshold.

    Parameters
    ----------
    accumulation : array_like of shape (rows, cols)
        Cell counts from :func:`flow_accumulation` (uint32, 0 = nodata); float
        grids with NaN as nodata are accepted too.
    threshold_km2 : float
        Contributing area (the cell included) in km2 at which a cell becomes a
        stream.
    cell_area_m2 : float
        Area of one cell in m2 (``dx * dy``).

    Returns
    -------
    streams : ndarray of uint8, shape (rows, cols)
        1 = stream, 0 = not, 255 = nodata.

    Notes
    -----
    A cell is a stream when ``accumulation * cell_area_m2 >= threshold_km2 *
    1e6``, compared with a relative slack of 1e-9 so that a threshold given as
    an exact multiple of the cell area is met (METHODS.md section 4).
    """
    for name, value in (("threshold_km2", threshold_km2), ("cell_area_m2", cell_area_m2)):
        if not isinstance(value, numbers.Real) or not np.isfinite(value) or value <= 0:
            raise InputError(f"{name}={value!r} must be a positive finite number")
    acc = _check_grid(accumulation, "flow accumulation grid")
    if acc.dtype.kind == "f":
        acc = np.where(np.isnan(acc), 0, acc).astype(np.uint32)
    elif acc.dtype != np.uint32:
        if acc.dtype.kind not in "iu" or acc.min() < 0:
            raise InputError(
                f"flow accumulation grid has dtype {acc.dtype} (min {acc.min()}); "
                "expected non-negative cell counts, as from flow_accumulation"
            )
        acc = acc.astype(np.uint32)
    min_cells = threshold_km2 * _M2_PER_KM2 / cell_area_m2 * (1.0 - _THRESHOLD_SLACK)
    out = np.empty(acc.shape, dtype=np.uint8)
    _k._stream_cells_kernel(np.ascontiguousarray(acc), float(min_cells), out)
    return out


# ---------------------------------------------------------------------- HAND ----
def height_above_drainage(filled, direction, streams):
    """Height above the nearest drainage (HAND) along the D8 flow path.

    Parameters
    ----------
    filled : array_like of shape (rows, cols)
        The depression-filled elevations (m) that ``direction`` was derived from.
    direction : array_like of uint8, shape (rows, cols)
        D8 codes from :func:`flow_direction`.
    streams : array_like of uint8, shape (rows, cols)
        1 = stream cell (from :func:`stream_cells`).

    Returns
    -------
    hand : ndarray of float32, shape (rows, cols)
        ``z(cell) - z(s)`` in metres, where ``s`` is the first stream cell met
        following D8 from the cell; 0 on stream cells. Where the path ends
        before reaching a stream, ``s`` is the path's last cell (see Notes).
        NaN only on nodata: every cell with an elevation gets a value.

    Notes
    -----
    Edge rule: a path that reaches no stream ends at an outlet, the cell
    where the water leaves the grid (an edge cell, or a cell next to nodata,
    with no lower neighbour; on a DEM filled without epsilon also a flat).
    That outlet counts as the drainage, so such cells get their height above
    the point where their water leaves the study area, and the outlet itself
    gets 0. The true drainage lies beyond the grid and is at most that high,
    so near the edges HAND is a lower bound; clip the DEM with a margin of a
    few hundred metres around the study area to keep edge effects out of it.
    Without this rule, hillslopes draining off the grid would have no value
    and a map would be blank there.

    Because both elevations come from the same filled DEM and D8 only goes
    downhill, HAND >= 0. Every cell is resolved once: the elevation of its
    drainage cell is memoised, so later paths stop at the first resolved cell
    (O(n) overall).

    References
    ----------
    Renno, C. D., Nobre, A. D., Cuartas, L. A., Soares, J. V., Hodnett, M. G.,
    Tomasella, J., Waterloo, M. J. (2008). HAND, a new terrain descriptor using
    SRTM-DEM. Remote Sensing of Environment 112:3469-3481.
    doi:10.1016/j.rse.2008.03.018
    """
    z = _float_grid(_check_elevation(filled, "filled DEM"))
    d = np.ascontiguousarray(_check_grid(direction, "flow direction grid"), dtype=np.uint8)
    s = np.ascontiguousarray(_check_grid(streams, "stream grid"), dtype=np.uint8)
    _check_same_shape(filled=z, direction=d, streams=s)
    out = np.empty(z.shape, dtype=np.float32)
    _k._hand_kernel(z.reshape(-1), d.reshape(-1), s.reshape(-1), out.reshape(-1), *z.shape)
    return out


# ------------------------------------------------------------------ distance ----
def distance_to_cells(mask, cellsize):
    """Exact Euclidean distance from every cell centre to the nearest True cell.

    Parameters
    ----------
    mask : array_like of bool, shape (rows, cols)
        Target cells (e.g. streams or rasterised features).
    cellsize : float or (float, float)
        Cell size in metres, or ``(dx, dy)`` for rectangular cells.

    Returns
    -------
    distance : ndarray of float32, shape (rows, cols)
        Distance in metres between cell centres; 0 on True cells. If ``mask``
        has no True cell at all, every cell is ``inf``; callers that need a
        layer should check ``mask.any()`` first and raise.

    Notes
    -----
    Separable exact transform: a column pass gives the distance (in cells) to
    the nearest target of the same column, then every row takes the lower
    envelope of parabolas ``(x - x_p)**2 + f(p)`` (Felzenszwalb & Huttenlocher
    2012), in float64 per row. Rows and column strips run in parallel. Equals
    ``scipy.ndimage.distance_transform_edt(~mask, sampling=(dy, dx))`` up to
    float32 rounding. The whole grid is used; nodata is not an obstacle.

    References
    ----------
    Felzenszwalb, P. F., Huttenlocher, D. P. (2012). Distance transforms of
    sampled functions. Theory of Computing 8:415-428.
    doi:10.4086/toc.2012.v008a019

    Examples
    --------
    >>> import numpy as np
    >>> m = np.zeros((1, 4), dtype=bool); m[0, 0] = True
    >>> distance_to_cells(m, 10.0).tolist()
    [[0.0, 10.0, 20.0, 30.0]]
    """
    m = _check_grid(mask, "target mask")
    if m.dtype != np.bool_:
        m = m.astype(bool)
    # A bool grid viewed as uint8 (True = 1) shares the kernel compiled for stream grids.
    return _distance_to_value(np.ascontiguousarray(m).view(np.uint8), np.uint8(1), *_check_cellsize(cellsize))


def _distance_to_value(grid, target, dx, dy):
    """Distance transform to the cells where ``grid == target``."""
    out = np.empty(grid.shape, dtype=np.float32)
    _k._column_pass_kernel(grid, target, out)
    _k._row_pass_kernel(out, dx, dy)
    return out


# ----------------------------------------------------------------- the chain ----
def hydrology_layers(dem, cellsize, *, stream_threshold_km2, epsilon=True, wanted=None, on_layer=None):
    """Run fill -> D8 -> accumulation -> streams -> HAND -> stream distance.

    Parameters
    ----------
    dem : array_like of shape (rows, cols)
        Elevations in metres, NaN = nodata. Not modified.
    cellsize : float or (float, float)
        Cell size in metres, or ``(dx, dy)``.
    stream_threshold_km2 : float
        Contributing area in km2 at which a cell becomes a stream.
    epsilon : bool, default True
        Fill with the epsilon variant (see :func:`fill_depressions`).
    wanted : set of str, optional
        Layers to return, any of ``HYDROLOGY_LAYERS``: 'filled', 'direction',
        'accumulation', 'streams', 'hand', 'stream_distance'. Default: all.
        Intermediates not wanted are freed as soon as no later step needs them.
    on_layer : callable, optional
        Called as ``on_layer(name, array)`` for each wanted layer as soon as it
        is final (in ``HYDROLOGY_LAYERS`` order); the layer is then left out of
        the returned dict and dropped once no later step needs it, so a caller
        that writes and forgets each layer keeps the memory peak low. The
        array must not be modified.

    Returns
    -------
    layers : dict of str to ndarray
        The wanted layers not passed to ``on_layer``: 'filled' float32,
        'direction' uint8 (255 nodata), 'accumulation' uint32 (0 nodata),
        'streams' uint8 (255 nodata), 'hand' float32 and 'stream_distance'
        float32 in metres (NaN on nodata).

    Raises
    ------
    InputError
        For bad inputs (see the step functions), an unknown layer name, or no
        stream cell at the threshold when 'hand' or 'stream_distance' is wanted.

    Notes
    -----
    Peak memory above the input, per cell, measured on 4000 x 4000 float32 DEMs
    (``tests/benchmarks/bench_hydrology.py``): the filled DEM (4 bytes) lives
    until HAND is done, D8 reuses the flood's uint8 scratch grid, accumulation
    adds 4 + 1 (uint8 in-degrees), HAND and the distance 4 each. All six layers
    returned: 18 bytes; all but 'filled': 14; 'hand' and 'stream_distance': 10;
    any set with ``on_layer`` writing each layer away: 10. The flood queues add
    0.4-1.5 bytes on real terrain (see :func:`fill_depressions`), below the
    later peaks.
    """
    wanted = set(HYDROLOGY_LAYERS) if wanted is None else set(wanted)
    unknown = wanted - set(HYDROLOGY_LAYERS)
    if unknown:
        raise InputError(
            f"unknown hydrology layer(s) {sorted(unknown)}; choose from {list(HYDROLOGY_LAYERS)}"
        )
    dx, dy = _check_cellsize(cellsize)
    needed = set(wanted)
    for name in reversed(HYDROLOGY_LAYERS):
        if name in needed:
            needed |= _NEEDS[name]
    if "streams" in needed and (
        not isinstance(stream_threshold_km2, numbers.Real) or not stream_threshold_km2 > 0
    ):
        raise InputError(f"stream_threshold_km2={stream_threshold_km2!r} must be a positive number")
    grids, kept = {}, set(wanted) if on_layer is None else set()

    def finish(done):
        # Hand over a finished layer, then drop every grid no later step needs.
        if done in wanted and on_layer is not None:
            on_layer(done, grids[done])
        later = HYDROLOGY_LAYERS[HYDROLOGY_LAYERS.index(done) + 1:]
        still = set().union(*(_NEEDS[n] for n in later if n in needed))
        for name in list(grids):
            if name not in kept and name not in still:
                del grids[name]

    if not needed:
        return {}
    grids["filled"], scratch, _ = _fill(dem, epsilon)
    # Drop this frame's reference: a caller that passed a temporary frees the DEM here.
    del dem
    finish("filled")
    if "direction" in needed:
        grids["direction"] = _direction_into(grids["filled"], dx, dy, scratch)
        finish("direction")
    del scratch
    if "accumulation" in needed:
        grids["accumulation"] = flow_accumulation(grids["direction"])
        finish("accumulation")
    if "streams" in needed:
        grids["streams"] = stream_cells(
            grids["accumulation"], threshold_km2=stream_threshold_km2, cell_area_m2=dx * dy
        )
        finish("streams")
        uses = sorted({"hand", "stream_distance"} & wanted)
        if uses and not (grids["streams"] == 1).any():
            raise InputError(
                f"layer(s) {uses}: no stream cell at stream_threshold_km2={stream_threshold_km2} "
                f"(cell area {dx * dy:g} m2); lower the threshold"
            )
    if "hand" in wanted:
        grids["hand"] = height_above_drainage(grids["filled"], grids["direction"], grids["streams"])
        finish("hand")
    if "stream_distance" in wanted:
        dist = _distance_to_value(grids["streams"], np.uint8(1), dx, dy)
        _k._nan_where_kernel(dist, grids["streams"], np.uint8(_k.NODATA_CODE))
        grids["stream_distance"] = dist
        finish("stream_distance")
    return {name: grids[name] for name in HYDROLOGY_LAYERS if name in kept}
