"""Raster input and output on the template grid.

Reading aligns any GDAL raster onto a :class:`GridSpec` on the fly (a warped
virtual raster, so nothing is loaded whole); writing produces tiled, compressed
GeoTIFFs with nodata and overviews under a temporary name that is renamed only
when the file is complete, compressing in a background thread while the caller
computes the next window.
"""

from __future__ import annotations

import contextlib
import functools
import numbers
import os
import queue
import threading
import warnings
from pathlib import Path

import numpy as np
import rasterio
import rasterio.io
import rasterio.transform
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


#: GeoTIFF creation options of every raster written, chosen by measurement (see the
#: Notes of :class:`RasterWriter`, ``tests/benchmarks/raster_writer.py`` and the README
#: "Benchmarks" section). No predictor: see the Notes.
CREATION_OPTIONS = {
    "driver": "GTiff",
    "tiled": True,
    "blockxsize": 256,
    "blockysize": 256,
    "BIGTIFF": "IF_SAFER",
}
#: Codecs a writer may use, each at its fastest level.
CODECS = {
    "zstd": {"compress": "zstd", "ZSTD_LEVEL": 1},
    "deflate": {"compress": "deflate", "ZLEVEL": 1},
}

_STOP = object()
#: Every GDAL call on a writer's dataset holds this lock. Writers' threads then
#: never call GDAL at the same time as each other or as the caller's calls on
#: another writer (closing one while another wrote, or even asking one for its
#: overviews, crashed the process now and then: a segmentation fault or a double
#: free in GDAL). Computing still overlaps writing; only the writers take turns.
_GDAL_CALLS = threading.RLock()


@functools.lru_cache(maxsize=None)
def _gdal_writes(codec: str) -> bool:
    """Whether this GDAL compresses with ``codec``; it would quietly write plain tiles if not."""
    with rasterio.io.MemoryFile() as mem:
        with mem.open(driver="GTiff", width=16, height=16, count=1, dtype="uint8", crs="EPSG:4326",
                      transform=rasterio.transform.from_origin(0, 16, 1, 1), **CODECS[codec]) as ds:
            ds.write(np.zeros((1, 16, 16), np.uint8))
        with mem.open() as ds:
            return ds.compression is not None and ds.compression.name.lower() == codec


class RasterWriter(contextlib.AbstractContextManager):
    """Write one band on the template grid as a tiled, compressed GeoTIFF.

    The file is written under a hidden temporary name (``.NAME.partial``) and
    renamed to its final name only when the context exits without error, after
    overviews are built; on error the temporary file is removed, so a failed run
    never leaves a half-written layer.

    Writes are handed to a background thread, so the caller computes the next
    window while the previous one is compressed and written (GDAL releases the
    GIL while it encodes and writes). :meth:`write` returns as soon as the array
    is queued; it blocks only while ``max_pending`` windows are still waiting,
    which bounds the memory to that many windows per writer. Leaving the context
    waits for the thread, so the file is complete (or removed) when it returns.

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
    compress : {"zstd", "deflate"}, default "zstd"
        Codec, at level 1. Deflate for a file that must open in software whose
        TIFF reader lacks zstd (see Notes).
    max_pending : int, default 1
        Windows handed to the background thread and not yet written (each is a
        copy, so the caller may reuse its array). 0 writes in the caller's
        thread: no copy and no overlap, the choice for one whole-grid write
        (:func:`write_array` makes it).

    Raises
    ------
    OSError, rasterio.errors.RasterioError
        A failure of the background thread (a full disk, for example) is raised
        by the next :meth:`write` or when the context exits, and the temporary
        file is removed.

    Notes
    -----
    Files are zstd-compressed at level 1 in 256 x 256 tiles without a predictor,
    in the writer's thread (or with ``max_pending=0`` on all cores, GDAL
    ``NUM_THREADS``). Overviews are built by GDAL
    (average over valid cells, or nearest for categorical layers) in the
    background thread once the writes have covered as many cells as the grid
    has, so writers that finish together build them at the same time (as many at
    once as there are cores); windows that overlap make them stale and they are
    built again when the context exits. What each choice buys, from
    ``tests/benchmarks/raster_writer.py`` on a 4000 x 4000 grid (CPU seconds on
    one thread to write the file with its overviews and to read it back; size
    with overviews; slope / DEM where they differ):

    ======================  ===========  ===========  ===========
    options                 write CPU s  read CPU s   MB
    ======================  ===========  ===========  ===========
    no compression          0.19 / 0.24  0.03         85 / 85
    zstd 1 (used)           0.41 / 0.39  0.08 / 0.06  71.5 / 66.6
    zstd 1, predictor 3     0.75 / 0.82  0.12 / 0.15  66.1 / 50.9
    deflate 1               1.14 / 1.34  0.16 / 0.20  71.3 / 66.4
    deflate 1, predictor 3  1.38 / 1.21  0.23 / 0.20  67.2 / 50.7
    deflate 6, predictor 3  2.32 / 2.19  0.21 / 0.19  65.9 / 49.9
    lzw, predictor 3        1.66 / 1.62  0.25 / 0.26  88.5 / 65.4
    ======================  ===========  ===========  ===========

    Slopes and aspects barely compress (16 % whatever the codec), so the codec
    is chosen for speed: zstd writes about three times and reads about twice as
    fast as deflate for the same size. The floating-point predictor saves 6 % on
    slopes and 24 % on a smooth DEM at twice the cost of every write and read;
    512 x 512 tiles change nothing measurable; on a class layer (uint8) zstd is
    6 % smaller than deflate and predictor 2 makes files larger. Overviews are
    two thirds of the write time. Decimating each window as it is written (a
    numba 2 x 2 mean) and compressing the levels would cost 0.23-0.30 s instead
    of 0.41, but rasterio cannot write into the overview levels of an open file
    (only GDAL's C API can), and on sizes not divisible by two GDAL's own
    overviews scale their windows by ``W / ceil(W / 2)`` and differ from 2 x 2
    block means; so GDAL builds them, off the caller's thread.

    zstd in GeoTIFF is read by every GDAL built with libzstd (GDAL 2.3 and
    later): rasterio's wheels, conda-forge, the Debian and Ubuntu packages and
    the desktop GIS built on them. A program with another TIFF reader may lack
    it; ``compress="deflate"`` writes for those, and ``gdal_translate -co
    COMPRESS=DEFLATE -co TILED=YES in.tif out.tif`` converts a file.

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> from rasterio.transform import from_origin
    >>> from mlsites.grid import GridSpec, RasterWriter, iter_windows
    >>> grid = GridSpec("EPSG:32631", from_origin(0, 1000, 10, 10), 100, 100)
    >>> path = os.path.join(tempfile.mkdtemp(), "ones.tif")
    >>> with RasterWriter(path, grid) as w:
    ...     for win in iter_windows(grid, block_rows=32):
    ...         w.write(np.ones((int(win.core.height), 100)), win.core)
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
        compress: str = "zstd",
        max_pending: int = 1,
    ):
        if not (isinstance(max_pending, int) and max_pending >= 0):
            raise InputError(f"max_pending={max_pending!r} must be an integer >= 0")
        if compress not in CODECS:
            raise InputError(f"compress={compress!r}; choose one of {', '.join(CODECS)}")
        if not _gdal_writes(compress):
            warnings.warn(f"{Path(path).name}: this GDAL build cannot write {compress}; writing deflate instead",
                          UserWarning, stacklevel=2)
            compress = "deflate"
        self.path = Path(path)
        self.grid = grid
        self.dtype = np.dtype(dtype)
        if nodata is None:
            nodata = np.nan if self.dtype.kind == "f" else None
        self.nodata = nodata
        self.overviews = overviews
        self.categorical = categorical
        self.max_pending = max_pending
        self._tmp = _temporary_name(self.path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        profile = dict(
            CREATION_OPTIONS,
            **CODECS[compress],
            width=grid.width,
            height=grid.height,
            count=1,
            dtype=self.dtype.name,
            crs=grid.crs,
            transform=grid.transform,
            nodata=nodata,
            # Writes from the caller's thread compress on all cores; a writer with
            # its own thread compresses there, which overlaps the caller's work
            # already (GDAL's pool on top cost 15 % more CPU and wall time).
            NUM_THREADS="1" if max_pending else "ALL_CPUS",
        )
        with _GDAL_CALLS:
            self._ds = rasterio.open(self._tmp, "w", **profile)
            if tags:
                self._ds.update_tags(**{k: str(v) for k, v in tags.items()})
            if description:
                self._ds.set_band_description(1, description)
        self._error: BaseException | None = None
        self._cancelled = False
        self._cells_written = 0
        self._overviews_built = False
        self._thread = None
        if max_pending:
            self._slots = threading.Semaphore(max_pending)
            self._queue: queue.SimpleQueue = queue.SimpleQueue()
            self._thread = threading.Thread(target=self._drain, name=f"write {self.path.name}", daemon=True)
            self._thread.start()

    def write(self, array: np.ndarray, window: Window | None = None):
        """Write an array (NaN = nodata) into ``window`` (whole grid if None).

        With ``max_pending > 0`` the array is cast (or copied) to the file's
        dtype and queued, so the caller may reuse or change its buffer at once.
        """
        if self._ds.closed:
            raise ValueError(f"{self.path.name}: the writer is closed; write inside its with block")
        self._raise_pending()
        arr = self._prepare(array)
        if self._thread is None:
            self._write_now(arr, window)
            return
        if isinstance(array, np.ndarray) and np.may_share_memory(arr, array):
            arr = arr.copy()
        self._slots.acquire()
        if self._error is not None:
            self._slots.release()
            self._raise_pending()
        self._queue.put((arr, window))

    def _prepare(self, array):
        arr = np.asarray(array)
        if self.dtype.kind != "f" and arr.dtype.kind == "f":
            bad = np.isnan(arr)
            if bad.any() and self.nodata is None:
                raise InputError(
                    f"{self.path.name}: {int(bad.sum())} NaN cell(s) cannot be stored in a {self.dtype} "
                    "raster without a nodata value; give the writer a nodata value"
                )
            arr = np.where(bad, self.nodata, arr)
        return arr.astype(self.dtype, copy=False)

    def _write_now(self, arr, window):
        with _GDAL_CALLS:
            self._ds.write(arr, 1, window=window)
        # Once as many cells as the grid has are written, the overviews are built
        # here (in the writer's thread), so several writers finishing together
        # build theirs at the same time. A later write (windows that overlap)
        # makes them stale and they are built again at the end.
        covered_before = self._cells_written >= self.grid.n_cells
        self._overviews_built = False
        self._cells_written += arr.size
        if not covered_before and self._cells_written >= self.grid.n_cells:
            self._build_overviews()

    def _build_overviews(self):
        factors, f = [], 2
        while self.overviews and max(self.grid.shape) / f >= 256:
            factors.append(f)
            f *= 2
        if factors:
            with _GDAL_CALLS:  # one build at a time over all writers, so memory stays bounded too
                self._ds.build_overviews(factors, Resampling.nearest if self.categorical else Resampling.average)
        self._overviews_built = True

    def _drain(self):
        # The background thread owns the dataset between the first write and
        # close; after a failure it keeps taking items (without writing) so a
        # caller blocked on a slot always wakes up.
        while True:
            item = self._queue.get()
            if item is _STOP:
                return
            try:
                if self._error is None and not self._cancelled:
                    self._write_now(*item)
            except BaseException as exc:  # handed to the caller's thread
                self._error = exc
            finally:
                # Drop the window before waiting for the next one, or each writer
                # would hold one more window than max_pending.
                del item
                self._slots.release()

    def _stop_thread(self):
        if self._thread is not None and self._thread.is_alive():
            self._queue.put(_STOP)
            self._thread.join()

    def _raise_pending(self):
        if self._error is not None:
            raise self._error

    def _finish(self):
        self._stop_thread()
        self._raise_pending()
        if not self._overviews_built:
            self._build_overviews()
        with _GDAL_CALLS:
            if self._ds.overviews(1):
                resampling = Resampling.nearest if self.categorical else Resampling.average
                self._ds.update_tags(ns="rio_overview", resampling=resampling.name)
            self._ds.close()
        os.replace(self._tmp, self.path)

    def abort(self):
        """Stop the background thread, close and remove the temporary file (called on error)."""
        self._cancelled = True
        self._stop_thread()
        with contextlib.suppress(Exception), _GDAL_CALLS:
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
    # One write of the whole array: nothing to overlap, and a queued copy would
    # double the memory.
    kwargs.setdefault("max_pending", 0)
    with RasterWriter(path, grid, dtype=kwargs.pop("dtype", array.dtype), **kwargs) as w:
        w.write(array)
    return Path(path)
