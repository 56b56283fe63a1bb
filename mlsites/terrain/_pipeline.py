"""Derive terrain layers from a DEM file, window by window, into GeoTIFFs.

The kernels in this subpackage work on arrays; this module runs them over a DEM
of any size. Local layers (everything but hydrology and distances) are computed
in strips with a halo wide enough for the largest neighbourhood, so memory is
bounded whatever the DEM size and results do not depend on the strip size.
Hydrology and distance layers need the whole grid at once (see the README for
their memory per cell).
"""

from __future__ import annotations

import contextlib
import json
import math
import re
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from mlsites import __version__
from mlsites._files import staged_folder
from mlsites._validation import check_cell_pair, gdal_reason
from mlsites.errors import CRSError, InputError, OutputExistsError, VectorReadError
from mlsites.grid import AlignedRaster, GridSpec, RasterWriter, bounded_gdal_cache, iter_windows, read_grid

__all__ = [
    "LOCAL_LAYERS",
    "WHOLE_GRID_LAYERS",
    "DEFAULT_LAYERS",
    "TerrainSettings",
    "compute_terrain",
    "layer_names",
]

#: Value of flat cells in the aspect file (aspect is undefined there).
FLAT_ASPECT = -1.0
#: Layers computed window by window, with their description and units.
LOCAL_LAYERS = {
    "slope": ("slope gradient, Horn (1981)", "degrees"),
    "aspect": ("downslope direction clockwise from north, flat cells -1", "degrees"),
    "northness": ("cosine of aspect, flat cells 0", "unitless"),
    "eastness": ("sine of aspect, flat cells 0", "unitless"),
    "tpi_{r}m": ("topographic position index, disc of radius r", "metres"),
    "tpi_{r}m_std": ("standardised topographic position index, disc of radius r", "standard deviations"),
    "ruggedness": ("terrain ruggedness index, Riley et al. (1999)", "metres"),
    "roughness": ("max minus min of the 3 x 3 window", "metres"),
    "profile_curvature": ("curvature along the slope line, Zevenbergen & Thorne (1987), convex positive", "1/m"),
    "plan_curvature": ("curvature along the contour, Zevenbergen & Thorne (1987), convex positive", "1/m"),
    "landform": ("geomorphon landform class, Jasiewicz & Stepinski (2013); codes from the lowest "
                 "(1 pit) to the highest relative position (10 peak)", "class"),
}
#: Layers that need the whole grid in memory.
WHOLE_GRID_LAYERS = {
    "filled_dem": ("DEM with depressions filled, priority-flood (Barnes et al. 2014)", "metres"),
    "flow_direction": ("D8 flow direction code (1 E, 2 SE, 4 S, 8 SW, 16 W, 32 NW, 64 N, 128 NE)", "code"),
    "flow_accumulation": ("cells draining through each cell, itself included", "cells"),
    "streams": ("stream cells: contributing area above the threshold", "1 stream, 0 not"),
    "stream_distance": ("Euclidean distance to the nearest stream cell", "metres"),
    "height_above_drainage": ("height above the stream cell (or grid-edge outlet) reached along the D8 path (HAND)", "metres"),
    "distance_{name}": ("Euclidean distance to the features of a vector layer", "metres"),
}
#: What ``mlsites terrain`` writes when no layers are named.
DEFAULT_LAYERS = (
    "slope", "aspect", "northness", "eastness", "tpi", "ruggedness", "roughness",
    "profile_curvature", "plan_curvature", "landform",
    "flow_direction", "flow_accumulation", "streams", "stream_distance", "height_above_drainage",
)
_GRADIENT_LAYERS = {"slope", "aspect", "northness", "eastness", "profile_curvature", "plan_curvature"}
_HYDRO = ("filled_dem", "flow_direction", "flow_accumulation", "streams", "stream_distance",
          "height_above_drainage")
_INT_LAYERS = {  # dtype, nodata
    "landform": (np.uint8, 0),
    "flow_direction": (np.uint8, 255),
    "flow_accumulation": (np.uint32, 0),
    "streams": (np.uint8, 255),
}
_NAME_RE = re.compile(r"^[a-z][a-z0-9_]*$")


@dataclass(frozen=True)
class TerrainSettings:
    """Parameters of the terrain stage.

    Parameters
    ----------
    layers : tuple of str
        Layer names; ``"tpi"`` expands to one raw and one standardised TPI layer
        per radius. Default :data:`DEFAULT_LAYERS`.
    tpi_radii_m : tuple of float
        Radii of the TPI discs in metres (each at least one cell).
    landform_lookup_cells : int
        Geomorphon lookup distance in cells.
    landform_flatness_deg : float
        Geomorphon flatness threshold in degrees.
    stream_threshold_km2 : float
        Contributing area above which a cell is a stream.
    vectors : dict of str to path
        Vector layers turned into ``distance_<name>`` layers.
    stream_vector : path, optional
        A user's stream lines; when given, ``stream_distance`` measures to them
        instead of to the streams derived from the DEM.
    block_rows : int, optional
        Rows per window of the local layers; default keeps windows near 8 M cells.
    """

    layers: tuple = DEFAULT_LAYERS
    tpi_radii_m: tuple = (100.0, 500.0)
    landform_lookup_cells: int = 20
    landform_flatness_deg: float = 1.0
    stream_threshold_km2: float = 0.5
    vectors: dict = field(default_factory=dict)
    stream_vector: str | None = None
    block_rows: int | None = None


def _radius_label(r: float) -> str:
    return f"{r:g}".replace(".", "p")


def layer_names(settings: TerrainSettings) -> list[str]:
    """Output layer names of ``settings`` in order, after validating them."""
    known = set(LOCAL_LAYERS) | set(WHOLE_GRID_LAYERS) | {"tpi", "distances"}
    names: list[str] = []
    for name in settings.layers:
        if name == "tpi":
            for r in settings.tpi_radii_m:
                names += [f"tpi_{_radius_label(r)}m", f"tpi_{_radius_label(r)}m_std"]
        elif name == "distances":
            names += [f"distance_{v}" for v in settings.vectors]
        elif name in known and "{" not in name:
            names.append(name)
        else:
            choices = sorted(n for n in known if "{" not in n)
            raise InputError(
                f"unknown terrain layer {name!r}; choose from {', '.join(choices)} "
                "(tpi expands to one layer per radius, distances to one per vector layer)"
            )
    for vname in settings.vectors:
        if not _NAME_RE.match(vname):
            raise InputError(
                f"vector layer name {vname!r} must be lower case letters, digits and underscores"
            )
        if f"distance_{vname}" not in names:
            names.append(f"distance_{vname}")
    return list(dict.fromkeys(names))


def _tpi_radius(name: str, settings: TerrainSettings) -> float:
    for r in settings.tpi_radii_m:
        if name.startswith(f"tpi_{_radius_label(r)}m"):
            return float(r)
    raise AssertionError(name)


def _check_settings(settings: TerrainSettings, grid: GridSpec, names: list[str], dem_path):
    if any(n.startswith("tpi_") for n in names):
        cell = None if grid.is_geographic else max(_metric_res(grid))
        for r in settings.tpi_radii_m:
            if isinstance(r, bool) or not isinstance(r, (int, float)) or not math.isfinite(r) or r <= 0:
                raise InputError(f"TPI radius {r!r} m must be a positive number of metres; "
                                 "give radii of at least one cell, e.g. 100,500")
            if cell is not None and r < cell:
                raise InputError(
                    f"TPI radius {r:g} m is smaller than one cell ({cell:g} m); "
                    "give radii of at least one cell"
                )
    if settings.landform_lookup_cells < 1:
        raise InputError(f"landform lookup distance {settings.landform_lookup_cells} cells must be >= 1")
    if settings.stream_threshold_km2 <= 0:
        raise InputError(f"stream threshold {settings.stream_threshold_km2} km2 must be positive")
    if grid.is_geographic:
        needs_metric = [n for n in names if n not in _GRADIENT_LAYERS | {"ruggedness", "roughness"}]
        if needs_metric:
            raise CRSError(
                f"{dem_path}: the DEM is in degrees; layers {', '.join(needs_metric)} need a grid "
                "in metres. Reproject it first, for example: gdalwarp -t_srs EPSG:<UTM zone> "
                "-r bilinear dem.tif dem_utm.tif (slope, aspect, curvature, ruggedness and "
                "roughness alone work on degree grids, with metric cell sizes per row)"
            )
    if min(grid.shape) < 3:
        raise InputError(
            f"{dem_path}: DEM of {grid.height} x {grid.width} cells is smaller than the 3 x 3 "
            "terrain kernels; give a DEM of at least 3 x 3 cells"
        )


def _metric_res(grid: GridSpec) -> tuple[float, float]:
    """Cell size (dx, dy) in metres of a projected grid (its CRS unit may be feet)."""
    return check_cell_pair(grid.cellsize())


def _halo(names: list[str], settings: TerrainSettings, grid: GridSpec) -> int:
    halo = 1
    for n in names:
        if n.startswith("tpi_"):
            halo = max(halo, int(math.ceil(_tpi_radius(n, settings) / min(_metric_res(grid)))))
        elif n == "landform":
            halo = max(halo, settings.landform_lookup_cells)
    return halo


def _local_layer(name, block, cellsize, settings, memo, scratch=None):
    """Compute one local layer on a padded block (the caller trims the halo).

    ``memo`` is a dict shared by the layers of one block, so slope and aspect come
    from a single Horn pass. ``scratch`` (a dict kept across blocks) lends the Horn
    pass the output arrays of the previous block of the same shape: touching fresh
    memory costs more than the kernel. The writer copies what it queues, so
    reusing them is safe.
    """
    from mlsites import terrain as t

    if name in ("slope", "aspect"):
        if "horn" not in memo:
            out = None
            if scratch is not None:
                out = scratch.get("horn")
                if out is None or out[0].shape != block.shape:
                    out = scratch["horn"] = (np.empty(block.shape), np.empty(block.shape))
            slope_deg, aspect_deg = t.slope_aspect(block, cellsize, out=out)
            # Flat cells have no aspect; the file marks them FLAT_ASPECT so a GIS
            # user can tell them from nodata.
            aspect_deg[np.isnan(aspect_deg) & ~np.isnan(slope_deg)] = FLAT_ASPECT
            memo["horn"] = slope_deg, aspect_deg
        return memo["horn"][0 if name == "slope" else 1]
    if name == "northness":
        return t.northness(block, cellsize)
    if name == "eastness":
        return t.eastness(block, cellsize)
    if name == "ruggedness":
        return t.ruggedness(block)
    if name == "roughness":
        return t.roughness(block)
    if name == "profile_curvature":
        return t.profile_curvature(block, cellsize)
    if name == "plan_curvature":
        return t.plan_curvature(block, cellsize)
    if name == "landform":
        return t.geomorphons(
            block, cellsize, lookup_cells=settings.landform_lookup_cells,
            flatness_deg=settings.landform_flatness_deg,
        )
    if name.startswith("tpi_"):
        return t.tpi(block, cellsize, radius=_tpi_radius(name, settings))
    raise AssertionError(name)


def _writer_for(path, grid, name, *, max_pending=1):
    dtype, nodata = _INT_LAYERS.get(name, (np.float32, None))
    tags = {}
    if name == "landform":
        from mlsites.terrain import LANDFORM_CLASSES

        tags = {f"class_{k}": v for k, v in LANDFORM_CLASSES.items()}
    elif name == "flow_direction":
        tags = {"encoding": WHOLE_GRID_LAYERS["flow_direction"][0]}
    if name.startswith("tpi_"):
        key = "tpi_{r}m_std" if name.endswith("_std") else "tpi_{r}m"
    else:
        key = "distance_{name}" if name.startswith("distance_") else name
    about, units = {**LOCAL_LAYERS, **WHOLE_GRID_LAYERS}[key]
    tags.update(layer=name, description=about, units=units, software=f"mlsites {__version__}")
    return RasterWriter(path, grid, dtype=dtype, nodata=nodata, tags=tags, description=name,
                        categorical=name in _INT_LAYERS, max_pending=max_pending)


class _Stats:
    """Exact running sums per row (math.fsum), so results ignore window sizes."""

    def __init__(self):
        self.sums, self.squares, self.count = [], [], 0
        self.min, self.max = math.inf, -math.inf

    def add(self, arr):
        from mlsites.terrain._kernels import _row_moments_kernel

        n_rows = arr.shape[0]
        sums, squares, lows, highs = (np.empty(n_rows) for _ in range(4))
        counts = np.empty(n_rows, dtype=np.int64)
        _row_moments_kernel(arr, sums, squares, counts, lows, highs)
        n = int(counts.sum())
        if n == 0:
            return
        self.sums.extend(sums.tolist())
        self.squares.extend(squares.tolist())
        self.count += n
        self.min = min(self.min, float(np.nanmin(lows)))
        self.max = max(self.max, float(np.nanmax(highs)))

    def summary(self):
        if self.count == 0:
            return {"valid_cells": 0}
        mean = math.fsum(self.sums) / self.count
        var = max(math.fsum(self.squares) / self.count - mean * mean, 0.0)
        return {"valid_cells": self.count, "min": self.min, "max": self.max,
                "mean": mean, "std": math.sqrt(var)}


def _progress(total, desc, quiet):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, unit="win", disable=quiet, leave=False)


def compute_terrain(dem_path, out_dir, settings: TerrainSettings | None = None, *,
                    overwrite: bool = False, quiet: bool = False, log=None) -> dict:
    """Derive terrain layers from a DEM and write one GeoTIFF per layer.

    Parameters
    ----------
    dem_path : path-like
        DEM raster (any GDAL format; metres, projected CRS for most layers).
    out_dir : path-like
        Output folder; gets ``<layer>.tif`` per layer and ``terrain.json``.
    settings : TerrainSettings, optional
    overwrite : bool, default False
        Replace existing layer files; otherwise existing outputs are an error.
    quiet : bool, default False
        Hide progress bars.
    log : callable, optional
        Receives one line per finished layer (default: nothing).

    Returns
    -------
    dict
        The summary also written to ``terrain.json``: grid, settings, and per
        layer its file, units, statistics and throughput.

    Raises
    ------
    RasterReadError, InputError, CRSError, OutputExistsError
        Before any output is written. All outputs go to a staging folder inside
        ``out_dir`` and are moved into place only when every layer succeeded.
    """
    settings = settings or TerrainSettings()
    log = log or (lambda msg: None)
    grid = read_grid(dem_path)
    names = layer_names(settings)
    _check_settings(settings, grid, names, dem_path)
    out_dir = Path(out_dir)
    targets = [out_dir / f"{n}.tif" for n in names] + [out_dir / "terrain.json"]
    existing = [p.name for p in targets if p.exists()]
    if existing and not overwrite:
        raise OutputExistsError(
            f"{out_dir}: {len(existing)} output(s) exist already ({', '.join(existing[:3])}"
            f"{', ...' if len(existing) > 3 else ''}); use --overwrite or another --out folder"
        )
    vectors = {n: Path(p) for n, p in settings.vectors.items()}
    for what, p in ([(f"vector layer {n!r}", p) for n, p in vectors.items()]
                    + ([("the stream lines (stream_lines)", Path(settings.stream_vector))]
                       if settings.stream_vector else [])):
        if not p.exists():
            raise VectorReadError(f"{p}: {what} not found; check the path")

    local = [n for n in names if not (n in _HYDRO or n.startswith("distance_"))]
    whole = [n for n in names if n not in local]
    layers_info: dict[str, dict] = {}
    started = time.perf_counter()
    # terrain.json comes last: a folder with it holds every layer it lists.
    with staged_folder(out_dir, files=[p.name for p in targets]) as staging:
        # The DEM is read once by the windowed pass and once whole for the
        # whole-grid layers; its valid cells are counted on the way.
        with bounded_gdal_cache(), AlignedRaster(dem_path, grid) as dem:
            if not _has_data(dem_path, dem, grid, settings):
                _check_valid(0, dem)
            if local:
                info, n_valid = _run_local(dem, grid, local, settings, staging, quiet, log)
                layers_info.update(info)
            if whole:
                info, n_valid = _run_whole(dem, grid, whole, settings, vectors, staging, quiet, log)
                layers_info.update(info)
        summary = {
            "software": f"mlsites {__version__}",
            "dem": str(dem_path),
            "grid": grid.to_dict(),
            "valid_dem_cells": n_valid,
            "settings": {
                "tpi_radii_m": list(settings.tpi_radii_m),
                "landform_lookup_cells": settings.landform_lookup_cells,
                "landform_flatness_deg": settings.landform_flatness_deg,
                "stream_threshold_km2": settings.stream_threshold_km2,
                "vectors": {k: str(v) for k, v in settings.vectors.items()},
                "stream_vector": settings.stream_vector,
            },
            "layers": {n: layers_info[n] for n in names},
            "seconds": round(time.perf_counter() - started, 3),
        }
        (staging / "terrain.json").write_text(json.dumps(summary, indent=2))
    return summary


def _has_data(dem_path, dem, grid, settings) -> bool:
    """Whether the DEM has a valid cell, looked for before any work.

    A decimated read (at most 256 x 256 cells) settles it for nearly every DEM;
    only when it finds nothing is the DEM read in full.
    """
    from rasterio.enums import Resampling

    from mlsites.grid import open_raster

    shape = (min(grid.height, 256), min(grid.width, 256))
    with open_raster(dem_path) as src:  # the DEM defines the grid: no alignment needed
        sample = src.read(1, out_shape=shape, resampling=Resampling.nearest, masked=True)
    if dem.nodata is not None:
        sample = np.ma.masked_equal(sample, dem.nodata)
    if np.ma.count(np.ma.masked_invalid(sample)):
        return True
    return any(np.count_nonzero(~np.isnan(dem.read(w.core)))
               for w in iter_windows(grid, block_rows=_block_rows(grid, settings, 0)))


def _check_valid(n_valid, dem):
    if n_valid == 0:
        raise InputError(f"{dem.path}: every cell of the DEM is nodata; nothing to derive")
    return n_valid


def _block_rows(grid, settings, halo):
    if settings.block_rows:
        return int(settings.block_rows)
    return max(16, min(grid.height, (8_000_000 // (grid.width + 2 * halo)) - 2 * halo))


def _run_local(dem, grid, names, settings, staging, quiet, log):
    halo = _halo(names, settings, grid)
    windows = list(iter_windows(grid, block_rows=_block_rows(grid, settings, halo), halo=halo))
    raw = [n for n in names if not n.endswith("_std")]
    stats = {n: _Stats() for n in raw}
    seconds = dict.fromkeys(raw, 0.0)
    n_valid = 0
    # Each writer finishes (overviews, rename) on success and removes its temporary
    # file if anything fails.
    with contextlib.ExitStack() as stack:
        writers = {n: stack.enter_context(_writer_for(staging / f"{n}.tif", grid, n)) for n in raw}
        bar = stack.enter_context(_progress(len(windows), "local terrain layers", quiet))
        scratch = {}
        for w in windows:
            block = dem.read(w.padded)
            n_valid += int(np.count_nonzero(~np.isnan(block[w.trim])))
            row0 = int(w.padded.row_off)
            cellsize = grid.cellsize(np.arange(row0, row0 + int(w.padded.height)))
            memo = {}
            for n, writer in writers.items():
                t0 = time.perf_counter()
                out = _local_layer(n, block, cellsize, settings, memo, scratch)[w.trim]
                seconds[n] += time.perf_counter() - t0
                if n != "landform":
                    stats[n].add(out)
                writer.write(out, window=w.core)
            bar.update(1)
    _check_valid(n_valid, dem)
    info = {}
    for n in raw:
        info[n] = _layer_info(n, stats[n].summary() if n != "landform" else {}, seconds[n], grid)
        log(f"{n}: {seconds[n]:.1f} s")
    for n in [n for n in names if n.endswith("_std")]:
        raw = n[: -len("_std")]
        s = info[raw]
        if s.get("valid_cells", 0) == 0 or not s.get("std"):
            raise InputError(f"{raw} has no variation over the DEM; cannot standardise it")
        t0 = time.perf_counter()
        _standardise_file(staging / f"{raw}.tif", staging / f"{n}.tif", grid, n, s["mean"], s["std"], settings)
        info[n] = _layer_info(n, {"mean_of_raw": s["mean"], "std_of_raw": s["std"]},
                              time.perf_counter() - t0, grid)
        log(f"{n}: {info[n]['seconds']:.1f} s")
    return info, n_valid


def _standardise_file(src_path, dst_path, grid, name, mean, sd, settings):
    with AlignedRaster(src_path, grid) as src, _writer_for(dst_path, grid, name) as dst:
        for w in iter_windows(grid, block_rows=_block_rows(grid, settings, 0)):
            dst.write((src.read(w.core, dtype=np.float64) - mean) / sd, window=w.core)


def _layer_info(name, stats, seconds, grid):
    info = {"file": f"{name}.tif", "seconds": round(seconds, 3),
            "cells_per_second": round(grid.n_cells / seconds) if seconds > 0 else None}
    info.update(stats)
    return info


def _run_whole(dem, grid, names, settings, vectors, staging, quiet, log):
    from mlsites import terrain as t

    info = {}
    cellsize = grid.cellsize()
    z = dem.read()
    n_valid = _check_valid(int(np.count_nonzero(~np.isnan(z))), dem)
    hydro = [n for n in names if n in _HYDRO]
    if settings.stream_vector and "stream_distance" in hydro:
        hydro.remove("stream_distance")
        vectors = dict(vectors, __streams__=Path(settings.stream_vector))
    # The DEM's nodata cells for the distance layers, kept as bits (1/8 byte per
    # cell) so the DEM itself can be freed inside the hydrology chain.
    nodata_bits = np.packbits(np.isnan(z)) if vectors else None
    if hydro:
        t0 = time.perf_counter()
        layer_of = {"filled": "filled_dem", "direction": "flow_direction", "accumulation": "flow_accumulation",
                    "streams": "streams", "stream_distance": "stream_distance", "hand": "height_above_drainage"}

        def write(key, array):
            # Each layer goes to disk as soon as it is final, so the chain keeps only
            # the grids later steps need (README: bytes per cell of the hydrology).
            _write_whole(staging, grid, layer_of[key], array)

        # Hand the only reference over: the chain frees the DEM once it is filled.
        held = [z]
        del z
        t.hydrology_layers(held.pop(), cellsize, stream_threshold_km2=settings.stream_threshold_km2,
                           wanted={k for k, v in layer_of.items() if v in hydro}, on_layer=write)
        seconds = time.perf_counter() - t0
        for name in hydro:  # one chain: the time is that of all of them together
            info[name] = _layer_info(name, {"timed_together_with": hydro}, seconds, grid)
        log(f"hydrology ({', '.join(hydro)}): {seconds:.1f} s")
    else:
        del z
    for vname, path in vectors.items():
        name = "stream_distance" if vname == "__streams__" else f"distance_{vname}"
        t0 = time.perf_counter()
        mask = _rasterize_vector(path, grid, vname)
        dist = t.distance_to_cells(mask, cellsize)
        del mask
        dist[np.unpackbits(nodata_bits, count=grid.n_cells).reshape(grid.shape).view(bool)] = np.nan
        _write_whole(staging, grid, name, dist)
        info[name] = _layer_info(name, {}, time.perf_counter() - t0, grid)
        log(f"{name}: {info[name]['seconds']:.1f} s")
    return info, n_valid


def _write_whole(staging, grid, name, array):
    # Written in this thread: a queued copy of a whole grid would raise the
    # hydrology chain's bytes per cell.
    with _writer_for(staging / f"{name}.tif", grid, name, max_pending=0) as w:
        w.write(array)


def _rasterize_vector(path, grid, name):
    """Cells touched by the features of a vector layer, as a boolean grid."""
    import geopandas as gpd
    from rasterio.features import rasterize

    # The user's stream lines travel under an internal name; messages use the option's.
    what = "the stream lines (stream_lines)" if name == "__streams__" else f"vector layer {name!r}"
    try:
        gdf = gpd.read_file(path)
    except Exception as exc:  # pyogrio raises several types for unreadable files
        raise VectorReadError(f"{path}: cannot read {what} ({gdal_reason(exc)}); give a GeoPackage, "
                              "GeoJSON or Shapefile") from None
    if gdf.crs is None:
        raise CRSError(f"{path}: {what} has no CRS; assign one before using it (in a GIS, or with "
                       "ogr2ogr -a_srs EPSG:xxxx)")
    gdf = gdf[~(gdf.geometry.is_empty | gdf.geometry.isna())].to_crs(grid.crs)
    mask = rasterize(((g, 1) for g in gdf.geometry), out_shape=grid.shape, transform=grid.transform,
                     fill=0, all_touched=True, dtype="uint8").astype(bool)
    if not mask.any():
        raise InputError(f"{path}: no feature of {what} falls on the study grid; check its CRS and extent")
    return mask
