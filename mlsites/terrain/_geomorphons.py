"""Geomorphon landform classes (Jasiewicz & Stepinski 2013).

Each cell is compared with the terrain along 8 lines of sight (E, NE, N, NW, W,
SW, S, SE). Every line gives one ternary element ('+' higher, '-' lower, '0'
level); the counts of '-' and '+' pick one of ten landform classes from a fixed
9 x 9 table. Formulas, conventions and check values: METHODS.md §3.
"""

import math
import numbers
from types import MappingProxyType

import numpy as np

from mlsites._numba import pjit, prange
from mlsites._validation import check_cell_pair, masked_as_nan
from mlsites.errors import InputError

__all__ = ["geomorphons", "LANDFORM_CLASSES"]

#: Landform code -> class name of Jasiewicz & Stepinski (2013). Code 0 is nodata.
#: The codes run from the lowest to the highest relative position (pit 1 ... peak
#: 10), so a larger code means a cell higher than its surroundings and the codes
#: can be read as ordinal; flat (5) and slope (6) sit in the middle.
LANDFORM_CLASSES = MappingProxyType(
    {
        1: "pit",
        2: "valley",
        3: "hollow",
        4: "footslope",
        5: "flat",
        6: "slope",
        7: "spur",
        8: "shoulder",
        9: "ridge",
        10: "peak",
    }
)

_ABBREVIATIONS = {
    "PT": 1, "VL": 2, "HL": 3, "FS": 4, "FL": 5,
    "SL": 6, "SP": 7, "SH": 8, "RI": 9, "PK": 10,
}  # fmt: skip

# Rows n_minus = 0..8, columns n_plus = 0..8 (METHODS.md §3, after
# Jasiewicz & Stepinski 2013, Fig. 4); cells with n_minus + n_plus > 8 cannot occur.
_LOOKUP_ROWS = (
    "FL FL FL FS FS VL VL VL PT",
    "FL FL FS FS FS VL VL VL",
    "FL SH SL SL HL HL VL",
    "SH SH SL SL SL HL",
    "SH SH SP SL SL",
    "RI RI SP SP",
    "RI RI RI",
    "RI RI",
    "PK",
)

# Directions in the order E, NE, N, NW, W, SW, S, SE. Row 0 is the north edge,
# so north is a step of -1 row.
_DIR_ROW = np.array([0, -1, -1, -1, 0, 1, 1, 1], dtype=np.int64)
_DIR_COL = np.array([1, 1, 0, -1, -1, -1, 0, 1], dtype=np.int64)


def _landform_lookup():
    """Build the table from ternary counts to landform code.

    Returns
    -------
    lut : ndarray of uint8, shape (9, 9)
        ``lut[n_minus, n_plus]`` is the landform code (see
        :data:`LANDFORM_CLASSES`) for a cell with ``n_minus`` lines of sight
        classed '-' and ``n_plus`` classed '+'. Impossible cells
        (``n_minus + n_plus > 8``) hold 0.

    References
    ----------
    Jasiewicz, J. & Stepinski, T. F. (2013). Geomorphons - a pattern recognition
    approach to classification and mapping of landforms. Geomorphology 182,
    147-156. https://doi.org/10.1016/j.geomorph.2012.11.005
    """
    lut = np.zeros((9, 9), dtype=np.uint8)
    for n_minus, row in enumerate(_LOOKUP_ROWS):
        for n_plus, abbreviation in enumerate(row.split()):
            lut[n_minus, n_plus] = _ABBREVIATIONS[abbreviation]
    return lut


_LOOKUP = _landform_lookup()


@pjit
def _geomorphons_kernel(dem, inv_dist, first_step, flatness_rad, lut):
    """Landform codes from a DEM; see :func:`geomorphons` for the rules.

    ``inv_dist[d, k]`` is 1 / ground distance of step k in direction d
    (k = 0 unused); the last step is ``inv_dist.shape[1] - 1``. Steps below
    ``first_step`` are not read. ``lut[n_minus, n_plus]`` gives the code.
    """
    n_rows, n_cols = dem.shape
    n_steps = inv_dist.shape[1] - 1
    out = np.zeros((n_rows, n_cols), dtype=np.uint8)
    for r in prange(n_rows):
        for c in range(n_cols):
            z0 = np.float64(dem[r, c])
            if np.isnan(z0):
                continue
            n_minus = 0
            n_plus = 0
            for d in range(8):
                dr = _DIR_ROW[d]
                dc = _DIR_COL[d]
                last = n_steps
                if dr < 0:
                    last = min(last, r)
                elif dr > 0:
                    last = min(last, n_rows - 1 - r)
                if dc < 0:
                    last = min(last, c)
                elif dc > 0:
                    last = min(last, n_cols - 1 - c)
                # Track the extreme gradients: atan is monotone, so the extreme
                # elevation angles follow from two atan calls per line.
                hi = -np.inf
                lo = np.inf
                for k in range(first_step, last + 1):
                    z = np.float64(dem[r + dr * k, c + dc * k])
                    if np.isnan(z):
                        break
                    g = (z - z0) * inv_dist[d, k]
                    hi = max(hi, g)
                    lo = min(lo, g)
                if hi == -np.inf:
                    continue
                # nadir - zenith = max beta + min beta
                diff = math.atan(hi) + math.atan(lo)
                if diff > flatness_rad:
                    n_plus += 1
                elif diff < -flatness_rad:
                    n_minus += 1
            out[r, c] = lut[n_minus, n_plus]
    return out


def _check_cellsize(cellsize):
    return check_cell_pair(cellsize)


def _check_int(name, value, minimum):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise InputError(
            f"{name}={value!r} must be an integer >= {minimum}; pass a whole number of cells."
        )
    return int(value)


def _check_dem(dem):
    dem = np.asarray(masked_as_nan(dem))
    if dem.ndim != 2:
        raise InputError(
            f"dem has {dem.ndim} dimension(s) (shape {dem.shape}); a 2-D array "
            "(rows, cols) is needed. Pass one band."
        )
    if dem.dtype.kind not in "fiu":
        raise InputError(
            f"dem has dtype {dem.dtype}; a numeric array is needed. Convert "
            "elevations to float32 or float64."
        )
    if dem.dtype not in (np.float32, np.float64):
        dem = dem.astype(np.float64)
    return np.ascontiguousarray(dem)


def _inverse_distances(dx, dy, lookup_cells):
    """1 / ground distance of step k (0..lookup_cells) in each direction."""
    diagonal = math.hypot(dx, dy)
    step = np.array([dx, diagonal, dy, diagonal, dx, diagonal, dy, diagonal])
    k = np.arange(lookup_cells + 1, dtype=np.float64)
    k[0] = np.inf  # step 0 is never read; keeps the table finite
    return 1.0 / (step[:, None] * k[None, :])


def geomorphons(dem, cellsize, *, lookup_cells=20, flatness_deg=1.0, skip_cells=0):
    """Classify every cell of a DEM into one of ten geomorphon landforms.

    Parameters
    ----------
    dem : array_like, shape (rows, cols)
        Elevations in metres, row 0 at the north edge, columns increasing east.
        NaN is nodata. float32 and float64 are used as given (arithmetic is in
        float64); other numeric types are cast to float64; a masked array has its
        mask turned into NaN.
    cellsize : float or (float, float)
        Cell size in metres: one number for square cells, or ``(dx, dy)`` with dx
        the east-west and dy the north-south size, both positive. Steps along
        E/W are ``dx`` long, along N/S ``dy``, along diagonals ``hypot(dx, dy)``.
    lookup_cells : int, default 20
        Number of steps L read along each of the 8 lines of sight. It is counted
        in cells in every direction, so diagonal lines reach ``hypot(dx, dy) * L``
        metres, about sqrt(2) times further than cardinal lines.
    flatness_deg : float, default 1.0
        Flatness threshold t in degrees, ``0 <= t < 180``.
    skip_cells : int, default 0
        Steps ``k <= skip_cells`` next to the cell are not read (the skip radius of
        the method), to ignore small-scale noise. Must be below ``lookup_cells``.

    Returns
    -------
    landforms : ndarray of uint8, shape (rows, cols)
        Landform codes 1..10 as listed in :data:`LANDFORM_CLASSES`; 0 where the
        DEM cell is NaN.

    Raises
    ------
    InputError
        If ``dem`` is not a 2-D numeric array or an option is out of range.

    Notes
    -----
    Along each direction D the cells at steps k = skip_cells + 1 .. L are read,
    with elevation angle ``beta_k = atan((z_k - z_0) / d_k)``. Zenith
    ``phi = 90 - max beta``, nadir ``psi = 90 + min beta``. The line is '+' if
    ``psi - phi > t``, '-' if ``psi - phi < -t`` and '0' otherwise (the
    difference rule of METHODS.md §3; ``psi - phi = max beta + min beta``, so a
    plane of angle beta is non-flat only when ``|beta| > t / 2``). The counts
    ``(n_minus, n_plus)`` select the class from the table of Jasiewicz &
    Stepinski (2013) (:func:`_landform_lookup`). The angles are obtained from
    the extreme gradients ``(z_k - z_0) / d_k`` with two ``atan`` per line.

    Edge rules: a line stops at the raster edge or at its first NaN sample (the
    NaN and anything beyond it are not used); skipped steps are not read, so a
    NaN there does not stop the line. A line with no valid sample counts as
    '0' (lenient rule), so cells near the edge or nodata still get a class,
    computed from shorter or fewer lines; a lone valid cell is "flat". A NaN
    centre cell gives 0. The optional "flatness distance" of the paper (a lower
    threshold for distant samples) is not implemented.

    For windowed processing a halo of ``lookup_cells`` cells on every side makes
    the trimmed result equal to the whole-raster result.

    References
    ----------
    Jasiewicz, J. & Stepinski, T. F. (2013). Geomorphons - a pattern recognition
    approach to classification and mapping of landforms. Geomorphology 182,
    147-156. https://doi.org/10.1016/j.geomorph.2012.11.005

    Examples
    --------
    >>> import numpy as np
    >>> from mlsites.terrain import geomorphons, LANDFORM_CLASSES
    >>> y, x = np.mgrid[10:-11:-1, -10:11]
    >>> cone = 100.0 - np.hypot(x, y)
    >>> LANDFORM_CLASSES[int(geomorphons(cone, 1.0, lookup_cells=5)[10, 10])]
    'peak'
    """
    dem = _check_dem(dem)
    dx, dy = _check_cellsize(cellsize)
    lookup_cells = _check_int("lookup_cells", lookup_cells, 1)
    skip_cells = _check_int("skip_cells", skip_cells, 0)
    if skip_cells >= lookup_cells:
        raise InputError(
            f"skip_cells={skip_cells} must be smaller than lookup_cells={lookup_cells}; "
            "otherwise no sample is read. Lower skip_cells or raise lookup_cells."
        )
    if not (
        isinstance(flatness_deg, numbers.Real)
        and math.isfinite(flatness_deg)
        and 0 <= flatness_deg < 180
    ):
        raise InputError(
            f"flatness_deg={flatness_deg!r} must be a number in [0, 180) degrees; "
            "1.0 is the usual choice."
        )
    inv_dist = _inverse_distances(dx, dy, lookup_cells)
    return _geomorphons_kernel(
        dem, inv_dist, skip_cells + 1, math.radians(flatness_deg), _LOOKUP
    )
