"""Site positions generalised to squares, for maps and figures that may be shared."""

from __future__ import annotations

import numpy as np

__all__ = ["site_squares"]


def site_squares(x, y, grid, side, weight=None):
    """Sites generalised to squares: the centre of each square holding sites, and its count.

    Parameters
    ----------
    x, y : array-like of float
        Site positions in the grid's CRS.
    grid : GridSpec
        Squares start at its lower-left corner.
    side : float
        Square side in CRS units.
    weight : array-like of float, optional
        Weight of each site (default 1: counts).

    Returns
    -------
    (x, y, count) : tuple of ndarray
        Centre of every square holding at least one site (in square order, by
        column then row of the squares) and the summed weight of its sites. Only
        the squares are returned, never a site's position.

    Examples
    --------
    >>> from rasterio.crs import CRS
    >>> from rasterio.transform import from_origin
    >>> from mlsites.grid import GridSpec
    >>> grid = GridSpec(CRS.from_epsg(32631), from_origin(0.0, 3000.0, 10.0, 10.0), 300, 300)
    >>> site_squares([120.0, 900.0, 1500.0], [80.0, 400.0, 2500.0], grid, 1000.0)
    (array([ 500., 1500.]), array([ 500., 2500.]), array([2., 1.]))
    """
    x, y = np.asarray(x, dtype=np.float64).ravel(), np.asarray(y, dtype=np.float64).ravel()
    w = np.ones_like(x) if weight is None else np.asarray(weight, dtype=np.float64).ravel()
    if x.size == 0:
        return np.empty(0), np.empty(0), np.empty(0)
    left, bottom = grid.bounds[0], grid.bounds[1]
    i = np.floor((x - left) / side).astype(np.int64)
    j = np.floor((y - bottom) / side).astype(np.int64)
    keys, inverse = np.unique(np.stack([i, j], axis=1), axis=0, return_inverse=True)
    counts = np.bincount(inverse.ravel(), weights=w, minlength=len(keys))
    return left + (keys[:, 0] + 0.5) * side, bottom + (keys[:, 1] + 0.5) * side, counts
