"""Fictional landscapes: fractal relief, a carved river valley with terraces, soils.

Everything is a deterministic function of the cell position and the seed, so any
window of a landscape can be computed on its own and equals the same cells of the
whole grid. That lets :func:`write_landscape_dem` stream very large DEMs to disk in
strips with bounded memory.
"""

from __future__ import annotations

import json
import math
import numbers
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType

import geopandas as gpd
import numpy as np
import shapely
from affine import Affine
from rasterio.crs import CRS
from rasterio.windows import Window

from mlsites import __version__
from mlsites._files import replacing
from mlsites.errors import CRSError, InputError, OutputExistsError
from mlsites.grid import GridSpec, RasterWriter, bounded_gdal_cache
from mlsites.synthetic._kernels import channel_fields, fbm_grid
from mlsites.synthetic._valley import ChannelIndex, channel_index, channel_lines, main_surface, valley_geometry

__all__ = [
    "SOIL_CLASSES",
    "ZONE_CLASSES",
    "Landscape",
    "make_landscape",
    "fractal_relief",
    "write_landscape_dem",
]

#: Soil code -> invented class name (code 0 is nodata).
SOIL_CLASSES = MappingProxyType(
    {1: "alluvium", 2: "terrace gravel", 3: "loam", 4: "clay", 5: "stony upland", 6: "peat"}
)
#: Valley zone code -> name.
ZONE_CLASSES = MappingProxyType({0: "upland", 1: "channel", 2: "floodplain", 3: "terrace", 4: "valley side"})

#: Standard deviation of one octave of the gradient noise (measured on 1.6e7 cells).
_NOISE_STD = 0.216
#: Number of cells the generator renders at once (bounds the temporary arrays).
_BLOCK_CELLS = 1 << 20

#: Defaults of the landscape options (see make_landscape).
_DEFAULTS = dict(
    relief_m=300.0,
    spectral_exponent=3.0,
    valley_depth_m=40.0,
    valley_width_m=1000.0,
    n_terraces=2,
    n_tributaries=3,
    river_gradient=0.002,
    outlet_elevation_m=100.0,
    origin=(500000.0, 5000000.0),
    crs="EPSG:32631",
)


@dataclass(frozen=True)
class _Plan:
    """Everything a window of one landscape is computed from."""

    params: dict
    grid: GridSpec
    octaves: np.ndarray
    octave_seeds: np.ndarray
    soil_octaves: np.ndarray
    soil_seeds: np.ndarray
    sigma: float
    valley: dict
    index: ChannelIndex
    lines: list


# -- parameters -----------------------------------------------------------------
def _resolve_seed(random_state) -> int:
    if isinstance(random_state, np.random.Generator):
        return int(random_state.integers(0, 2**63))
    if random_state is None:
        return int(np.random.SeedSequence().generate_state(1, np.uint64)[0] >> np.uint64(1))
    if isinstance(random_state, numbers.Integral) and not isinstance(random_state, bool) and random_state >= 0:
        return int(random_state)
    raise InputError(
        f"random_state={random_state!r} is not usable; expected a non-negative integer, "
        "a numpy Generator or None"
    )


def _check_params(shape, cellsize, random_state, params) -> dict:
    unknown = sorted(set(params) - set(_DEFAULTS))
    if unknown:
        raise InputError(f"unknown landscape option(s) {unknown}; expected any of {sorted(_DEFAULTS)}")
    p = {**_DEFAULTS, **params}
    try:
        rows, cols = (int(v) for v in shape)
        ok = rows == shape[0] and cols == shape[1] and rows >= 1 and cols >= 1
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise InputError(f"shape={shape!r} is not usable; expected (rows, cols), two positive integers")
    if not (isinstance(cellsize, numbers.Real) and math.isfinite(cellsize) and cellsize > 0):
        raise InputError(f"cellsize={cellsize!r} must be a positive number of metres")
    checks = [
        ("relief_m", p["relief_m"] >= 0, "a height range in metres, 0 or more"),
        ("spectral_exponent", 2.0 < p["spectral_exponent"] < 4.0, "between 2 and 4 (exclusive)"),
        ("valley_depth_m", p["valley_depth_m"] >= 5.0, "at least 5 m"),
        ("valley_width_m", p["valley_width_m"] >= 20.0 * cellsize, f"at least 20 cells ({20 * cellsize:g} m)"),
        ("river_gradient", 0.0 < p["river_gradient"] <= 0.05, "in (0, 0.05] m/m"),
        ("n_terraces", p["n_terraces"] in range(0, 5), "an integer from 0 to 4"),
        ("n_tributaries", p["n_tributaries"] in range(0, 7), "an integer from 0 to 6"),
    ]
    for name, good, expected in checks:
        if not good:
            raise InputError(f"{name}={p[name]!r} is out of range; expected {expected}")
    try:
        crs = CRS.from_user_input(p["crs"])
    except Exception as exc:
        raise CRSError(f"crs={p['crs']!r} is not a CRS rasterio understands ({exc})") from None
    if not crs.is_projected:
        raise CRSError(f"crs={p['crs']!r} is not projected; give a projected CRS in metres")
    p.update(shape=(rows, cols), cellsize=float(cellsize), random_state=_resolve_seed(random_state),
             n_terraces=int(p["n_terraces"]), n_tributaries=int(p["n_tributaries"]),
             origin=tuple(float(v) for v in p["origin"]), crs=crs.to_string())
    return p


# -- relief -----------------------------------------------------------------------
def _octave_table(seed, salt, spacings, amplitudes):
    table = np.empty((len(spacings), 6))
    seeds = np.empty(len(spacings), dtype=np.uint64)
    for k, (spacing, amp) in enumerate(zip(spacings, amplitudes)):
        # One generator per octave: adding finer octaves leaves coarser ones unchanged.
        rng = np.random.default_rng([seed, salt, k])
        seeds[k] = rng.integers(0, 2**64 - 1, dtype=np.uint64, endpoint=True)
        angle = rng.uniform(0.0, 2.0 * np.pi)
        table[k] = (1.0 / spacing, amp, rng.uniform(0.0, 1024.0), rng.uniform(0.0, 1024.0),
                    np.cos(angle), np.sin(angle))
    return table, seeds


def _relief_octaves(p):
    """Octaves of the fractal relief: spacing halves, amplitude falls by 2^-H per octave."""
    rows, cols = p["shape"]
    cs = p["cellsize"]
    extent = max(rows, cols) * cs
    n_octaves = max(1, int(math.floor(math.log2(extent / (2.0 * cs)))) + 1)
    hurst = (p["spectral_exponent"] - 2.0) / 2.0
    ratio = 2.0 ** (-hurst)
    sigma = p["relief_m"] / 4.0
    # Normalised by the infinite series so that a finer grid only adds octaves.
    scale = sigma / (_NOISE_STD * math.sqrt(1.0 / (1.0 - ratio**2)))
    spacings = [extent / 2.0**k for k in range(n_octaves)]
    amps = [scale * ratio**k for k in range(n_octaves)]
    table, seeds = _octave_table(p["random_state"], 1, spacings, amps)
    return table, seeds, sigma


def _soil_octaves(p):
    spacings = (1600.0, 800.0, 400.0)
    amps = np.array([1.0, 0.5, 0.25])
    amps = amps / (_NOISE_STD * math.sqrt(np.sum(amps**2)))
    return _octave_table(p["random_state"], 2, spacings, amps)


def _make_plan(shape, cellsize, random_state, params) -> _Plan:
    p = _check_params(shape, cellsize, random_state, params)
    rows, cols = p["shape"]
    cs = p["cellsize"]
    v = valley_geometry(p)
    octaves, seeds, sigma = _relief_octaves(p)
    soil_octaves, soil_seeds = _soil_octaves(p)
    lines = channel_lines(p, v, octaves, seeds)
    x0, y0 = p["origin"]
    grid = GridSpec(CRS.from_user_input(p["crs"]), Affine(cs, 0.0, x0, 0.0, -cs, y0), cols, rows)
    return _Plan(p, grid, octaves, seeds, soil_octaves, soil_seeds, sigma, v, channel_index(lines, v, cs), lines)


# -- rendering ------------------------------------------------------------------------
def _cell_centres(p, row0, col0, nrows, ncols):
    """Local cell-centre coordinates (m): x east from the left edge, y south from the top."""
    cs = p["cellsize"]
    return (np.arange(col0, col0 + ncols) + 0.5) * cs, (np.arange(row0, row0 + nrows) + 0.5) * cs


def _render(plan: _Plan, row0, col0, nrows, ncols, *, with_layers=True):
    """DEM (and streams, zones, soil) of one window, computed from absolute positions."""
    p, v = plan.params, plan.valley
    xs, ys = _cell_centres(p, row0, col0, nrows, ncols)
    relief = fbm_grid(xs, ys, plan.octaves, plan.octave_seeds)
    d_main, v_trib, d_trib = channel_fields(xs, ys, plan.index, v["tributary_profile"])
    surface = main_surface(xs[None, :], ys[:, None], relief, d_main, p, v)
    # The main channel bed keeps its own floor so it falls monotonically past confluences.
    dem = np.where(d_main <= v["bed"], surface, np.minimum(surface, v_trib)).astype(np.float32)
    if not with_layers:
        return {"dem": dem}
    streams = (d_main <= v["bed"]) | (d_trib <= v["bed"])
    tributary = v_trib < surface
    zones = np.zeros(dem.shape, dtype=np.uint8)
    zones[d_main <= v["half"]] = 4
    if v["n_terraces"]:
        zones[d_main <= v["wall_start"]] = 3
    zones[d_main <= v["floodplain"]] = 2
    zones[tributary] = 4
    zones[tributary & (d_trib <= v["tributary_profile"][3])] = 2
    zones[streams] = 1
    # A second, standardised noise field (standard deviation about 1) for wetness.
    wet = fbm_grid(xs, ys, plan.soil_octaves, plan.soil_seeds)
    sigma = plan.sigma
    upland = zones == 0
    soil = np.full(dem.shape, 3, dtype=np.uint8)
    soil[upland & (wet < -0.5)] = 4
    soil[upland & (relief < -sigma) & (wet > 0.0)] = 6
    soil[upland & (relief > sigma)] = 5
    soil[zones == 3] = 2
    soil[(zones == 1) | (zones == 2)] = 1
    soil[(zones == 2) & (wet > 1.0)] = 6
    return {"dem": dem, "streams": streams.astype(np.uint8), "zones": zones, "soil": soil}


def _check_window(window, grid: GridSpec):
    if window is None:
        return 0, 0, grid.height, grid.width
    if not isinstance(window, Window):
        raise InputError(f"window={window!r} is not a rasterio.windows.Window")
    r0, c0, h, w = (int(round(x)) for x in (window.row_off, window.col_off, window.height, window.width))
    if r0 < 0 or c0 < 0 or h < 1 or w < 1 or r0 + h > grid.height or c0 + w > grid.width:
        raise InputError(
            f"window rows {r0}:{r0 + h}, cols {c0}:{c0 + w} is not inside the {grid.height} x {grid.width} "
            "grid; give a non-empty window within the landscape"
        )
    return r0, c0, h, w


def _window_grid(grid: GridSpec, r0, c0, h, w) -> GridSpec:
    return GridSpec(grid.crs, grid.transform @ Affine.translation(c0, r0), w, h)


def _channel_frame(plan: _Plan, grid: GridSpec) -> gpd.GeoDataFrame:
    """Channel centre lines in world coordinates, downstream-oriented, clipped to ``grid``."""
    x0, y0 = plan.params["origin"]
    names, kinds, geoms = [], [], []
    for c, (xy, _) in enumerate(plan.lines):
        world = np.column_stack([x0 + xy[:, 0], y0 - xy[:, 1]])
        line = shapely.LineString(world if c == 0 else world[::-1])
        clipped = shapely.clip_by_rect(line, *grid.bounds)
        for part in shapely.get_parts(shapely.line_merge(clipped) if not clipped.is_empty else clipped):
            if isinstance(part, shapely.LineString) and part.length > 0:
                names.append("main river" if c == 0 else f"tributary {c}")
                kinds.append("main" if c == 0 else "tributary")
                geoms.append(part)
    return gpd.GeoDataFrame({"name": names, "kind": kinds}, geometry=gpd.GeoSeries(geoms, crs=grid.crs),
                            crs=grid.crs)


# -- public API -----------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Landscape:
    """A fictional landscape on a projected grid (result of :func:`make_landscape`).

    Attributes
    ----------
    grid : GridSpec
        Grid of the arrays (the requested window of the landscape).
    dem : ndarray of float32, shape (rows, cols)
        Elevation in metres.
    streams : ndarray of uint8
        1 on cells of the carved channel network (main river and tributaries), else 0.
    soil : ndarray of uint8
        Soil codes 1..6, see :attr:`soil_classes`.
    zones : ndarray of uint8
        Valley zone codes 0..4, see :attr:`zone_classes`.
    channels : GeoDataFrame
        Channel centre lines (``name``, ``kind`` = "main" or "tributary"), each
        oriented downstream and clipped to the grid.
    params : dict
        Every generator parameter, with the seed resolved to an integer.
    soil_classes, zone_classes : mapping of int to str
    """

    grid: GridSpec
    dem: np.ndarray
    streams: np.ndarray
    soil: np.ndarray
    zones: np.ndarray
    channels: gpd.GeoDataFrame
    params: dict

    @property
    def soil_classes(self):
        """Soil code -> class name (:data:`SOIL_CLASSES`)."""
        return SOIL_CLASSES

    @property
    def zone_classes(self):
        """Valley zone code -> name (:data:`ZONE_CLASSES`)."""
        return ZONE_CLASSES

    def write(self, directory, *, overwrite: bool = False) -> dict:
        """Write ``dem.tif``, ``soil.tif`` and ``streams.gpkg`` into ``directory``.

        Parameters
        ----------
        directory : path-like
            Created if missing.
        overwrite : bool, default False
            Replace existing files; otherwise :class:`OutputExistsError` is raised.

        Returns
        -------
        dict of str to Path
            ``{"dem": ..., "soil": ..., "streams": ...}``.

        Notes
        -----
        Rasters are tiled, compressed GeoTIFFs written under a temporary name by
        :class:`mlsites.grid.RasterWriter`; the DEM has NaN nodata, the soil layer
        nodata 0 and its class names in the tags ``class_<code>``. The channel
        lines go to the GeoPackage layer ``streams``, also renamed into place
        only once complete.
        """
        directory = Path(directory)
        paths = {"dem": directory / "dem.tif", "soil": directory / "soil.tif",
                 "streams": directory / "streams.gpkg"}
        existing = [str(q) for q in paths.values() if q.exists()]
        if existing and not overwrite:
            raise OutputExistsError(f"{', '.join(existing)} already exist(s); pass overwrite=True to replace")
        directory.mkdir(parents=True, exist_ok=True)
        with RasterWriter(paths["dem"], self.grid, dtype=np.float32, description="elevation",
                          tags=_layer_tags(self.params, "elevation", units="m")) as w:
            w.write(self.dem)
        soil_tags = {f"class_{k}": name for k, name in self.soil_classes.items()}
        with RasterWriter(paths["soil"], self.grid, dtype=np.uint8, nodata=0, categorical=True,
                          description="soil", tags=_layer_tags(self.params, "soil", **soil_tags)) as w:
            w.write(self.soil)
        with replacing(paths["streams"]) as tmp:
            self.channels.to_file(tmp, layer="streams", driver="GPKG")
        return paths


def _layer_tags(params, layer, **extra) -> dict:
    """GeoTIFF tags: layer name, generator parameters and a note that the place is invented."""
    return {"layer": layer, **extra, "landscape_params": json.dumps(params), "software": f"mlsites {__version__}",
            "source": "fictional landscape (mlsites.synthetic); not a real place"}


def make_landscape(
    shape=(512, 512),
    *,
    cellsize: float = 10.0,
    random_state=0,
    relief_m: float = 300.0,
    spectral_exponent: float = 3.0,
    valley_depth_m: float = 40.0,
    valley_width_m: float = 1000.0,
    n_terraces: int = 2,
    n_tributaries: int = 3,
    river_gradient: float = 0.002,
    outlet_elevation_m: float = 100.0,
    origin=(500000.0, 5000000.0),
    crs="EPSG:32631",
    window: Window | None = None,
) -> Landscape:
    """Generate a fictional landscape, deterministic from a seed, at any size.

    A fractal relief (octave gradient noise with a power-law spectrum) is cut by a
    meandering main river with a flat floodplain, terraces and valley walls, and
    by tributary valleys; soils are classed from the valley zones, the relief and
    a second noise field. The landscape is invented: the CRS and origin only give
    the arrays a place to live and say nothing about any real terrain.

    Parameters
    ----------
    shape : (int, int), default (512, 512)
        Rows and columns of the whole landscape.
    cellsize : float, default 10.0
        Cell size in metres (square cells).
    random_state : int, numpy Generator or None, default 0
        Seed. The same seed and parameters give byte-identical arrays. A
        Generator or None draws a seed, which is recorded in ``params``.
    relief_m : float, default 300.0
        Height range of the upland above the valley shoulders (m); the fractal
        relief has a standard deviation of about ``relief_m / 4``.
    spectral_exponent : float, default 3.0
        Exponent beta of the radially averaged power spectrum P(f) ~ f^-beta of the
        fractal relief, 2 < beta < 4 (Hurst exponent H = (beta - 2) / 2). Smaller
        is rougher.
    valley_depth_m : float, default 40.0
        Depth of the main valley below its shoulders (m).
    valley_width_m : float, default 1000.0
        Width of the main valley between the shoulders (m), at least 20 cells.
    n_terraces : int, default 2
        Number of terrace benches on each side of the floodplain (0 to 4).
    n_tributaries : int, default 3
        Number of tributary valleys (0 to 6), alternating sides.
    river_gradient : float, default 0.002
        Fall of the main channel per metre along the valley axis.
    outlet_elevation_m : float, default 100.0
        Channel elevation where the valley axis leaves the grid downstream (m).
    origin : (float, float)
        World coordinates of the upper-left grid corner (CRS units).
    crs : str or CRS, default "EPSG:32631"
        Any projected CRS with metre units; it only labels the invented grid.
    window : rasterio.windows.Window, optional
        Compute only this window of the landscape; the result equals the same
        cells of the whole landscape exactly.

    Returns
    -------
    Landscape

    Raises
    ------
    InputError
        A parameter is out of range (the message names it and the valid range).
    CRSError
        ``crs`` is not a projected CRS.

    See Also
    --------
    fractal_relief : the relief alone.
    write_landscape_dem : stream a large DEM to a GeoTIFF in strips.

    Notes
    -----
    *Relief.* Octave k has lattice spacing ``E / 2**k`` (E = longer grid side in
    metres) down to two cells and amplitude proportional to ``2**(-k H)``; each
    octave is gradient noise (Perlin 1985, 2002) on a hashed, randomly rotated and
    shifted lattice, so a cell's value depends only on its position and the seed.
    Summing self-similar octaves gives a power spectrum falling as f^-(2H+2), the
    spectrum of a fractional Brownian surface built by spectral synthesis (Saupe
    1988). Halving the cell size at the same extent adds one finer octave and
    leaves the others unchanged.

    *Valley.* The main river follows a sum of sinusoids along the longer grid
    side (its slope against the axis is at most 0.4). Its floor falls linearly
    with the distance along the axis, and the bed (cells within 0.75 cells or
    3 m of the centre line) is exactly at the floor, so each channel cell is no
    higher than the one before it downstream. The cross-section is the bed, a
    2 m bank, a floodplain and ``n_terraces`` benches sloping gently to the river,
    then the valley walls up to ``valley_depth_m``; the upland (relief + 2 sigma,
    softly kept within [0, 5 sigma], so never below the shoulders) fades in
    beyond them. Away from tributaries every cell is therefore at least as high
    as the valley profile at its distance from the channel. Tributaries leave at 35-55 degrees
    upstream and are V-shaped cuts (side slope 0.5) whose floor, a running
    minimum of the surface along their course less half the valley depth, falls
    towards the confluence where it meets the main floor; the DEM takes the lower
    of the main and tributary surfaces outside the main bed. Distances to the
    channel lines are exact point-to-segment distances, found through a bucket
    grid of segments; beyond a channel's reach its surface no longer changes (or,
    for tributaries, is provably above the main surface), so windows need no halo
    and the landscape simply continues past the grid edges.

    *Soil.* Channel and floodplain: alluvium (peat in wet hollows of the
    floodplain); terraces: terrace gravel; valley sides: loam; upland: stony
    upland on high relief, peat in wet low hollows, clay or loam elsewhere.

    References
    ----------
    Perlin, K. (1985). An image synthesizer. SIGGRAPH Computer Graphics 19(3),
    287-296. doi:10.1145/325165.325247
    Perlin, K. (2002). Improving noise. ACM Transactions on Graphics 21(3), 681-682.
    doi:10.1145/566654.566636
    Saupe, D. (1988). Algorithms for random fractals. In The Science of Fractal
    Images, 71-136. Springer. doi:10.1007/978-1-4612-3784-6_2

    Examples
    --------
    >>> land = make_landscape((64, 96), cellsize=20.0, random_state=3, valley_width_m=600.0)
    >>> land.dem.shape, land.dem.dtype.name
    ((64, 96), 'float32')
    >>> sorted(set(land.soil.ravel().tolist())) <= sorted(land.soil_classes)
    True
    """
    params = dict(relief_m=relief_m, spectral_exponent=spectral_exponent, valley_depth_m=valley_depth_m,
                  valley_width_m=valley_width_m, n_terraces=n_terraces, n_tributaries=n_tributaries,
                  river_gradient=river_gradient, outlet_elevation_m=outlet_elevation_m, origin=origin, crs=crs)
    plan = _make_plan(shape, cellsize, random_state, params)
    r0, c0, h, w = _check_window(window, plan.grid)
    out = {"dem": np.empty((h, w), np.float32)}
    for name in ("streams", "zones", "soil"):
        out[name] = np.empty((h, w), np.uint8)
    step = max(1, _BLOCK_CELLS // w)
    for r in range(0, h, step):
        n = min(step, h - r)
        for name, arr in _render(plan, r0 + r, c0, n, w).items():
            out[name][r:r + n] = arr
    grid = _window_grid(plan.grid, r0, c0, h, w)
    return Landscape(grid, out["dem"], out["streams"], out["soil"], out["zones"], _channel_frame(plan, grid),
                     dict(plan.params))


def fractal_relief(shape=(512, 512), *, cellsize: float = 10.0, random_state=0, relief_m: float = 300.0,
                   spectral_exponent: float = 3.0, window: Window | None = None) -> np.ndarray:
    """The fractal relief of :func:`make_landscape` alone, without valley or clipping.

    Parameters
    ----------
    shape, cellsize, random_state, relief_m, spectral_exponent, window
        As in :func:`make_landscape`.

    Returns
    -------
    ndarray of float32, shape (rows, cols) of the window
        Zero-mean relief in metres with standard deviation about ``relief_m / 4``
        and power spectrum P(f) ~ f^-spectral_exponent between the grid extent
        and two cells.

    Notes
    -----
    Same octaves and seeds as the landscape (see :func:`make_landscape`, Notes).
    """
    p = _check_params(shape, cellsize, random_state, dict(relief_m=relief_m, spectral_exponent=spectral_exponent))
    octaves, seeds, _ = _relief_octaves(p)
    rows, cols = p["shape"]
    x0, y0 = p["origin"]
    grid = GridSpec(CRS.from_user_input(p["crs"]), Affine(p["cellsize"], 0.0, x0, 0.0, -p["cellsize"], y0), cols, rows)
    r0, c0, h, w = _check_window(window, grid)
    xs, ys = _cell_centres(p, r0, c0, h, w)
    return fbm_grid(xs, ys, octaves, seeds).astype(np.float32)


def write_landscape_dem(path, shape, *, cellsize: float = 10.0, random_state=0, block_rows: int = 512,
                        overwrite: bool = False, **params) -> Path:
    """Write the DEM of a landscape of any size to a GeoTIFF, strip by strip.

    Parameters
    ----------
    path : path-like
        Output GeoTIFF.
    shape : (int, int)
        Rows and columns.
    cellsize, random_state
        As in :func:`make_landscape`.
    block_rows : int, default 512
        Rows computed and written at a time (a multiple of 256 matches the tiles).
    overwrite : bool, default False
        Replace an existing file; otherwise :class:`OutputExistsError` is raised.
    **params
        Any other keyword of :func:`make_landscape` except ``window``.

    Returns
    -------
    Path

    Notes
    -----
    Each strip is computed in blocks of about a million cells, so memory stays
    bounded whatever the grid size; the file equals ``make_landscape(...).dem``
    written whole, whatever ``block_rows`` is. The file is a tiled, compressed
    float32 GeoTIFF with NaN nodata and overviews, renamed into place when done.
    """
    if not (isinstance(block_rows, numbers.Integral) and block_rows >= 1):
        raise InputError(f"block_rows={block_rows!r} must be a positive integer")
    path = Path(path)
    if path.exists() and not overwrite:
        raise OutputExistsError(f"{path} already exists; pass overwrite=True to replace it")
    plan = _make_plan(shape, cellsize, random_state, params)
    rows, cols = plan.params["shape"]
    block_cols = min(cols, max(256, (_BLOCK_CELLS // block_rows) // 256 * 256))
    tags = _layer_tags(plan.params, "elevation", units="m")
    with bounded_gdal_cache(), RasterWriter(path, plan.grid, dtype=np.float32, description="elevation",
                                             tags=tags) as writer:
        for r0 in range(0, rows, block_rows):
            h = min(block_rows, rows - r0)
            for c0 in range(0, cols, block_cols):
                w = min(block_cols, cols - c0)
                writer.write(_render(plan, r0, c0, h, w, with_layers=False)["dem"], Window(c0, r0, w, h))
    return path
