"""The feature layers a map reads, from a model card: the run's files or a new DEM's.

A model card lists every feature with its file and hash and says how the files
were made (see :mod:`mlsites.experiment._recipe`). Without a new DEM the map
reads the run's own layer files, after checking each against its hash; with one
(a neighbouring region, a new survey area) the terrain and distance layers are
derived for that DEM with the card's settings into a cache, and the input
rasters are aligned onto its grid as they are read.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from mlsites.errors import GridMismatchError, InputError
from mlsites.grid import AlignedRaster, GridSpec, RasterWriter, iter_windows, open_raster, read_grid

__all__ = ["FeatureLayer", "FeatureSource", "resolve_features", "LayerReader"]


@dataclass(frozen=True)
class FeatureLayer:
    """One feature of the model: its name, the file read for it, its kind and band."""

    name: str
    path: str
    kind: str
    band: int = 1


@dataclass(frozen=True)
class FeatureSource:
    """Where a map reads its features: the grid, one layer per feature, and a summary.

    ``info`` goes to ``map.json``: ``source`` ("run layers" or "derived for DEM"),
    the DEM, whether it was aligned onto another grid, and the input layers'
    coverage.
    """

    grid: GridSpec
    layers: tuple
    info: dict


def _check_file(entry, what, fix, check_hash):
    from mlsites.experiment._hashing import file_digest

    path = Path(entry["path"])
    if not path.exists():
        raise InputError(f"{path}: {what} not found; {fix}")
    if check_hash and entry.get("sha256") and file_digest(path) != entry["sha256"]:
        raise InputError(f"{path}: {what} differs from the file the model was trained on (SHA-256 "
                         f"{entry['sha256'][:16]}... in the model card); {fix}")
    return path


def _recipe(card, card_path):
    entries = card.get("feature_layers")
    if not entries or "terrain" not in card:
        raise InputError(f"{card_path}: the model card does not say how to rebuild its features (no "
                         "feature_layers); re-run the experiment with this version to write a complete card")
    names = [e["name"] for e in entries]
    missing = [f for f in card["features"] if f not in names]
    if missing:
        raise InputError(f"{card_path}: feature(s) {', '.join(missing)} of the model have no layer in the card "
                         f"(layers: {', '.join(names)}); the card does not match its model, re-run the experiment")
    by_name = {e["name"]: e for e in entries}
    return [by_name[f] for f in card["features"]]


def resolve_features(card, card_path, *, dem=None, cache_dir=None, fresh=False, quiet=False, log=None,
                     check_hashes=True) -> FeatureSource:
    """The grid and feature layers of a map of ``card``'s model.

    Parameters
    ----------
    card : dict
        The model card.
    card_path : path-like
        Its file (for messages).
    dem : path-like, optional
        Map this DEM instead of the study's: terrain and distance layers are
        derived for it with the card's settings. A DEM in another CRS or cell size
        is first aligned (bilinear) onto a grid of the model's CRS and cell size,
        snapped to the model grid's cell lattice, and the log says so.
    cache_dir : path-like, optional
        Where layers derived for ``dem`` are cached (default: the run's cache
        folder recorded in the card).
    fresh : bool, default False
        Derive the layers again even when cached.
    check_hashes : bool, default True
        Check every file the card names against its SHA-256.

    Returns
    -------
    FeatureSource

    Raises
    ------
    InputError
        The card lacks a feature, a file is missing or differs from its hash, a
        layer is not on the model grid, or an input raster does not cover ``dem``.
    """
    log = log or (lambda m: None)
    entries = _recipe(card, card_path)
    fix = "re-run the experiment to rebuild it, or map another DEM with --dem"
    if dem is None:
        grid = GridSpec.from_dict(card["grid"])
        layers = []
        for e in entries:
            what = f"layer {e['name']!r} ({'the run cached layer' if e['source'] == 'terrain' else 'input raster'})"
            path = _check_file(e, what, fix if e["source"] == "terrain" else "restore the file the model was "
                               "trained on", check_hashes)
            if e["source"] == "terrain":
                with open_raster(path) as src:
                    if not grid.matches(src.crs, src.transform, (src.height, src.width)):
                        raise GridMismatchError(f"{path}: layer {e['name']!r} is not on the model's grid "
                                                f"{grid.height} x {grid.width}; {fix}")
            layers.append(FeatureLayer(e["name"], str(path), e["kind"], int(e.get("band", 1))))
        return FeatureSource(grid, tuple(layers), {"source": "run layers", "dem": card["terrain"]["dem"]["path"]})
    return _derive_for_dem(card, card_path, entries, Path(dem), cache_dir, fresh, quiet, log, check_hashes)


def _model_lattice_grid(dem_grid: GridSpec, model: GridSpec) -> GridSpec:
    """Grid in the model's CRS and cell size, on its cell lattice, covering ``dem_grid``."""
    from rasterio.warp import transform_bounds
    from affine import Affine

    bounds = dem_grid.bounds
    if dem_grid.crs != model.crs:
        bounds = transform_bounds(dem_grid.crs, model.crs, *bounds, densify_pts=21)
    left, bottom, right, top = bounds
    dx, dy = model.res
    ox, oy = model.transform.c, model.transform.f
    # a small tolerance keeps an edge that lies on the lattice from gaining a cell
    c0 = math.floor((left - ox) / dx + 1e-9)
    c1 = math.ceil((right - ox) / dx - 1e-9)
    r0 = math.floor((oy - top) / dy + 1e-9)
    r1 = math.ceil((oy - bottom) / dy - 1e-9)
    return GridSpec(model.crs, Affine(dx, 0.0, ox + c0 * dx, 0.0, -dy, oy - r0 * dy), c1 - c0, r1 - r0)


def _aligned_dem(dem: Path, grid: GridSpec, cache_dir: Path, dem_sha: str) -> tuple[Path, str]:
    from mlsites.experiment._hashing import settings_digest
    from mlsites.grid import bounded_gdal_cache

    key = settings_digest({"dem": dem_sha, "grid": grid.to_dict()})[:16]
    path = cache_dir / f"dem-{key}.tif"
    if not path.exists():
        cache_dir.mkdir(parents=True, exist_ok=True)
        with bounded_gdal_cache(), AlignedRaster(dem, grid, kind="continuous") as src, \
                RasterWriter(path, grid, dtype=np.float32, description="elevation",
                             tags={"layer": "elevation", "aligned_from": str(dem)}) as out:
            for w in iter_windows(grid, block_rows=512):
                out.write(src.read(w.core), window=w.core)
    return path, key


def _coverage(path, band, grid: GridSpec) -> float:
    """Share of ``grid``'s bounding box inside a raster's bounding box (both in the grid CRS)."""
    from rasterio.warp import transform_bounds

    with open_raster(path) as src:
        if band > src.count:
            raise InputError(f"{path}: band {band} requested, the raster has {src.count}")
        b = src.bounds if src.crs == grid.crs else transform_bounds(src.crs, grid.crs, *src.bounds, densify_pts=21)
    left, bottom, right, top = grid.bounds
    w = max(0.0, min(right, b[2]) - max(left, b[0]))
    h = max(0.0, min(top, b[3]) - max(bottom, b[1]))
    return (w * h) / ((right - left) * (top - bottom))


def _derive_for_dem(card, card_path, entries, dem, cache_dir, fresh, quiet, log, check_hashes):
    from mlsites.experiment._hashing import file_digest, settings_digest
    from mlsites.experiment._samples import cached_terrain, terrain_features
    from mlsites.terrain import TerrainSettings

    terrain = card["terrain"]
    dem_grid = read_grid(dem)
    model_grid = GridSpec.from_dict(card["grid"])
    if cache_dir is None:
        cache_dir = terrain.get("cache_folder") or (Path(card_path).parent / ".cache")
    cache_dir = Path(cache_dir)
    info = {"source": "derived for DEM", "dem": str(dem), "aligned": False}
    dem_sha = file_digest(dem)
    same_cells = dem_grid.crs == model_grid.crs and np.allclose(dem_grid.res, model_grid.res, rtol=1e-9, atol=0)
    grid = dem_grid if same_cells else _model_lattice_grid(dem_grid, model_grid)
    vectors, vector_sha = {}, {}
    for name, entry in terrain["distances"].items():
        vectors[name] = str(_check_file(entry, f"distance layer {name!r}", "restore the vector file the model "
                                        "was trained with", check_hashes))
        vector_sha[name] = entry["sha256"]
    stream = terrain.get("stream_lines")
    if stream:
        _check_file(stream, "stream lines", "restore the stream lines the model was trained with", check_hashes)
    s = terrain["settings"]
    settings = TerrainSettings(layers=tuple(s["layers"]), tpi_radii_m=tuple(s["tpi_radii_m"]),
                               landform_lookup_cells=s["landform_lookup_cells"],
                               landform_flatness_deg=s["landform_flatness_deg"],
                               stream_threshold_km2=s["stream_threshold_km2"], vectors=vectors,
                               stream_vector=stream["path"] if stream else None)
    # inputs first: a DEM they do not reach is refused before any layer is derived
    inputs, coverage = {}, {}
    for e in entries:
        if e["source"] == "terrain":
            continue
        path = _check_file(e, f"input raster {e['name']!r}", "restore the file the model was trained on",
                           check_hashes)
        share = _coverage(path, int(e.get("band", 1)), grid)
        if share == 0:
            raise InputError(f"{path}: input layer {e['name']!r} does not overlap {dem.name} (DEM bounds "
                             f"{tuple(round(v, 1) for v in grid.bounds)} in the model CRS); map a DEM inside "
                             "the input layers' extent")
        if share < 1:
            log(f"input layer {e['name']} covers {100 * share:.0f} % of {dem.name}'s extent; cells outside it "
                "have no value and stay nodata")
        coverage[e["name"]] = round(share, 6)
        inputs[e["name"]] = FeatureLayer(e["name"], str(path), e["kind"], int(e.get("band", 1)))
    if same_cells:
        dem_used, dem_key = dem, dem_sha
    else:
        dem_used, dem_key = _aligned_dem(dem, grid, cache_dir, dem_sha)
        log(f"aligned {dem.name} ({dem_grid.res[0]:g} x {dem_grid.res[1]:g} cells) onto a grid of the model's "
            f"cell size {model_grid.res[0]:g} x {model_grid.res[1]:g} in its CRS ({grid.height} x {grid.width} "
            f"cells, bilinear)")
        info.update(aligned=True, aligned_dem=str(dem_used), dem_cell_size=list(dem_grid.res))
    folder, summary = cached_terrain(dem_used, settings, cache_dir, dem_sha256=dem_key, vector_sha256=vector_sha,
                                     stream_sha256=stream["sha256"] if stream else None, fresh=fresh,
                                     quiet=quiet, log=log)
    derived = terrain_features(folder, summary)
    missing = [e["name"] for e in entries if e["source"] == "terrain" and e["name"] not in derived]
    if missing:
        raise InputError(f"{card_path}: the terrain settings of the card do not give feature(s) "
                         f"{', '.join(missing)} for {dem.name}; the card does not match its model, re-run the "
                         "experiment")
    layers = [FeatureLayer(e["name"], str(derived[e["name"]][0]), derived[e["name"]][1], 1)
              if e["source"] == "terrain" else inputs[e["name"]] for e in entries]
    info.update(terrain_cache=str(folder), input_coverage=coverage,
                settings_key=settings_digest(s)[:16])
    return FeatureSource(grid, tuple(layers), info)


class LayerReader:
    """Reads the feature layers of windows of a grid, each layer opened once.

    Not thread-safe: give each thread or process its own reader.
    """

    def __init__(self, layers, grid: GridSpec):
        self.layers = layers
        self._sources = []
        try:
            for layer in layers:
                self._sources.append(AlignedRaster(layer.path, grid, kind=layer.kind, band=layer.band))
        except BaseException:
            self.close()
            raise

    def read(self, window):
        """Array of shape (n_features, rows, cols), float64, NaN where a layer has no value."""
        h, w = int(window.height), int(window.width)
        out = np.empty((len(self._sources), h, w), dtype=np.float64)
        for i, src in enumerate(self._sources):
            out[i] = src.read(window, dtype=np.float64)
        return out

    def close(self):
        for src in self._sources:
            src.close()
        self._sources = []
