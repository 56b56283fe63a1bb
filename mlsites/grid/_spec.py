"""The template grid of a study: CRS, transform and shape, plus cell geometry."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from affine import Affine
from rasterio.crs import CRS

from mlsites.errors import CRSError, InputError

__all__ = ["GridSpec", "metric_cell_sizes", "WGS84_A", "WGS84_F"]

#: WGS84 semi-major axis (m) and flattening (METHODS.md §1, standard geodesy).
WGS84_A = 6378137.0
WGS84_F = 1.0 / 298.257223563


@dataclass(frozen=True)
class GridSpec:
    """Template grid every layer of a study is aligned onto.

    Parameters
    ----------
    crs : rasterio.crs.CRS
        Coordinate reference system of the grid.
    transform : affine.Affine
        North-up affine transform (row 0 is the north edge; no rotation).
    width, height : int
        Number of columns and rows.

    Notes
    -----
    Only north-up grids are supported (``transform.b == transform.d == 0`` and
    ``transform.e < 0``); rotated rasters are refused when a grid is read, with a
    hint to warp them first.
    """

    crs: CRS
    transform: Affine
    width: int
    height: int

    def __post_init__(self):
        t = self.transform
        if t.b != 0 or t.d != 0 or t.a <= 0 or t.e >= 0:
            raise InputError(
                f"grid transform {tuple(t)[:6]} is rotated or not north-up; expected "
                "positive x cell size, negative y cell size and no rotation. "
                "Warp the raster to a north-up grid first (for example with gdalwarp)."
            )
        if self.width < 1 or self.height < 1:
            raise InputError(f"grid shape {self.height} x {self.width} is empty")

    # -- geometry -------------------------------------------------------------
    @property
    def shape(self) -> tuple[int, int]:
        """(rows, columns)."""
        return (self.height, self.width)

    @property
    def res(self) -> tuple[float, float]:
        """Cell size (x, y) in CRS units, both positive."""
        return (self.transform.a, -self.transform.e)

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(left, bottom, right, top) in CRS units."""
        left, top = self.transform.c, self.transform.f
        return (left, top - self.height * self.res[1], left + self.width * self.res[0], top)

    def extent_text(self, bounds=None) -> str:
        """``bounds`` (default the grid's own, in the grid CRS) as plain numbers for messages.

        Projected grids in whole CRS units ("x 400000..401200 m"), degree grids to
        six decimals; never scientific notation, so the numbers can be compared
        with what a GIS shows.
        """
        left, bottom, right, top = self.bounds if bounds is None else bounds
        if self.is_geographic:
            return f"lon {left:.6f}..{right:.6f}, lat {bottom:.6f}..{top:.6f} degrees"
        unit = "m" if self._linear_unit_m() == 1.0 else (self.crs.linear_units if self.crs else "units")
        return f"x {left:.0f}..{right:.0f}, y {bottom:.0f}..{top:.0f} {unit}"

    @property
    def is_geographic(self) -> bool:
        """True when the CRS is in degrees (latitude/longitude)."""
        return bool(self.crs is not None and self.crs.is_geographic)

    @property
    def n_cells(self) -> int:
        return self.height * self.width

    def cell_area_m2(self) -> float:
        """Area of one cell in square metres (projected grids only)."""
        if self.is_geographic:
            raise CRSError(
                "cell areas of a geographic (degree) grid vary by row; reproject the "
                "study to a projected CRS in metres"
            )
        return float(self.res[0] * self.res[1] * self._linear_unit_m() ** 2)

    def _linear_unit_m(self) -> float:
        if self.crs is None:
            return 1.0
        factor = self.crs.linear_units_factor[1] if self.crs.is_projected else 1.0
        return float(factor)

    def xy(self, rows, cols):
        """Cell-centre coordinates of the given rows and columns."""
        rows = np.asarray(rows, dtype=np.float64)
        cols = np.asarray(cols, dtype=np.float64)
        t = self.transform
        return t.c + (cols + 0.5) * t.a, t.f + (rows + 0.5) * t.e

    def rowcol(self, x, y):
        """Row and column (int64) of the cells containing points ``x, y``.

        Points outside the grid get indices outside ``[0, height) x [0, width)``;
        use :meth:`contains` to test.
        """
        t = self.transform
        cols = np.floor((np.asarray(x, dtype=np.float64) - t.c) / t.a).astype(np.int64)
        rows = np.floor((np.asarray(y, dtype=np.float64) - t.f) / t.e).astype(np.int64)
        return rows, cols

    def contains(self, rows, cols):
        """Boolean mask: which (row, col) pairs lie inside the grid."""
        rows = np.asarray(rows)
        cols = np.asarray(cols)
        return (rows >= 0) & (rows < self.height) & (cols >= 0) & (cols < self.width)

    def cellsize(self, rows=None):
        """Cell size in metres in the form the terrain kernels take.

        A float for square projected cells, ``(dx, dy)`` for rectangular ones and
        per-row arrays ``(dx_rows, dy_rows)`` for geographic grids (see
        :func:`metric_cell_sizes`; ``rows`` picks the rows, halo rows included).
        """
        if self.is_geographic:
            return metric_cell_sizes(self, rows)
        unit = self._linear_unit_m()
        dx, dy = self.res[0] * unit, self.res[1] * unit
        return float(dx) if dx == dy else (float(dx), float(dy))

    def coarsened(self, max_side: int) -> "GridSpec":
        """The same extent in cells ``f`` times larger, at most ``max_side`` per side (for figures).

        ``f = ceil(max(rows, cols) / max_side)``; each side gets ``round(n / f)``
        cells (at least 1), stretched to keep the bounds exactly, so cells may be
        slightly rectangular. A grid already small enough is returned as it is.
        """
        if isinstance(max_side, bool) or not isinstance(max_side, (int, np.integer)) or max_side < 1:
            raise InputError(f"max_side={max_side!r}; expected a whole number of cells >= 1")
        f = max(1, math.ceil(max(self.shape) / max_side))
        if f == 1:
            return self
        h, w = max(1, round(self.height / f)), max(1, round(self.width / f))
        return GridSpec(self.crs, self.transform * Affine.scale(self.width / w, self.height / h), w, h)

    # -- serialisation --------------------------------------------------------
    def to_dict(self) -> dict:
        """Plain JSON-ready description (for manifests and model cards)."""
        return {
            "crs": self.crs.to_wkt() if self.crs is not None else None,
            "transform": list(self.transform)[:6],
            "width": self.width,
            "height": self.height,
        }

    @classmethod
    def from_dict(cls, d: dict) -> "GridSpec":
        crs = CRS.from_wkt(d["crs"]) if d.get("crs") else None
        return cls(crs, Affine(*d["transform"]), int(d["width"]), int(d["height"]))

    def same_as(self, other: "GridSpec", *, rtol: float = 1e-9) -> bool:
        """True when both grids have the same CRS, shape and (almost) transform."""
        return self.matches(other.crs, other.transform, other.shape, rtol=rtol)

    def matches(self, crs, transform, shape, *, rtol: float = 1e-9) -> bool:
        """True when a raster with this CRS, transform and shape lies on this grid.

        Takes the parts rather than a GridSpec so rotated rasters, which a GridSpec
        refuses, can be compared too (they never match).
        """
        return (
            tuple(shape) == self.shape
            and crs is not None
            and crs == self.crs
            and np.allclose(tuple(transform)[:6], tuple(self.transform)[:6], rtol=rtol, atol=0)
        )


def metric_cell_sizes(grid: GridSpec, rows=None):
    """Per-row cell sizes in metres of a geographic (degree) grid.

    Parameters
    ----------
    grid : GridSpec
        A grid whose CRS is geographic (degrees).
    rows : array-like of int, optional
        Rows to compute (may lie outside the grid, for halos); default all rows.

    Returns
    -------
    dx_rows, dy_rows : ndarray of shape (len(rows),)
        East-west and north-south spacing of each row in metres, at the latitude
        of the row centre, on the WGS84 ellipsoid.

    Notes
    -----
    Δx = N(φ)·cos φ·Δλ and Δy = M(φ)·Δφ with N = a/√(1 − e² sin²φ) and
    M = a(1 − e²)/(1 − e² sin²φ)^{3/2} (METHODS.md §1). Using one spacing for both
    axes on a degree grid gives wrong slopes, so the kernels take both per row.
    """
    if not grid.is_geographic:
        raise CRSError("metric_cell_sizes is for geographic (degree) grids only")
    e2 = WGS84_F * (2.0 - WGS84_F)
    rows = np.arange(grid.height, dtype=np.float64) if rows is None else np.asarray(rows, dtype=np.float64)
    lat = np.radians(grid.transform.f + (rows + 0.5) * grid.transform.e)
    s2 = np.sin(lat) ** 2
    n = WGS84_A / np.sqrt(1.0 - e2 * s2)
    m = WGS84_A * (1.0 - e2) / (1.0 - e2 * s2) ** 1.5
    dlon, dlat = np.radians(grid.res[0]), np.radians(grid.res[1])
    return n * np.cos(lat) * dlon, m * dlat
