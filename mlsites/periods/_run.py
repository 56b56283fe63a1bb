"""The periods stage of an experiment: dates, time blocks, Monte Carlo, density maps.

:func:`run_periods` is the body of ``mlsites periods``. It fits no model. The
helpers :func:`dates_for_experiment`, :func:`blocks_for_experiment` and
:func:`windows_for_experiment` give the same dates and window probabilities to
any other stage (period-specific models weigh sites by them).
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites import __version__
from mlsites.errors import ConfigError, CRSError, InputError, InsufficientDataError, OutputExistsError
from mlsites.periods._aoristic import DateDensity, TimeBlocks, sparse_weights, time_blocks
from mlsites.periods._dates import DateRanges, date_ranges
from mlsites.periods._montecarlo import ENVELOPE, NULL_MODEL, block_table, monte_carlo
from mlsites.periods._windows import WindowWeights, window_probabilities

__all__ = ["PeriodsResult", "DatedSites", "run_periods", "read_dated_sites", "check_dated_sites", "write_periods", "has_dates",
           "density_from_settings", "dates_for_experiment", "blocks_for_experiment", "windows_for_experiment",
           "MAX_MAP_BLOCKS"]

#: Most blocks drawn as density maps; beyond this the maps are skipped (and the log says so).
MAX_MAP_BLOCKS = 60
#: Longest side of the small-multiple panels, in display cells.
_DISPLAY_CELLS = 300
#: Weight below which a block counts as holding no site (maps and small multiples).
_EMPTY = 1e-9
_FLOAT_FORMAT = "%.10g"
_CONVENTION = ("years on one continuous axis, negative before year 1; ranges half-open [start, end), "
               "duration end - start")


@dataclass(frozen=True)
class PeriodsResult:
    """What :func:`run_periods` produced.

    Attributes
    ----------
    out_dir : Path
        Folder of the outputs.
    table : pandas.DataFrame
        The per-block table (``blocks.csv``, see :func:`mlsites.periods.block_table`).
    ranges : DateRanges
    blocks : TimeBlocks
    windows : WindowWeights or None
        Window probabilities when ``[periods.windows]`` names any.
    summary : dict
        The content of ``periods.json``.
    """

    out_dir: Path
    table: pd.DataFrame
    ranges: DateRanges
    blocks: TimeBlocks
    windows: WindowWeights | None
    summary: dict


def density_from_settings(p: dict) -> DateDensity:
    """The date density of a ``[periods]`` section."""
    return DateDensity(p["density"], p["ramp_share"])


def dates_for_experiment(exp, records) -> DateRanges:
    """Date ranges of an experiment's sites, by its ``[sites]`` and ``[periods]`` settings.

    Parameters
    ----------
    exp : Experiment
    records : SiteRecords
        From :func:`mlsites.sampling.read_sites`, read with ``keep_fields`` holding
        ``[periods] category_field`` when that is set.

    Raises
    ------
    ConfigError
        Neither year fields nor a category field are set.
    InputError
        A record's end year lies before its start (read_sites lists these as
        dropped; here they stop the stage, as dates are the point of it), or a
        category is missing from the table.
    """
    s, p = exp["sites"], exp["periods"]
    if not (s["start_field"] and s["end_field"]) and not p["category_field"]:
        raise ConfigError(f"{exp.path}: no dates: set [sites] start_field and end_field, or [periods] "
                          "category_field with a [periods.categories] table")
    reversed_ = records.dropped[records.dropped["reason"] == "start year after end year"]
    if len(reversed_):
        rows = ", ".join(str(r) for r in reversed_["source_row"].head(5))
        ids = ", ".join(str(i) for i in reversed_["site_id"].head(5))
        raise InputError(f"{records.source}: {len(reversed_)} site record(s) have an end year before their "
                         f"start year (rows {rows}; ids {ids}); fix the years (negative before year 1) or swap "
                         "start_field and end_field")
    return date_ranges(records.sites, start_column="start_year" if s["start_field"] else None,
                       end_column="end_year" if s["end_field"] else None, category_column=p["category_field"],
                       categories=p["categories"], end_inclusive=p["end_inclusive"], source=records.source)


def blocks_for_experiment(exp, ranges: DateRanges) -> TimeBlocks:
    """Time blocks of ``[periods]``: its span, or the span of the site ranges."""
    p = exp["periods"]
    span = p["span"]
    if span is None:
        lo, hi = float(ranges.start.min()), float(ranges.end.max())
        span = (lo, hi if hi > lo else lo + p["block_width_years"])
    return time_blocks(p["block_width_years"], span=span, origin=p["origin_year"])


def windows_for_experiment(exp, ranges: DateRanges) -> WindowWeights | None:
    """Window probabilities of the sites (None when ``[periods.windows]`` is empty)."""
    p = exp["periods"]
    if not p["windows"]:
        return None
    return window_probabilities(ranges.site_id, ranges.start, ranges.end, p["windows"],
                                density=density_from_settings(p), min_probability=p["min_probability"])


def _write_csv(frame: pd.DataFrame, path: Path):
    frame.to_csv(path, index=False, float_format=_FLOAT_FORMAT, lineterminator="\n")


def _site_points(records, ranges):
    """x, y (grid CRS) of the dated sites: points, or a point inside each polygon."""
    geoms = records.sites.geometry.iloc[ranges.table["row"].to_numpy()]
    pts = geoms.representative_point()
    return pts.x.to_numpy(), pts.y.to_numpy()


def _display_dem(dem_path, display):
    from rasterio.enums import Resampling

    from mlsites.grid import open_raster

    with open_raster(dem_path) as src:
        arr = src.read(1, out_shape=display.shape, resampling=Resampling.average, masked=True)
    return np.ma.filled(arr.astype(np.float64), np.nan)


def _squares(x, y, w, grid, side):
    """Generalised sites: centres of squares of ``side`` CRS units and the weight in each."""
    from mlsites.sampling import site_squares

    keep = w > _EMPTY
    return site_squares(x[keep], y[keep], grid, side, weight=w[keep])


def _maps(staging, exp, grid, x, y, weights, blocks, table, *, show_sites, quiet, log):
    """Density GeoTIFFs and the small multiples; returns the maps' part of the summary."""
    from tqdm.auto import tqdm

    from mlsites.periods._density import kernel_density, scott_bandwidth, write_densities
    from mlsites.terrain import hillshade
    from mlsites.periods._plots import plot_density_maps

    p = exp["periods"]
    unit = grid._linear_unit_m()
    if p["bandwidth_m"] is not None:
        bandwidth, rule = float(p["bandwidth_m"]), "given in [periods] bandwidth_m"
    else:
        bandwidth = scott_bandwidth(x * unit, y * unit)
        rule = "Scott's rule for two dimensions, sigma n^(-1/6) over all dated sites (Scott 1992)"
    used = np.flatnonzero(table["aoristic_sum"].to_numpy() > _EMPTY)
    info = {"bandwidth_m": bandwidth, "bandwidth_rule": rule, "units": "expected sites per km2",
            "blocks_mapped": [], "sites_on_png": "exact points" if show_sites else
            f"generalised to weights per {p['site_squares_m']:g} m square"}
    log(f"density maps: Gaussian kernel, bandwidth {bandwidth:.0f} m ({rule})")
    if used.size > MAX_MAP_BLOCKS:
        info["skipped"] = (f"{used.size} blocks hold sites, more than {MAX_MAP_BLOCKS}; no density maps. Use "
                           "wider blocks (block_width_years) or a shorter span")
        log(f"density maps: {info['skipped']}")
        return info
    dense = weights[:, used].toarray()
    folder = staging / "density"
    folder.mkdir()
    names = [f"block_{j:03d}_{blocks.starts[j]:g}_{blocks.ends[j]:g}.tif" for j in used]
    tags = [{"block_start": blocks.starts[j], "block_end": blocks.ends[j], "bandwidth_m": bandwidth,
             "units": "expected sites per km2", "software": f"mlsites {__version__}",
             "note": "kernel density of site records; sensitive, do not share without the site owner's consent"}
            for j in used]
    with tqdm(total=grid.n_cells, desc="density maps", unit="cell", unit_scale=True, disable=quiet,
              leave=False) as bar:
        write_densities([folder / n for n in names], x, y, dense, grid, bandwidth_m=bandwidth,
                        valid_raster=exp["study"]["dem"], tags=tags, progress=bar.update)
    info["blocks_mapped"] = [f"density/{n}" for n in names]
    display = grid.coarsened(_DISPLAY_CELLS)
    dem = _display_dem(exp["study"]["dem"], display)
    shade = hillshade(dem, display.cellsize())
    maps = kernel_density(x, y, dense, display, bandwidth_m=bandwidth)
    maps[:, np.isnan(dem)] = np.nan
    side = p["site_squares_m"] / unit
    if show_sites:
        pts, sq = [(x[dense[:, k] > _EMPTY], y[dense[:, k] > _EMPTY], dense[dense[:, k] > _EMPTY, k])
                   for k in range(len(used))], None
    else:
        pts, sq = None, [_squares(x, y, dense[:, k], grid, side) for k in range(len(used))]
    left, bottom, right, top = display.bounds
    from mlsites.periods._plots import year_label

    titles = [f"{year_label(blocks.starts[j])} to {year_label(blocks.ends[j])}" for j in used]
    note = ("points: exact site positions (do not share)" if show_sites else
            f"circles: sites generalised to {p['site_squares_m']:g} m squares, area ~ expected sites")
    plot_density_maps(shade, list(maps), titles, (left, right, bottom, top), staging / "density_maps.png",
                      sites=pts, squares=sq, note=note + f"; kernel bandwidth {bandwidth:.0f} m")
    log(f"density maps: {len(used)} blocks written to density/ and density_maps.png")
    return info


def run_periods(experiment, *, out_dir=None, fresh=False, show_sites=False, quiet=False, log=None) -> PeriodsResult:
    """Dates, time blocks, Monte Carlo envelopes and density maps of an experiment.

    Parameters
    ----------
    experiment : path-like or Experiment
        Experiment file (its ``[sites]`` and ``[periods]`` sections are used).
    out_dir : path-like, optional
        Output folder (default ``<runs_dir>/<name>_periods``). Refused if it
        exists, unless ``fresh``.
    fresh : bool, default False
        Replace an existing output folder.
    show_sites : bool, default False
        Draw exact site points on the PNG; by default sites are generalised to
        squares of ``site_squares_m`` with their summed weight.
    quiet : bool, default False
        No progress bars.
    log : callable, optional
        Receives each stage line.

    Returns
    -------
    PeriodsResult

    Raises
    ------
    OutputExistsError, ConfigError, InputError, InsufficientDataError, CRSError
        Nothing is written then (outputs are built in a hidden folder beside
        ``out_dir`` and renamed into place at the end).

    Notes
    -----
    Files: ``blocks.csv`` (per block: aoristic sum, Monte Carlo mean, sd and
    95 % envelope, null envelope, rate of change and its envelopes, flags),
    ``site_dates.csv``, ``site_blocks.csv`` (nonzero weight of each site per
    block), ``dropped_dates.csv``, ``categories.csv`` (with categories),
    ``windows.csv``, ``window_weights.csv`` and ``window_left_out.csv`` (with
    windows), ``site_counts.png``, ``density_maps.png``,
    ``density/block_*.tif`` and ``periods.json`` (settings, seed, number of
    simulations, null model, bandwidth, counts). No table holds coordinates.
    One Generator seeded with ``[study] seed`` draws the dated simulations, then
    the null ones.
    """
    from mlsites._files import staged_folder
    from mlsites.experiment._config import Experiment, load_experiment
    from mlsites.experiment._run import output_roots

    t0 = time.perf_counter()
    log = log or (lambda m: None)
    exp = experiment if isinstance(experiment, Experiment) else load_experiment(experiment)
    out = Path(out_dir) if out_dir is not None else output_roots(exp)[0] / f"{exp.name}_periods"
    out = out.resolve()

    def reserve():
        if out.exists() and not fresh:
            raise OutputExistsError(f"{out}: exists already; use --fresh to replace it or --out for another folder")

    reserve()
    dated = read_dated_sites(exp, log=log)
    with staged_folder(out) as staging:
        summary = write_periods(staging, exp, dated, show_sites=show_sites, quiet=quiet, log=log, t0=t0)
        reserve()  # a folder that appeared meanwhile is not replaced without fresh
    log(f"periods: wrote {out} in {time.perf_counter() - t0:.1f} s")
    return PeriodsResult(out_dir=out, table=dated.table, ranges=dated.ranges, blocks=dated.blocks,
                         windows=dated.windows, summary=summary)


def has_dates(exp) -> bool:
    """True when the experiment's sites carry dates (year fields, or a category field with its table)."""
    s, p = exp["sites"], exp["periods"]
    return bool((s["start_field"] and s["end_field"]) or (p["category_field"] and p["categories"]))


@dataclass(frozen=True)
class DatedSites:
    """What :func:`read_dated_sites` read and computed: the shared first half of the periods stage.

    Attributes
    ----------
    grid : GridSpec
    records : SiteRecords
    ranges : DateRanges
    blocks : TimeBlocks
    density : DateDensity
    mc : MonteCarloCounts
    table : pandas.DataFrame
        The per-block table.
    weights : scipy.sparse matrix
        Aoristic weight of each dated site (rows) in each block (columns).
    n_partial : int
        Sites with part of their range outside the span.
    windows : WindowWeights or None
    """

    grid: object
    records: object
    ranges: DateRanges
    blocks: TimeBlocks
    density: DateDensity
    mc: object
    table: pd.DataFrame
    weights: object
    n_partial: int
    windows: WindowWeights | None


def read_dated_sites(exp, *, log=None) -> DatedSites:
    """Read an experiment's sites and dates; blocks, Monte Carlo counts and window probabilities.

    Used by ``mlsites periods`` (:func:`run_periods`) and by the periods stage of
    a run, so both give the same numbers. Nothing is written.

    Raises
    ------
    ConfigError, InputError, InsufficientDataError, CRSError
    """
    log = log or (lambda m: None)
    grid, records, ranges, blocks, windows = check_dated_sites(exp, log=log)
    p = exp["periods"]
    density = density_from_settings(p)
    seed = exp["study"]["seed"]
    log(f"{blocks.n_blocks} blocks of {blocks.width:g} years over [{blocks.edges[0]:g}, {blocks.edges[-1]:g}), "
        f"{density.kind} dates within ranges; {p['n_simulations']} simulations (seed {seed})")
    mc = monte_carlo(ranges.start, ranges.end, blocks, n_simulations=p["n_simulations"], density=density,
                     random_state=np.random.default_rng(seed))
    table = block_table(blocks, mc)
    weights = sparse_weights(ranges.start, ranges.end, blocks, density=density)
    inside = np.asarray(weights.sum(axis=1)).ravel()
    n_partial = int((inside < 1 - 1e-9).sum())
    if n_partial:
        log(f"{n_partial} site(s) have part of their range outside the span; only the part inside counts "
            f"({float((1 - inside).sum()):.2f} site(s) of weight outside)")
    if windows is not None:
        for r in windows.windows.itertuples():
            log(f"window {r.window} [{r.start:g}, {r.end:g}): {r.n_sites} sites kept (weight {r.weight_sum:.2f}), "
                f"{r.n_left_out} left out (probability below {windows.min_probability:g} or no overlap)")
    return DatedSites(grid=grid, records=records, ranges=ranges, blocks=blocks, density=density, mc=mc,
                      table=table, weights=weights, n_partial=n_partial, windows=windows)


def check_dated_sites(exp, *, log=None):
    """Read the sites and check their dates, blocks and windows (no simulation); fast.

    A run calls it with its other checks, before any sampling, so bad dates stop
    the run at once rather than at its periods stage.

    Returns
    -------
    (GridSpec, SiteRecords, DateRanges, TimeBlocks, WindowWeights or None)

    Raises
    ------
    ConfigError, InputError, InsufficientDataError, CRSError
        An end year before its start, a category missing from the table, a
        window outside every site's range, blocks narrower than a year or more
        than :data:`MAX_BLOCKS` of them, a geographic grid.
    """
    from mlsites.grid import read_grid
    from mlsites.sampling import read_sites, read_valid_mask

    log = log or (lambda m: None)
    p, s = exp["periods"], exp["sites"]
    if not s["path"]:
        raise InputError(f"{exp.path}: [sites] path is missing; give the site records file")
    if not (s["start_field"] and s["end_field"]) and not p["category_field"]:
        raise ConfigError(f"{exp.path}: no dates: set [sites] start_field and end_field, or [periods] "
                          "category_field with a [periods.categories] table")
    dem = exp["study"]["dem"]
    grid = read_grid(dem)
    if grid.is_geographic:
        raise CRSError(f"{dem}: the study grid is geographic (degrees); density maps need a projected grid in "
                       "metres. Reproject the DEM (for example with gdalwarp -t_srs) first.")
    records = read_sites(s["path"], grid, id_field=s["id_field"], x_field=s["x_field"], y_field=s["y_field"],
                         crs=s["crs"], start_field=s["start_field"], end_field=s["end_field"],
                         kind_field=s["kind_field"], certainty_field=s["certainty_field"], layer=s["layer"],
                         valid_mask=read_valid_mask(dem, grid), keep_fields=[p["category_field"]])
    log(records.summary())
    ranges = dates_for_experiment(exp, records)
    log(ranges.summary())
    if len(ranges.table) == 0:
        raise InsufficientDataError(f"{records.source}: no site has a date range ({ranges.summary()}); "
                                    "check start_field, end_field or category_field")
    if len(ranges.mapping):
        log("dating categories: " + "; ".join(f"{r.category} = [{r.start:g}, {r.end:g}): {r.n_sites} sites"
                                              for r in ranges.mapping.itertuples()))
    blocks = blocks_for_experiment(exp, ranges)
    return grid, records, ranges, blocks, windows_for_experiment(exp, ranges)


def write_periods(staging, exp, dated: DatedSites, *, show_sites=False, quiet=False, log=None, t0=None) -> dict:
    """Write the periods files of :func:`run_periods` into the folder ``staging``; return ``periods.json``."""
    from mlsites.periods._plots import plot_block_counts

    t0 = time.perf_counter() if t0 is None else t0
    log = log or (lambda m: None)
    staging = Path(staging)
    p = exp["periods"]
    grid, records, ranges, blocks, density = dated.grid, dated.records, dated.ranges, dated.blocks, dated.density
    mc, table, weights, n_partial, windows = dated.mc, dated.table, dated.weights, dated.n_partial, dated.windows
    seed = exp["study"]["seed"]
    _write_csv(table, staging / "blocks.csv")
    _write_csv(ranges.table.drop(columns=["row"]), staging / "site_dates.csv")
    coo = weights.tocoo()
    order = np.lexsort((coo.col, coo.row))
    _write_csv(pd.DataFrame({"site_id": ranges.site_id[coo.row[order]],
                             "block_start": blocks.starts[coo.col[order]],
                             "block_end": blocks.ends[coo.col[order]], "weight": coo.data[order]}),
               staging / "site_blocks.csv")
    dropped = pd.concat([records.dropped[["site_id", "reason"]], ranges.dropped], ignore_index=True)
    _write_csv(dropped, staging / "dropped_dates.csv")
    if len(ranges.mapping):
        _write_csv(ranges.mapping, staging / "categories.csv")
    if windows is not None:
        _write_csv(windows.windows, staging / "windows.csv")
        _write_csv(windows.weights, staging / "window_weights.csv")
        _write_csv(windows.left_out, staging / "window_left_out.csv")
    plot_block_counts(table, staging / "site_counts.png",
                      title=f"{exp.name}: sites per {blocks.width:g}-year block "
                            f"({p['n_simulations']} simulations)")
    x, y = _site_points(records, ranges)
    maps = _maps(staging, exp, grid, x, y, weights.tocsc(), blocks, table, show_sites=show_sites, quiet=quiet,
                 log=log)
    summary = {
        "software": f"mlsites {__version__}", "experiment": exp.name, "experiment_file": str(exp.path),
        "settings": p, "seed": seed, "n_simulations": mc.n_simulations, "random_generator":
        "numpy default_rng(seed): dated simulations first, then the null ones",
        "convention": _CONVENTION, "end_inclusive": ranges.end_inclusive,
        "density": {"kind": density.kind, "ramp_share": density.ramp_share if density.kind == "trapezoid" else None},
        "blocks": {"width_years": blocks.width, "origin_year": blocks.origin, "n_blocks": blocks.n_blocks,
                   "first": float(blocks.edges[0]), "last": float(blocks.edges[-1])},
        "envelope_quantiles": list(ENVELOPE), "null_model": NULL_MODEL,
        "n_sites_read": records.n_read, "n_sites_dated": int(len(ranges.table)),
        "n_records_dropped": int(len(dropped)), "n_sites_partly_outside_span": n_partial,
        "categories": ranges.mapping.to_dict(orient="records"),
        "windows": None if windows is None else windows.windows.to_dict(orient="records"),
        "maps": maps, "show_sites": bool(show_sites),
        "seconds": round(time.perf_counter() - t0, 2),
    }
    (staging / "periods.json").write_text(json.dumps(summary, indent=2, default=str) + "\n")
    return summary
