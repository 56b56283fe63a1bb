"""Raster input and output on the template grid.

Reading aligns any GDAL raster onto a :class:`GridSpec` on the fly (a warped
virtual raster, so nothing is loaded whole); writing produces tiled, compressed
GeoTIFFs with nodata and overviews under a temporary name that is renamed only
when the file is complete.
"""

from __future__ import annotations

import contextlib
import numbers
import os
from pathlib import Path

import numpy as np
import rasterio
from rasterio.enums import MaskFlags, Resampling
from rasterio.vrt import WarpedVRT
from rasterio.windows import Window

from mlsites._validation import gdal_reason
from mlsites.errors import CRSError, InputError, RasterReadError
from mlsites.grid._spec import GridSpec

__all__ = [
    "open_raster",
    "read_grid",
    "AlignedRaster",
    "RasterWriter",
    "RESAMPLING_BY_KIND",
    "read_array",
    "write_array",
    "bounded_gdal_cache",
]

#: GDAL block cache (MB) for windowed jobs; GDAL's default (5 % of RAM) would keep
#: written tiles in memory until full and undo the bounded-memory design.
GDAL_CACHE_MB = 128


def bounded_gdal_cache(mb: int = GDAL_CACHE_MB):
    """A ``rasterio.Env`` capping GDAL's block cache, unless the user set one.

    A ``GDAL_CACHEMAX`` from the environment or an enclosing ``rasterio.Env`` wins.
    """
    options = rasterio.env.getenv() if rasterio.env.hasenv() else {}
    if "GDAL_CACHEMAX" in os.environ or "GDAL_CACHEMAX" in options:
        return rasterio.Env()
    return rasterio.Env(GDAL_CACHEMAX=mb)

#: Resampling used when a layer of each kind is aligned onto the grid.
RESAMPLING_BY_KIND = {
    "continuous": Resampling.bilinear,
    "categorical": Resampling.nearest,
    "categorical_mode": Resampling.mode,
}


def open_raster(path):
    """Open a raster with rasterio, turning failures into one-line errors."""
    path = Path(path)
    if not path.exists():
        raise RasterReadError(f"{path}: file not found; check the path")
    if path.is_dir():
        raise RasterReadError(f"{path}: is a directory, expected a raster file")
    try:
        return rasterio.open(path)
    except rasterio.errors.RasterioIOError as exc:
        raise RasterReadError(
            f"{path}: not a raster GDAL can read ({gdal_reason(exc)}); "
            "give a GeoTIFF or another GDAL raster format"
        ) from None


def read_grid(path) -> GridSpec:
    """The :class:`GridSpec` of a raster file (its CRS, transform and shape)."""
    with open_raster(path) as src:
        if src.crs is None:
            raise CRSError(
                f"{path}: raster has no CRS; assign one (for example "
                "gdal_edit.py -a_srs EPSG:xxxx) before using it as the study grid"
            )
        try:
            return GridSpec(src.crs, src.transform, src.width, src.height)
        except InputError as exc:
            raise InputError(f"{path}: {exc}") from None


class AlignedRaster(contextlib.AbstractContextManager):
    """A raster band read on the template grid, window by window.

    Parameters
    ----------
    path : path-like
        Any raster GDAL reads, in any CRS and resolution.
    grid : GridSpec
        The template grid.
    kind : {"continuous", "categorical", "categorical_mode"}
        Chooses the resampling: bilinear, nearest or mode.
    band : int, default 1

    Notes
    -----
    Rasters already on the grid are read directly; others through a rasterio
    ``WarpedVRT`` so only the requested window is warped. Values equal to the
    source nodata become NaN. Reads outside the grid return NaN, so a window with
    a halo at the grid edge behaves like a raster surrounded by nodata.
    ``reprojected`` says whether warping was needed (callers log it).
    """

    def __init__(self, path, grid: GridSpec, *, kind: str = "continuous", band: int = 1):
        if kind not in RESAMPLING_BY_KIND:
            raise InputError(
                f"unknown layer kind {kind!r}; expected one of {sorted(RESAMPLING_BY_KIND)}"
            )
        self.path = Path(path)
        self.grid = grid
        self.kind = kind
        self._src = open_raster(path)
        if isinstance(band, bool) or not isinstance(band, numbers.Integral) or not 1 <= band <= self._src.count:
            count = self._src.count
            self._src.close()
            raise InputError(f"{path}: band {band!r} asked for, but the raster has {count} band(s); "
                             f"give a band from 1 to {count}")
        self.band = int(band)
        self.nodata = self._src.nodata
        self.reprojected = not grid.matches(self._src.crs, self._src.transform,
                                            (self._src.height, self._src.width))
        if self.reprojected:
            if self._src.crs is None:
                self._src.close()
                raise CRSError(
                    f"{path}: raster has no CRS and is not on the study grid; assign its CRS first"
                )
            # Without a source nodata value an alpha band tells warped-out cells apart.
            self._ds = WarpedVRT(
                self._src,
                crs=grid.crs,
                transform=grid.transform,
                width=grid.width,
                height=grid.height,
                resampling=RESAMPLING_BY_KIND[kind],
                add_alpha=self.nodata is None,
                # Near-exact transformation (0.001 cell) instead of GDAL's default 0.125 cell.
                tolerance=0.001,
            )
        else:
            self._ds = self._src
        # When the mask is just "equal to nodata" (or "all valid"), comparing values
        # finds the same cells; asking GDAL for the mask would decode the band twice.
        flags = self._ds.mask_flag_enums[band - 1]
        self._mask_from_values = all(f in (MaskFlags.nodata, MaskFlags.all_valid) for f in flags)

    def read(self, window: Window | None = None, *, dtype=np.float32) -> np.ndarray:
        """Read a window of the grid (may extend past its edges) with NaN nodata."""
        if window is None:
            window = Window(0, 0, self.grid.width, self.grid.height)
        col0, row0 = int(window.col_off), int(window.row_off)
        h, w = int(window.height), int(window.width)
        out = np.full((h, w), np.nan, dtype=dtype)
        r0, r1 = max(row0, 0), min(row0 + h, self.grid.height)
        c0, c1 = max(col0, 0), min(col0 + w, self.grid.width)
        if r1 <= r0 or c1 <= c0:
            return out
        inner = Window(c0, r0, c1 - c0, r1 - r0)
        # Read straight into the output (rasterio casts), so a whole-grid read costs
        # the output plus one byte per cell for the mask.
        target = out[r0 - row0 : r1 - row0, c0 - col0 : c1 - col0]
        self._ds.read(self.band, window=inner, out=target)
        if self._mask_from_values:
            if self.nodata is not None and not np.isnan(self.nodata):
                target[target == self.nodata] = np.nan
        else:
            invalid = self._ds.read_masks(self.band, window=inner) == 0
            if self.nodata is not None and not np.isnan(self.nodata):
                invalid |= target == self.nodata
            target[invalid] = np.nan
        return out

    def close(self):
        if self._ds is not self._src:
            self._ds.close()
        self._src.close()

    def __exit__(self, *exc):
        self.close()
        return False


def read_array(path, grid: GridSpec | None = None, *, kind: str = "continuous", dtype=np.float32):
    """Read a whole band (aligned to ``grid`` if given) as an array with NaN nodata."""
    if grid is None:
        grid = read_grid(path)
    with AlignedRaster(path, grid, kind=kind) as src:
        return src.read(dtype=dtype)


def _temporary_name(path: Path) -> Path:
    return path.with_name(f".{path.name}.partial")


class RasterWriter(contextlib.AbstractContextManager):
    """Write one band on the template grid as a tiled, compressed GeoTIFF.

    The file is written under a hidden temporary name (``.NAME.partial``) and
    renamed to its final name only when the context exits without error, after
    overviews are built; on error the temporary file is removed, so a failed run
    never leaves a half-written layer.

    Parameters
    ----------
    path : path-like
        Final output path.
    grid : GridSpec
    dtype : numpy dtype, default float32
    nodata : number, default NaN for floats
    tags : dict, optional
        Dataset metadata (for example class names of a categorical layer).
    description : str, optional
        Band description (the layer name).
    overviews : bool, default True
        Build internal overviews (factors 2, 4, 8, ... down to about 256 px).
    categorical : bool, default False
        Overviews by nearest neighbour instead of average.
    """

    def __init__(
        self,
        path,
        grid: GridSpec,
        *,
        dtype=np.float32,
        nodata=None,
        tags=None,
        description=None,
        overviews: bool = True,
        categorical: bool = False,
    ):
        self.path = Path(path)
        self.grid = grid
        self.dtype = np.dtype(dtype)
        if nodata is None:
            nodata = np.nan if self.dtype.kind == "f" else None
        self.nodata = nodata
        self.overviews = overviews
        self.categorical = categorical
        self._tmp = _temporary_name(self.path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        profile = dict(
            driver="GTiff",
            width=grid.width,
            height=grid.height,
            count=1,
            dtype=self.dtype.name,
            crs=grid.crs,
            transform=grid.transform,
            nodata=nodata,
            # Deflate reads everywhere; level 1 writes twice as fast as the default 6
            # and, after the predictor, the files are within 2 % of the same size.
            compress="deflate",
            ZLEVEL=1,
            predictor=3 if self.dtype.kind == "f" else 2,
            BIGTIFF="IF_SAFER",
            # Compress tiles on every core (GDAL GTiff creation option).
            NUM_THREADS="ALL_CPUS",
        )
        # GeoTIFF tiles must be multiples of 16; 256 is GDAL's usual choice.
        profile.update(tiled=True, blockxsize=256, blockysize=256)
        self._ds = rasterio.open(self._tmp, "w", **profile)
        if tags:
            self._ds.update_tags(**{k: str(v) for k, v in tags.items()})
        if description:
            self._ds.set_band_description(1, description)

    def write(self, array: np.ndarray, window: Window | None = None):
        """Write an array (NaN = nodata) into ``window`` (whole grid if None)."""
        arr = np.asarray(array)
        if self.dtype.kind != "f" and arr.dtype.kind == "f":
            bad = np.isnan(arr)
            if bad.any() and self.nodata is None:
                raise InputError(
                    f"{self.path.name}: {int(bad.sum())} NaN cell(s) cannot be stored in a {self.dtype} "
                    "raster without a nodata value; give the writer a nodata value"
                )
            arr = np.where(bad, self.nodata, arr)
        self._ds.write(arr.astype(self.dtype, copy=False), 1, window=window)

    def _finish(self):
        if self.overviews:
            factors = []
            f = 2
            while max(self.grid.shape) / f >= 256:
                factors.append(f)
                f *= 2
            if factors:
                resampling = Resampling.nearest if self.categorical else Resampling.average
                self._ds.build_overviews(factors, resampling)
                self._ds.update_tags(ns="rio_overview", resampling=resampling.name)
        self._ds.close()
        os.replace(self._tmp, self.path)

    def abort(self):
        """Close and remove the temporary file (called on error)."""
        with contextlib.suppress(Exception):
            self._ds.close()
        with contextlib.suppress(FileNotFoundError):
            self._tmp.unlink()

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            try:
                self._finish()
            except BaseException:
                self.abort()
                raise
        else:
            self.abort()
        return False


def write_array(path, array: np.ndarray, grid: GridSpec, **kwargs):
    """Write a whole array as a GeoTIFF with :class:`RasterWriter`."""
    if array.shape != grid.shape:
        raise InputError(f"array shape {array.shape} does not match the grid {grid.shape}")
    with RasterWriter(path, grid, dtype=kwargs.pop("dtype", array.dtype), **kwargs) as w:
        w.write(array)
    return Path(path)
