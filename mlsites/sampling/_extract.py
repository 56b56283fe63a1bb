"""Values of layer rasters at sample cells, read window by window.

Sample cells are grouped by the block of the grid they fall in and each block is
read once (only the part that holds samples), so memory stays bounded by one
block per layer whatever the grid size.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from pathlib import Path

import numpy as np
import pandas as pd
from rasterio.windows import Window

from mlsites.errors import GridMismatchError, InputError
from mlsites.grid import AlignedRaster, GridSpec, iter_windows
from mlsites.sampling._sites import check_mask_shape

__all__ = ["extract_values", "read_valid_mask"]

#: Default block edge (cells) used to group sample cells into windows.
BLOCK_SIZE = 1024


def extract_values(layers: Mapping, rows, cols, grid: GridSpec, *, kinds=None, bands=None,
                   block_size: int = BLOCK_SIZE) -> pd.DataFrame:
    """Read the value of every layer at the given cells.

    Parameters
    ----------
    layers : mapping of str to path-like or ndarray
        Layer name -> raster file (any CRS and resolution; aligned onto ``grid``
        on the fly) or an array of the grid shape.
    rows, cols : array-like of int
        Cells on the grid (row 0 = north edge).
    grid : GridSpec
        The study grid.
    kinds : str or mapping of str to str, optional
        Layer kind, which chooses the resampling of rasters not on the grid:
        "continuous" (bilinear, the default), "categorical" (nearest) or
        "categorical_mode" (mode). One string applies to all layers.
    bands : mapping of str to int, optional
        Band of each raster layer (1-based); default 1.
    block_size : int, default 1024
        Edge of the blocks (cells) the grid is divided into for reading.

    Returns
    -------
    pandas.DataFrame
        One float64 column per layer, in the order of ``layers``, one row per
        input cell (same order); nodata is NaN.

    Raises
    ------
    InputError
        A cell lies outside the grid, a layer name or kind is unknown, or a band
        does not exist in its raster.
    GridMismatchError
        An array layer does not have the grid shape.
    RasterReadError
        A raster cannot be opened.

    Notes
    -----
    For each block holding samples only the bounding window of its samples is
    read, so sparse samples read little and dense samples read each block once.
    Peak memory is one ``block_size`` x ``block_size`` float64 window plus the
    output. The result equals indexing the fully read raster (tested).
    """
    rows = np.asarray(rows, dtype=np.int64).ravel()
    cols = np.asarray(cols, dtype=np.int64).ravel()
    if rows.shape != cols.shape:
        raise InputError(f"rows ({rows.size}) and cols ({cols.size}) differ in length")
    outside = ~grid.contains(rows, cols)
    if outside.any():
        i = int(np.flatnonzero(outside)[0])
        raise InputError(f"{int(outside.sum())} sample cell(s) lie outside the {grid.shape} grid "
                         f"(first: row {rows[i]}, col {cols[i]}); sample on the study grid")
    if block_size < 1:
        raise InputError(f"block_size={block_size}; expected a positive number of cells")
    if isinstance(kinds, str) or kinds is None:
        kinds = {name: kinds or "continuous" for name in layers}
    bands = dict(bands or {})
    for what, given in (("kinds", kinds), ("bands", bands)):
        unknown = set(given) - set(layers)
        if unknown:
            raise InputError(f"{what} names unknown layer(s) {sorted(unknown)}; "
                             f"layers are {list(layers)}")

    groups = _block_groups(rows, cols, grid, block_size)
    out = {}
    for name, layer in layers.items():
        kind = kinds.get(name, "continuous")
        if isinstance(layer, (str, Path)):
            out[name] = _extract_raster(layer, rows, cols, grid, kind, bands.get(name, 1), groups)
        else:
            arr = _check_layer_array(layer, grid, name)
            out[name] = arr[rows, cols].astype(np.float64)
    return pd.DataFrame(out, index=pd.RangeIndex(rows.size), columns=list(layers))


def _block_groups(rows, cols, grid, block_size):
    """List of (indices, window) per block holding samples, in block order."""
    if rows.size == 0:
        return []
    n_block_cols = -(-grid.width // block_size)
    block = (rows // block_size) * n_block_cols + cols // block_size
    order = np.argsort(block, kind="stable")
    bounds = np.flatnonzero(np.diff(block[order])) + 1
    groups = []
    for idx in np.split(order, bounds):
        r, c = rows[idx], cols[idx]
        r0, c0 = int(r.min()), int(c.min())
        window = Window(c0, r0, int(c.max()) - c0 + 1, int(r.max()) - r0 + 1)
        groups.append((idx, window))
    return groups


def _extract_raster(path, rows, cols, grid, kind, band, groups):
    values = np.full(rows.size, np.nan, dtype=np.float64)
    with AlignedRaster(path, grid, kind=kind, band=band) as src:
        for idx, window in groups:
            block = src.read(window, dtype=np.float64)
            values[idx] = block[rows[idx] - int(window.row_off), cols[idx] - int(window.col_off)]
    return values


def _check_layer_array(arr, grid, name):
    arr = np.asarray(arr)
    if arr.shape != grid.shape:
        raise GridMismatchError(f"layer {name!r} array has shape {arr.shape}, the study grid is "
                                f"{grid.shape}; align it to the grid first")
    return arr


def read_valid_mask(path, grid: GridSpec, *, block_rows: int = BLOCK_SIZE) -> np.ndarray:
    """Study-area mask from a raster: True where the raster has data.

    Parameters
    ----------
    path : path-like
        Any raster (for example the DEM or a study-area raster whose outside is
        nodata), aligned onto ``grid`` with nearest-neighbour resampling.
    grid : GridSpec
    block_rows : int, default 1024
        Rows read per strip.

    Returns
    -------
    ndarray of bool, shape ``grid.shape``
        One byte per cell (100 MB for a 10 000 x 10 000 grid).

    Notes
    -----
    Read strip by strip, so the float copy of the raster never exists whole.
    Zero counts as data; mark the outside of a study area as nodata.
    """
    mask = np.zeros(grid.shape, dtype=bool)
    with AlignedRaster(path, grid, kind="categorical") as src:
        for win in iter_windows(grid, block_rows=block_rows):
            core = win.core
            block = src.read(core, dtype=np.float32)
            r0, c0 = int(core.row_off), int(core.col_off)
            mask[r0 : r0 + int(core.height), c0 : c0 + int(core.width)] = ~np.isnan(block)
    return mask


def valid_lookup(valid_mask, grid: GridSpec) -> Callable | None:
    """Turn a ``valid_mask`` argument into ``f(rows, cols) -> bool array`` (or None).

    Accepts None (all cells valid), a boolean array of the grid shape, a raster
    path (read with :func:`read_valid_mask`) or a callable.
    """
    if valid_mask is None:
        return None
    if callable(valid_mask):
        def lookup(rows, cols):
            return np.asarray(valid_mask(rows, cols), dtype=bool)
        return lookup
    if isinstance(valid_mask, (str, Path)):
        valid_mask = read_valid_mask(valid_mask, grid)
    mask = check_mask_shape(valid_mask, grid)

    def lookup(rows, cols):
        return mask[rows, cols]
    lookup.mask = mask
    return lookup
