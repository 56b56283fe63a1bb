"""Kernel density of sites per time block.

The density of block j at a cell centre is ``sum_i w_ij K(|c - x_i|)`` with the
Gaussian kernel ``K(r) = exp(-r^2 / (2 h^2)) / (2 pi h^2)`` (bandwidth ``h`` in
metres) and ``w_ij`` site i's aoristic weight for block j: the expected number
of the block's sites per unit area. The Gaussian is separable, so for a window
of cells the density is one matrix product ``Gy diag(w) Gx`` of the kernel
factors along rows and columns, evaluated at the exact site positions (no
binning of sites to cells, no FFT). Windows keep memory bounded.
"""

from __future__ import annotations

import contextlib
import math

import numpy as np
from rasterio.windows import Window

from mlsites.errors import InputError, InsufficientDataError
from mlsites.grid import GridSpec, iter_windows

__all__ = ["scott_bandwidth", "kernel_density", "write_densities", "CUTOFF_BANDWIDTHS"]

#: A site adds nothing to cells farther than this many bandwidths from it along x or y:
#: it would add less than exp(-18) ~ 1.5e-8 of its kernel's peak there.
CUTOFF_BANDWIDTHS = 6.0
#: Square windows of the grid the density is computed in (cells per side).
WINDOW_CELLS = 512
#: Square metres per square kilometre (densities are sites per km2).
_M2_PER_KM2 = 1.0e6


def scott_bandwidth(x_m, y_m) -> float:
    """Bandwidth in metres by Scott's rule for two dimensions.

    ``h = sigma n^(-1/6)`` with ``sigma = sqrt((var x + var y) / 2)`` (sample
    variances) of the ``n`` site positions: Scott's rule ``sigma_i
    n^(-1/(d + 4))`` for d = 2, with one common bandwidth so the kernel stays
    round.

    References
    ----------
    Scott, D. W. (1992). Multivariate Density Estimation: Theory, Practice, and
    Visualization. Wiley, section 6.3 [memory]. doi:10.1002/9780470316849
    """
    x = np.asarray(x_m, dtype=np.float64).ravel()
    y = np.asarray(y_m, dtype=np.float64).ravel()
    if x.size < 2:
        raise InsufficientDataError(f"{x.size} dated site(s): a bandwidth rule needs at least 2; give "
                                    "bandwidth_m in [periods]")
    sigma = math.sqrt(0.5 * (x.var(ddof=1) + y.var(ddof=1)))
    if not sigma > 0:
        raise InsufficientDataError("all dated sites share one position; give bandwidth_m in [periods]")
    return sigma * x.size ** (-1.0 / 6.0)


def _crs_bandwidth(grid: GridSpec, bandwidth_m) -> float:
    from mlsites.sampling._sites import metres_to_crs_units

    if not (isinstance(bandwidth_m, (int, float)) and math.isfinite(bandwidth_m) and bandwidth_m > 0):
        raise InputError(f"bandwidth_m {bandwidth_m!r}; expected a positive distance in metres")
    return metres_to_crs_units(grid, float(bandwidth_m), "bandwidth_m")


def _density_window(x, y, w, grid: GridSpec, window: Window, h, bandwidth_m):
    """Densities (k, rows, cols) of the window, sites per km2."""
    r0, c0 = int(window.row_off), int(window.col_off)
    nr, nc = int(window.height), int(window.width)
    xc = grid.xy(np.zeros(nc), np.arange(c0, c0 + nc))[0]
    yc = grid.xy(np.arange(r0, r0 + nr), np.zeros(nr))[1]
    reach = CUTOFF_BANDWIDTHS * h
    near = ((x >= xc.min() - reach) & (x <= xc.max() + reach) & (y >= yc.min() - reach) & (y <= yc.max() + reach))
    out = np.zeros((w.shape[1], nr, nc))
    if not near.any():
        return out
    dy = yc[:, None] - y[near][None, :]
    dx = x[near][:, None] - xc[None, :]
    # The cutoff is applied per cell, not per window, so any window gives the same values.
    gy = np.where(np.abs(dy) <= reach, np.exp(-0.5 * (dy / h) ** 2), 0.0)
    gx = np.where(np.abs(dx) <= reach, np.exp(-0.5 * (dx / h) ** 2), 0.0)
    norm = _M2_PER_KM2 / (2.0 * math.pi * bandwidth_m ** 2)
    wn = w[near]
    for k in range(w.shape[1]):
        out[k] = (gy * (wn[:, k] * norm)) @ gx
    return out


def _check_points(x, y, weights):
    x = np.asarray(x, dtype=np.float64).ravel()
    y = np.asarray(y, dtype=np.float64).ravel()
    w = np.asarray(weights, dtype=np.float64)
    one = w.ndim == 1
    w = w.reshape(len(w), -1) if w.ndim else w
    if x.shape != y.shape or w.shape[0] != x.size:
        raise InputError(f"{x.size} x, {y.size} y and {w.shape[0]} weight rows; give one of each per site")
    if not (np.isfinite(x).all() and np.isfinite(y).all() and np.isfinite(w).all()):
        raise InputError("site positions and weights must be finite numbers")
    return x, y, w, one


def kernel_density(x, y, weights, grid: GridSpec, *, bandwidth_m, window: Window | None = None) -> np.ndarray:
    """Gaussian kernel density of weighted sites at the cell centres of a grid.

    Parameters
    ----------
    x, y : array_like of shape (n_sites,)
        Site positions in the grid CRS.
    weights : array_like of shape (n_sites,) or (n_sites, k)
        Site weights (for example aoristic weights of k blocks).
    grid : GridSpec
        A projected grid (CRS units convertible to metres).
    bandwidth_m : float
        Standard deviation of the Gaussian kernel, metres.
    window : rasterio.windows.Window, optional
        Part of the grid to compute (default the whole grid).

    Returns
    -------
    ndarray of float64, shape (rows, cols) or (k, rows, cols)
        Expected sites per km2 at each cell centre; integrated over a grid
        that covers the kernels it gives the weight sum.

    Raises
    ------
    InputError
        Bad positions, weights or bandwidth.
    CRSError
        A geographic (degree) grid.

    Notes
    -----
    Exact sum over sites of the kernel at the cell centre, except that a site
    adds nothing to cells more than :data:`CUTOFF_BANDWIDTHS` bandwidths from it
    along x or y (it would add under 1.5e-8 of its kernel peak; the mass left out
    is below 4e-9 of the site's weight). Otherwise the result equals
    ``scipy.stats.gaussian_kde`` with covariance ``h^2 I`` and the same weights,
    times the weight sum. The cutoff is per cell, so any window gives the same
    values as the whole grid (up to the order of floating-point sums).
    """
    x, y, w, one = _check_points(x, y, weights)
    h = _crs_bandwidth(grid, bandwidth_m)
    window = window or Window(0, 0, grid.width, grid.height)
    out = _density_window(x, y, w, grid, window, h, float(bandwidth_m))
    return out[0] if one else out


def write_densities(paths, x, y, weights, grid: GridSpec, *, bandwidth_m, valid_raster=None, tags=None,
                    progress=None) -> list:
    """Write one density GeoTIFF per weight column, window by window.

    Parameters
    ----------
    paths : sequence of path-like
        One output per column of ``weights``.
    x, y, weights, grid, bandwidth_m
        As in :func:`kernel_density`.
    valid_raster : path-like, optional
        Raster on the grid whose nodata cells become nodata in the outputs
        (the DEM: the study area).
    tags : sequence of dict, optional
        GeoTIFF metadata per output.
    progress : callable, optional
        Called with the number of cells finished after each window.

    Returns
    -------
    list of Path

    Notes
    -----
    Float32 tiled, compressed GeoTIFFs with NaN nodata and overviews
    (:class:`mlsites.grid.RasterWriter`), each written under a temporary name
    and renamed only when complete. Memory: the weights, plus for each window of
    512 x 512 cells one array per output and the kernel factors of the sites
    near it.
    """
    from mlsites.grid import AlignedRaster, RasterWriter, bounded_gdal_cache

    x, y, w, _ = _check_points(x, y, weights)
    h = _crs_bandwidth(grid, bandwidth_m)
    paths = list(paths)
    if len(paths) != w.shape[1]:
        raise InputError(f"{len(paths)} output paths for {w.shape[1]} weight columns")
    tags = list(tags) if tags is not None else [{}] * len(paths)
    with bounded_gdal_cache(), contextlib.ExitStack() as stack:
        writers = [stack.enter_context(RasterWriter(p, grid, dtype=np.float32, tags=t,
                                                    description="expected sites per km2"))
                   for p, t in zip(paths, tags)]
        valid = stack.enter_context(AlignedRaster(valid_raster, grid)) if valid_raster is not None else None
        for win in iter_windows(grid, block_rows=WINDOW_CELLS, block_cols=WINDOW_CELLS):
            dens = _density_window(x, y, w, grid, win.core, h, float(bandwidth_m))
            if valid is not None:
                dens[:, np.isnan(valid.read(win.core))] = np.nan
            for k, writer in enumerate(writers):
                writer.write(dens[k].astype(np.float32), window=win.core)
            if progress is not None:
                progress(int(win.core.height * win.core.width))
    return [writer.path for writer in writers]
