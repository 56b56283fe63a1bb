"""Local terrain derivatives of a DEM array: slope, aspect, curvature, TPI, TRI, hillshade.

Every function takes a 2-D elevation array (NaN = nodata; row 0 is the north edge,
columns increase east) and returns float64 arrays of the same shape. The
arithmetic is done in float64 in the numba kernels of
:mod:`mlsites.terrain._kernels`. The Horn layers (slope, aspect, northness,
eastness) read C-contiguous float32 or float64 input without a copy; everything
else is converted to a C-contiguous float64 array first.

Cell sizes
----------
``cellsize`` is either one positive number (square cells, metres) or a pair
``(dx, dy)`` in metres, where each member is a number or a 1-D array with one value
per row. Per-row spacing is meant for geographic (degree) grids, whose east-west
spacing shrinks with latitude: compute ``dx[r] = N(phi_r) cos(phi_r) dlambda`` and
``dy[r] = M(phi_r) dphi`` from the latitude of each row centre (METHODS.md §1).
Never pass the same number for both axes of a degree grid.

Edge rule
---------
The 3x3 layers are strict: the output is NaN wherever any of the nine window cells
is NaN or lies outside the array, so the one-cell border is always NaN (as gdaldem
without ``-compute_edges``). :func:`tpi` averages the valid cells of its ring
instead; see its Notes. A windowed pipeline therefore needs a halo of 1 cell for
the 3x3 layers and ``ceil(radius / smallest cell size)`` cells for :func:`tpi`.
"""

import math
import numbers

import numpy as np

from mlsites._validation import masked_as_nan
from mlsites.errors import InputError, InsufficientDataError
from mlsites.terrain import _kernels

__all__ = [
    "aspect",
    "eastness",
    "hillshade",
    "northness",
    "plan_curvature",
    "profile_curvature",
    "roughness",
    "ruggedness",
    "ruggedness_mean_abs",
    "slope",
    "slope_aspect",
    "standardize",
    "standardize_with",
    "total_curvature",
    "tpi",
    "tpi3",
]

_SLOPE_UNITS = ("degrees", "percent")
_PROFILE, _PLAN, _TOTAL = 0, 1, 2
_TPI3, _TRI_RILEY, _TRI_MEAN_ABS, _ROUGHNESS = 0, 1, 2, 3
_RADIUS_SLACK = _kernels._RADIUS_SLACK
_NO_ARRAY = np.empty((0, 0))


def _check_dem(dem, *, keep_float32=False):
    """Return ``dem`` as a 2-D C-contiguous float64 array (no copy if it is one).

    With ``keep_float32`` a float32 array is passed through as well (Horn layers,
    the speed path); the other kernels are compiled for float64 only, which halves
    their compile time at the cost of a copy.
    """
    arr = np.asarray(masked_as_nan(dem))
    if arr.ndim != 2:
        raise InputError(
            f"dem has {arr.ndim} dimension(s) with shape {arr.shape}; a 2-D elevation "
            f"array (rows, columns) is expected. Pass a single band."
        )
    if arr.size == 0:
        raise InputError(f"dem has shape {arr.shape} with no cells; pass a non-empty array.")
    if arr.dtype.kind not in "biuf":
        raise InputError(
            f"dem has dtype {arr.dtype}; a real-valued array (float32 or float64 preferred) "
            f"is expected. Convert it with dem.astype('float64')."
        )
    if arr.dtype == np.float32 and keep_float32:
        return np.ascontiguousarray(arr)
    # one dtype and layout keeps the compiled variants few; C-contiguous float64
    # input (and float32 raster reads on the Horn path) is used as it is
    return np.ascontiguousarray(arr, dtype=np.float64)


def _spacing(value, n_rows, name):
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        arr = np.full(n_rows, float(value))
    elif isinstance(value, np.ndarray) and value.ndim == 0 and value.dtype.kind in "iuf":
        arr = np.full(n_rows, float(value))
    else:
        try:
            arr = np.asarray(value, dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError(
                f"cell size {name} is {value!r}; a number or a 1-D array of {n_rows} per-row "
                f"values in metres is expected."
            ) from None
        if arr.shape != (n_rows,):
            raise InputError(
                f"cell size {name} has shape {arr.shape}; a number or a 1-D array with one "
                f"value per row ({n_rows},) is expected."
            )
    bad = ~(np.isfinite(arr) & (arr > 0))
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"cell size {name} is {float(arr[row])!r} at row {row} ({int(bad.sum())} bad row(s)); "
            f"cell sizes must be finite and positive, in metres."
        )
    return arr


def _cell_arrays(cellsize, nrows):
    """Expand ``cellsize`` to per-row spacing arrays ``(dx_rows, dy_rows)`` in metres.

    Parameters
    ----------
    cellsize : float or tuple (dx, dy)
        One number for square cells, or a pair whose members are numbers or 1-D
        arrays of length ``nrows``.
    nrows : int
        Number of rows of the DEM.

    Returns
    -------
    dx_rows, dy_rows : ndarray of float64, shape (nrows,)

    Raises
    ------
    InputError
        If a size is not positive and finite, or an array has the wrong length.
    """
    if isinstance(cellsize, (tuple, list)):
        if len(cellsize) != 2:
            raise InputError(
                f"cellsize has {len(cellsize)} members; a number or a pair (dx, dy) in metres "
                f"is expected."
            )
        return _spacing(cellsize[0], nrows, "dx"), _spacing(cellsize[1], nrows, "dy")
    if isinstance(cellsize, np.ndarray) and cellsize.ndim > 0:
        raise InputError(
            f"cellsize is an array of shape {cellsize.shape}; pass a number, or a tuple "
            f"(dx, dy) whose members may be per-row arrays."
        )
    size = _spacing(cellsize, nrows, "cellsize")
    return size, size.copy()


def _check_flat_tolerance(flat_tolerance):
    if not (isinstance(flat_tolerance, numbers.Real) and math.isfinite(flat_tolerance)
            and flat_tolerance >= 0):
        raise InputError(
            f"flat_tolerance is {flat_tolerance!r}; a finite number >= 0 (gradient "
            f"magnitude, m/m) is expected."
        )
    return float(flat_tolerance)


def _prepare(dem, cellsize, *, keep_float32=False):
    arr = _check_dem(dem, keep_float32=keep_float32)
    dx, dy = _cell_arrays(cellsize, arr.shape[0])
    return arr, dx, dy


def _horn(arr, dx, dy, flat_tol, mode):
    out = np.empty(arr.shape)
    _kernels._horn_kernel(arr, dx, dy, flat_tol, mode, out, _NO_ARRAY)
    return out


def slope(dem, cellsize, *, units="degrees"):
    """Slope gradient by Horn's (1981) 3x3 method.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres: one number for square cells, or ``(dx, dy)`` whose
        members are numbers or 1-D per-row arrays of length ``n_rows``.
    units : {"degrees", "percent"}, default "degrees"
        ``"degrees"``: atan(|grad z|) in degrees; ``"percent"``: 100 |grad z|.

    Returns
    -------
    ndarray of float64, shape (n_rows, n_cols)

    Raises
    ------
    InputError
        Bad array, cell size or ``units``.

    Notes
    -----
    p = [(c + 2f + i) - (a + 2d + g)] / (8 dx), q = [(a + 2b + c) - (g + 2h + i)] /
    (8 dy) with the window labelled ``a b c / d e f / g h i`` from the north-west.
    With per-row spacing each row's east-west difference uses that row's dx, and
    dy is the distance between the centres of the north and south rows divided by
    two. Neighbourhood 3x3 (halo 1 cell). Edge rule: NaN where any of the nine
    cells is NaN or outside the array (the centre is not used by Horn's formula
    but a NaN centre still gives NaN).

    References
    ----------
    Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the
    IEEE, 69(1), 14-47. https://doi.org/10.1109/PROC.1981.11918

    Examples
    --------
    >>> import numpy as np
    >>> from mlsites.terrain import slope
    >>> dem = np.array([[2.0, 1, 0], [2, 1, 0], [2, 1, 0]])
    >>> float(slope(dem, 1.0)[1, 1])
    45.0
    """
    if units not in _SLOPE_UNITS:
        raise InputError(f"units is {units!r}; expected one of {', '.join(map(repr, _SLOPE_UNITS))}.")
    arr, dx, dy = _prepare(dem, cellsize, keep_float32=True)
    mode = _kernels._HORN_SLOPE_PERCENT if units == "percent" else _kernels._HORN_SLOPE
    return _horn(arr, dx, dy, 0.0, mode)


def aspect(dem, cellsize, *, flat_tolerance=1e-12):
    """Aspect (downslope azimuth) by Horn's (1981) method, degrees clockwise from north.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).
    flat_tolerance : float, default 1e-12
        Cells with |grad z| <= this (m/m) are flat and get NaN.

    Returns
    -------
    ndarray of float64, shape (n_rows, n_cols)
        Azimuth in [0, 360): 0 = facing north, 90 = east; NaN on flat cells.

    Notes
    -----
    A = atan2(-p, -q) in degrees, wrapped to [0, 360), with p, q as in
    :func:`slope`. Flat cells are tested explicitly because atan2(-0.0, -0.0) would
    call them south-facing (METHODS.md §1). Neighbourhood 3x3 (halo 1 cell); strict
    edge rule as in :func:`slope`.

    References
    ----------
    Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the
    IEEE, 69(1), 14-47. https://doi.org/10.1109/PROC.1981.11918

    Examples
    --------
    >>> import numpy as np
    >>> from mlsites.terrain import aspect
    >>> dem = np.array([[2.0, 1, 0], [2, 1, 0], [2, 1, 0]])
    >>> float(aspect(dem, 1.0)[1, 1])
    90.0
    """
    arr, dx, dy = _prepare(dem, cellsize, keep_float32=True)
    tol = _check_flat_tolerance(flat_tolerance)
    return _horn(arr, dx, dy, tol, _kernels._HORN_ASPECT)


def slope_aspect(dem, cellsize, *, flat_tolerance=1e-12, out=None):
    """Horn slope and aspect from one pass over the DEM.

    Same results as ``(slope(dem, cellsize), aspect(dem, cellsize))`` at about the
    cost of one of them; this is the fast path for large rasters (parallel over
    rows, float32 input read without a copy).

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).
    flat_tolerance : float, default 1e-12
        Cells with |grad z| <= this (m/m) get NaN aspect.
    out : tuple of two ndarrays, optional
        Preallocated float64 C-contiguous arrays of the DEM's shape that receive
        slope and aspect (returned as given). Reusing them across windows avoids
        the cost of touching fresh memory, which on large windows exceeds the
        computation itself.

    Returns
    -------
    slope_deg : ndarray of float64
        Slope in degrees.
    aspect_deg : ndarray of float64
        Aspect in degrees clockwise from north in [0, 360), NaN on flat cells.

    Raises
    ------
    InputError
        Bad array, cell size, tolerance or ``out``.

    Notes
    -----
    Formulas, neighbourhood (3x3, halo 1) and edge rule as in :func:`slope` and
    :func:`aspect`.

    References
    ----------
    Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the
    IEEE, 69(1), 14-47. https://doi.org/10.1109/PROC.1981.11918
    """
    arr, dx, dy = _prepare(dem, cellsize, keep_float32=True)
    tol = _check_flat_tolerance(flat_tolerance)
    if out is None:
        out = (np.empty(arr.shape), np.empty(arr.shape))
    else:
        _check_out(out, arr)
    _kernels._horn_kernel(arr, dx, dy, tol, _kernels._HORN_SLOPE_ASPECT, out[0], out[1])
    return out[0], out[1]


def _check_out(out, dem):
    ok = isinstance(out, (tuple, list)) and len(out) == 2
    for i, arr in enumerate(out if ok else ()):
        if not (isinstance(arr, np.ndarray) and arr.dtype == np.float64
                and arr.shape == dem.shape and arr.flags.c_contiguous and arr.flags.writeable):
            ok = False
        elif np.may_share_memory(arr, dem) or (i == 1 and np.may_share_memory(arr, out[0])):
            ok = False
    if not ok:
        raise InputError(
            f"out must be a pair of distinct writeable C-contiguous float64 arrays of shape "
            f"{dem.shape} not overlapping the DEM; got {type(out).__name__}. Create them with "
            f"np.empty(dem.shape) or pass out=None."
        )


def northness(dem, cellsize, *, flat_tolerance=1e-12):
    """Northness, the cosine of Horn aspect (1 = facing north, -1 = south).

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).
    flat_tolerance : float, default 1e-12
        Cells with |grad z| <= this (m/m) are flat and get 0.

    Returns
    -------
    ndarray of float64 in [-1, 1]

    Notes
    -----
    cos A = -q / |grad z| (no trigonometric call); flat cells 0, a common practice
    (METHODS.md §1) that keeps the layer continuous in value but not in meaning;
    multiply by ``sin(slope)`` for a slope-weighted variant. 3x3, halo 1, strict edge
    rule as in :func:`slope`.

    References
    ----------
    Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the
    IEEE, 69(1), 14-47. https://doi.org/10.1109/PROC.1981.11918
    """
    arr, dx, dy = _prepare(dem, cellsize, keep_float32=True)
    tol = _check_flat_tolerance(flat_tolerance)
    return _horn(arr, dx, dy, tol, _kernels._HORN_NORTHNESS)


def eastness(dem, cellsize, *, flat_tolerance=1e-12):
    """Eastness, the sine of Horn aspect (1 = facing east, -1 = west).

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).
    flat_tolerance : float, default 1e-12
        Cells with |grad z| <= this (m/m) are flat and get 0.

    Returns
    -------
    ndarray of float64 in [-1, 1]

    Notes
    -----
    sin A = -p / |grad z|; flat cells 0 (METHODS.md §1). 3x3, halo 1, strict edge
    rule as in :func:`slope`.

    References
    ----------
    Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the
    IEEE, 69(1), 14-47. https://doi.org/10.1109/PROC.1981.11918
    """
    arr, dx, dy = _prepare(dem, cellsize, keep_float32=True)
    tol = _check_flat_tolerance(flat_tolerance)
    return _horn(arr, dx, dy, tol, _kernels._HORN_EASTNESS)


def _curvature(dem, cellsize, flat_tolerance, mode):
    arr, dx, dy = _prepare(dem, cellsize)
    tol = _check_flat_tolerance(flat_tolerance)
    out = np.empty(arr.shape)
    _kernels._curvature_kernel(arr, dx, dy, tol, mode, out)
    return out


def profile_curvature(dem, cellsize, *, flat_tolerance=1e-12):
    """Profile curvature (along the slope line) by Zevenbergen & Thorne (1987), 1/m.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).
    flat_tolerance : float, default 1e-12
        Cells with |(G, H)| <= this (m/m) are flat and get 0.

    Returns
    -------
    ndarray of float64
        Curvature in 1/m; positive = convex (a dome's flanks), negative = concave.

    Notes
    -----
    kappa_prof = -2 (D G^2 + E H^2 + F G H) / (G^2 + H^2) with the coefficients of
    the quadratic fitted to the 3x3 window (METHODS.md §2): D = z_xx/2, E = z_yy/2,
    F = z_xy, G = z_x, H = z_y (y north). The fit is exact for any quadratic surface.
    ZT's simplified form without the (1 + G^2 + H^2) terms. Flat cells get 0 (the
    direction is undefined; the value is bounded so no spike appears near flats).
    With per-row spacing, z_yy uses the three-point rule for unequal row gaps.
    3x3, halo 1, strict edge rule as in :func:`slope`.

    References
    ----------
    Zevenbergen, L. W., & Thorne, C. R. (1987). Quantitative analysis of land
    surface topography. Earth Surface Processes and Landforms, 12(1), 47-56.
    https://doi.org/10.1002/esp.3290120107
    """
    return _curvature(dem, cellsize, flat_tolerance, _PROFILE)


def plan_curvature(dem, cellsize, *, flat_tolerance=1e-12):
    """Plan curvature (along the contour) by Zevenbergen & Thorne (1987), 1/m.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).
    flat_tolerance : float, default 1e-12
        Cells with |(G, H)| <= this (m/m) are flat and get 0.

    Returns
    -------
    ndarray of float64
        Curvature in 1/m; positive = convex (contours bulge outward, flow diverges).

    Notes
    -----
    kappa_plan = -2 (D H^2 + E G^2 - F G H) / (G^2 + H^2), coefficients as in
    :func:`profile_curvature`; profile + plan = total exactly on non-flat cells.
    Flat cells get 0. 3x3, halo 1, strict edge rule as in :func:`slope`.

    References
    ----------
    Zevenbergen, L. W., & Thorne, C. R. (1987). Quantitative analysis of land
    surface topography. Earth Surface Processes and Landforms, 12(1), 47-56.
    https://doi.org/10.1002/esp.3290120107
    """
    return _curvature(dem, cellsize, flat_tolerance, _PLAN)


def total_curvature(dem, cellsize):
    """Total (Laplacian) curvature -2 (D + E) by Zevenbergen & Thorne (1987), 1/m.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).

    Returns
    -------
    ndarray of float64
        -(z_xx + z_yy) in 1/m; positive = convex. Defined on flat cells too.

    Notes
    -----
    Coefficients as in :func:`profile_curvature`. 3x3, halo 1, strict edge rule as
    in :func:`slope`.

    References
    ----------
    Zevenbergen, L. W., & Thorne, C. R. (1987). Quantitative analysis of land
    surface topography. Earth Surface Processes and Landforms, 12(1), 47-56.
    https://doi.org/10.1002/esp.3290120107
    """
    return _curvature(dem, cellsize, 0.0, _TOTAL)


def _window3(dem, mode):
    arr = _check_dem(dem)
    out = np.empty(arr.shape)
    _kernels._window3_kernel(arr, mode, out)
    return out


def tpi3(dem):
    """Topographic position index on a 3x3 window: z0 minus the mean of 8 neighbours.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation; NaN = nodata. Cell size does not matter.

    Returns
    -------
    ndarray of float64
        In elevation units; positive on crests.

    Notes
    -----
    As gdaldem TPI computes it. Neighbourhood 3x3 (halo 1); strict edge rule: NaN
    where any of the nine cells is NaN or outside the array. See :func:`tpi` for
    larger and annular neighbourhoods.

    References
    ----------
    Wilson, M. F. J., O'Connell, B., Brown, C., Guinan, J. C., & Grehan, A. J.
    (2007). Multiscale terrain analysis of multibeam bathymetry data for habitat
    mapping on the continental slope. Marine Geodesy, 30(1-2), 3-35.
    https://doi.org/10.1080/01490410701295962
    """
    return _window3(dem, _TPI3)


def ruggedness(dem):
    """Terrain ruggedness index of Riley et al. (1999): sqrt(sum_k (z_k - z_0)^2).

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation; NaN = nodata.

    Returns
    -------
    ndarray of float64
        In elevation units.

    Notes
    -----
    Sum over the 8 neighbours of the 3x3 window. The paper's worked example prints
    100 for a window whose correct value is 41.83 (METHODS.md §2). Matches gdaldem
    ``TRI -alg Riley``. Not to be confused with :func:`ruggedness_mean_abs`. 3x3,
    halo 1, strict edge rule as in :func:`tpi3`.

    References
    ----------
    Riley, S. J., DeGloria, S. D., & Elliot, R. (1999). A terrain ruggedness index
    that quantifies topographic heterogeneity. Intermountain Journal of Sciences,
    5(1-4), 23-27.
    """
    return _window3(dem, _TRI_RILEY)


def ruggedness_mean_abs(dem):
    """Terrain ruggedness as the mean absolute difference to the 8 neighbours.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation; NaN = nodata.

    Returns
    -------
    ndarray of float64
        mean_k |z_k - z_0| in elevation units.

    Notes
    -----
    Wilson et al. (2007)'s TRI; matches gdaldem ``TRI -alg Wilson``. 3x3, halo 1,
    strict edge rule as in :func:`tpi3`.

    References
    ----------
    Wilson, M. F. J., O'Connell, B., Brown, C., Guinan, J. C., & Grehan, A. J.
    (2007). Marine Geodesy, 30(1-2), 3-35. https://doi.org/10.1080/01490410701295962
    """
    return _window3(dem, _TRI_MEAN_ABS)


def roughness(dem):
    """Roughness: maximum minus minimum elevation of the 3x3 window (centre included).

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation; NaN = nodata.

    Returns
    -------
    ndarray of float64
        In elevation units, >= 0.

    Notes
    -----
    As in gdaldem roughness. 3x3, halo 1, strict edge rule as in :func:`tpi3`.

    References
    ----------
    Wilson, M. F. J., O'Connell, B., Brown, C., Guinan, J. C., & Grehan, A. J.
    (2007). Marine Geodesy, 30(1-2), 3-35. https://doi.org/10.1080/01490410701295962
    """
    return _window3(dem, _ROUGHNESS)


def tpi(dem, cellsize, *, radius, inner_radius=0.0):
    """Topographic position index on a disc or annulus: z0 minus the ring mean.

    Parameters
    ----------
    dem : array_like of shape (n_rows, n_cols)
        Elevation; NaN = nodata; row 0 north.
    cellsize : float or tuple (dx, dy)
        Cell size in metres (number, or pair of numbers / per-row arrays).
    radius : float
        Outer radius in metres; must reach at least the nearest neighbour in every
        row (radius >= min(dx, dy) of each row).
    inner_radius : float, default 0.0
        Inner radius in metres, 0 <= inner_radius <= radius.

    Returns
    -------
    ndarray of float64
        In elevation units; positive where the cell is higher than its surroundings.

    Raises
    ------
    InputError
        Bad array or cell size; radius below one cell; inner radius outside
        [0, radius]; a ring that contains no cell.

    Notes
    -----
    The ring holds the cells whose centre distance d to the centre cell satisfies
    inner_radius <= d <= radius; the centre itself is always excluded (Weiss 2001;
    METHODS.md §2). Distances use the centre row's dx and dy for the whole ring (on
    degree grids the spacing changes by a negligible fraction across a ring).
    Edge and nodata rule: the mean is over the valid cells of the ring; cells
    outside the array count as missing. Output is NaN where the centre is NaN or the
    ring has no valid cell. Because outside cells and NaN are treated alike, a
    window with a halo of ``ceil(radius / smallest cell size)`` cells gives exactly
    the whole-array result. Cost per cell is proportional to the number of ring rows
    (per-row prefix sums), not to the ring area.

    References
    ----------
    Weiss, A. (2001). Topographic position and landforms analysis. Poster.
    Guisan, A., Weiss, S. B., & Weiss, A. D. (1999). GLM versus CCA spatial
    modeling of plant species distribution. Plant Ecology, 143, 107-122.
    https://doi.org/10.1023/A:1009841519580

    Examples
    --------
    >>> import numpy as np
    >>> from mlsites.terrain import tpi
    >>> dem = np.zeros((5, 5)); dem[2, 2] = 8.0
    >>> float(tpi(dem, 1.0, radius=1.5)[2, 2])
    8.0
    """
    arr, dx, dy = _prepare(dem, cellsize)
    outer = _check_radius(radius, "radius")
    inner = _check_radius(inner_radius, "inner_radius")
    one_cell = float(np.minimum(dx, dy).max())
    if outer < one_cell * (1.0 - _RADIUS_SLACK):
        raise InputError(
            f"radius is {outer!r} m, smaller than one cell ({one_cell!r} m); the ring "
            f"would hold no cell. Use radius >= {one_cell!r} m."
        )
    if inner > outer:
        raise InputError(
            f"inner_radius is {inner!r} m, larger than radius {outer!r} m; expected "
            f"0 <= inner_radius <= radius."
        )
    max_reach = int(math.floor(outer / dy.min() * (1.0 + _RADIUS_SLACK)))
    w_out, w_in, n_cells = _kernels._ring_tables(dx, dy, outer, inner, max_reach)
    if (n_cells == 0).any():
        row = int(np.flatnonzero(n_cells == 0)[0])
        raise InputError(
            f"the ring {inner!r} m <= d <= {outer!r} m holds no cell centre at row {row} "
            f"(dx={float(dx[row])!r} m, dy={float(dy[row])!r} m); widen the ring."
        )
    pad = max(int(w_out.max()), 0) + 1  # prefix rows are padded to skip edge clamping
    sums = np.empty((arr.shape[0], arr.shape[1] + 1 + 2 * pad))
    counts = np.empty_like(sums)
    out = np.empty(arr.shape)
    _kernels._tpi_kernel(arr, w_out, w_in, sums, counts, out)
    return out


def _check_radius(value, name):
    if not (isinstance(value, numbers.Real) and not isinstance(value, bool)
            and math.isfinite(value) and value >= 0):
        raise InputError(f"{name} is {value!r}; a finite distance >= 0 in metres is expected.")
    return float(value)


def standardize(layer):
    """Standardise a layer by its own mean and population standard deviation.

    Parameters
    ----------
    layer : array_like
        Any numeric array; NaN cells are ignored and stay NaN.

    Returns
    -------
    ndarray of float64
        (layer - nanmean) / nanstd with the population sd (ddof=0).

    Raises
    ------
    InsufficientDataError
        If the layer has no valid cell.
    InputError
        If the valid cells are all equal (sd = 0).

    Notes
    -----
    Standardised TPI (Weiss 2001) uses this over the whole study area. For rasters
    processed window by window, accumulate the mean and sd over the study area first
    and call :func:`standardize_with` on each window.

    Examples
    --------
    >>> import numpy as np
    >>> from mlsites.terrain import standardize
    >>> standardize(np.array([1.0, 3.0, np.nan])).tolist()
    [-1.0, 1.0, nan]
    """
    arr = np.asarray(layer, dtype=np.float64)
    valid = arr[np.isfinite(arr)]
    if valid.size == 0:
        raise InsufficientDataError(
            f"the layer of shape {arr.shape} has no valid (finite) cell; nothing to standardise."
        )
    return standardize_with(arr, float(valid.mean()), float(valid.std()))


def standardize_with(layer, mean, sd):
    """Standardise a layer with a given mean and standard deviation.

    Parameters
    ----------
    layer : array_like
        Any numeric array; NaN stays NaN.
    mean : float
        Mean to subtract, in layer units (e.g. over the whole study area).
    sd : float
        Standard deviation to divide by, > 0.

    Returns
    -------
    ndarray of float64
        (layer - mean) / sd.

    Raises
    ------
    InputError
        If ``mean`` is not finite or ``sd`` is not finite and positive.
    """
    if not (isinstance(mean, numbers.Real) and math.isfinite(mean)):
        raise InputError(f"mean is {mean!r}; a finite number is expected.")
    if not (isinstance(sd, numbers.Real) and math.isfinite(sd) and sd > 0):
        raise InputError(
            f"sd is {sd!r}; a finite standard deviation > 0 is expected (a constant layer "
            f"cannot be standardised)."
        )
    return (np.asarray(layer, dtype=np.float64) - mean) / sd


def hillshade(dem, cellsize, *, azimuth=315.0, altitude=45.0) -> np.ndarray:
    """Shaded relief: the cosine of the angle between the sun and the surface normal.

    Parameters
    ----------
    dem : array_like of shape (rows, cols)
        Elevation in metres; NaN = nodata; row 0 north.
    cellsize : float or (float, float)
        Cell size in metres, as for :func:`mlsites.terrain.slope`.
    azimuth : float, default 315
        Sun direction, degrees clockwise from north (315 = north-west).
    altitude : float, default 45
        Sun height above the horizon, degrees.

    Returns
    -------
    ndarray of float64
        Illumination in [0, 1] (0 = in shade); NaN where Horn slope is NaN (a
        one-cell border and cells next to nodata).

    Notes
    -----
    ``cos(Z) cos(S) + sin(Z) sin(S) cos(A_sun - A)`` with zenith ``Z = 90 -
    altitude``, Horn slope ``S`` and aspect ``A`` (downslope azimuth) from
    :func:`mlsites.terrain.slope_aspect`, clipped below at 0 (the standard
    hill-shading formula, Burrough & McDonnell 1998 [memory]; gdaldem's default
    hillshade writes ``1 + 254`` times the same value).
    """
    if not (0 < altitude <= 90) or not math.isfinite(azimuth):
        raise InputError(f"sun azimuth {azimuth!r} / altitude {altitude!r}; expected altitude in (0, 90] degrees")
    sl, asp = slope_aspect(np.asarray(dem, dtype=np.float64), cellsize)
    zen, az = math.radians(90.0 - altitude), math.radians(azimuth)
    s = np.radians(sl)
    a = np.radians(np.where(np.isnan(asp), 0.0, asp))  # flat cells: sin(S) = 0, any aspect will do
    shade = math.cos(zen) * np.cos(s) + math.sin(zen) * np.sin(s) * np.cos(az - a)
    return np.clip(shade, 0.0, 1.0)
