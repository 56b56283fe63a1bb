"""Potential, zone and spread rasters of a saved model, window by window, at any size.

:func:`map_model` is the body of ``mlsites map``. The grid is covered by windows
that match the GeoTIFF tiles; each window's features are read, scored by the model
and by every fold model, and handed back to the parent process, which writes them
in window order. Memory is bounded by a window, not by the grid. Zones are then
cut at the area shares calibrated by the cross-validation, from an exact count of
the map's own scores (:mod:`mlsites.mapping._quantile`). Everything is staged in
a hidden folder renamed into place at the end.
"""

from __future__ import annotations

import collections
import contextlib
import json
import pickle
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from rasterio.windows import Window

from mlsites import __version__
from mlsites._files import staged_folder
from mlsites.errors import CRSError, InputError, OutputExistsError
from mlsites.evaluation import NODATA_ZONE, assign_zones
from mlsites.grid import AlignedRaster, GridSpec, RasterWriter, bounded_gdal_cache, iter_windows
from mlsites.mapping._features import LayerReader, resolve_features
from mlsites.learners import fast_predictor
from mlsites.mapping._predict import CHUNK_ROWS, predict_cells, single_threaded, spread_of
from mlsites.mapping._quantile import coarse_counts, fine_counts, finish_cuts, plan_cuts

__all__ = ["MapResult", "map_model", "ZONE_OUTSIDE", "zone_colours", "MAP_FILES", "EXTRA_LAYERS"]

#: Zone code of cells outside the area of applicability (the model should not be
#: trusted there); the zone codes proper run from 1 (lowest) up, 0 is nodata.
ZONE_OUTSIDE = 255
#: Rasters a map folder may hold, besides ``map.json``.
MAP_FILES = ("potential.tif", "zones.tif", "spread.tif", "dissimilarity.tif", "applicable.tif")
#: Codec of the map rasters: deflate, which every TIFF reader opens, because maps go to
#: people outside the project; writing them costs little next to predicting them (the
#: working layers of the other stages use the writer's faster zstd).
MAP_COMPRESSION = "deflate"
#: Layers computed per window from the same feature matrix as the potential, other
#: than the potential and spread: name -> (dtype, nodata, description). Written when
#: the model card names its training table (see :func:`_fit_applicability`).
EXTRA_LAYERS: dict = {
    "dissimilarity": (np.float32, None, "dissimilarity index (Meyer & Pebesma 2021): distance to the nearest "
                      "training sample in standardised, weighted layer space over the mean distance between "
                      "training samples"),
    "applicable": (np.uint8, 255, "area of applicability: 1 where the dissimilarity index is at most the "
                   "threshold from the cross-validated training samples, 0 outside, 255 nodata"),
}
#: Default window: 256 rows (one tile row) by 2048 columns (eight tiles).
BLOCK_ROWS, BLOCK_COLS = 256, 2048

# Colour ramp of our own for the zones, light (lowest zone) to dark (highest):
# one hue family with falling lightness, so the order reads for every kind of colour
# vision and in greyscale. Cells outside the area of applicability get a blue, a
# hue apart from the ramp for the common colour-vision deficiencies.
_RAMP = ((247, 236, 205), (214, 150, 70), (115, 48, 18))
_OUTSIDE_COLOUR = (66, 104, 150, 255)
_NOTICE = ("A potential map says where recorded sites resemble the landscape. It never replaces field survey, "
           "nor the heritage law and licensed practice of the place; low potential is not absence of sites.")


@dataclass(frozen=True)
class MapResult:
    """What :func:`map_model` wrote.

    Attributes
    ----------
    out_dir : Path
    files : dict of str to Path
        File name -> path, for every raster written and ``map.json``.
    summary : dict
        The content of ``map.json``.
    """

    out_dir: Path
    files: dict
    summary: dict


def zone_colours(n_zones: int) -> dict:
    """Colour table of the zone raster: code -> (r, g, b, alpha).

    Parameters
    ----------
    n_zones : int
        Number of zones, the remainder included (codes 1 .. n_zones).

    Returns
    -------
    dict
        Code 0 (nodata) transparent, codes 1 .. n_zones on a light-to-dark ramp,
        :data:`ZONE_OUTSIDE` blue.
    """
    ramp = np.asarray(_RAMP, dtype=np.float64)
    colours = {NODATA_ZONE: (0, 0, 0, 0)}
    for code in range(1, n_zones + 1):
        t = 0.5 if n_zones == 1 else (code - 1) / (n_zones - 1)
        pos = t * (len(ramp) - 1)
        i = min(int(pos), len(ramp) - 2)
        rgb = ramp[i] + (pos - i) * (ramp[i + 1] - ramp[i])
        colours[code] = tuple(int(round(v)) for v in rgb) + (255,)
    colours[ZONE_OUTSIDE] = _OUTSIDE_COLOUR
    return colours


# ------------------------------------------------------------------ worker side


@dataclass(frozen=True)
class _Context:
    """Everything a window task needs, small enough to send with each window."""

    key: str
    models_file: str
    grid: dict
    layers: tuple
    features: tuple
    with_spread: bool
    extras: tuple
    chunk_rows: int


# Per process and thread: the loaded models and open layers of the current map.
_STATE: dict = {}
_STATE_LOCK = threading.Lock()


class _Loaded:
    def __init__(self, ctx: _Context):
        # Written by this map's parent from the model files it checked against their
        # card (skops, hashes); a pickle loads in a fraction of the time skops needs,
        # once per worker.
        with open(ctx.models_file, "rb") as f:
            self.model, self.fold_models, self.applicability = pickle.load(f)
        self.reader = LayerReader(ctx.layers, GridSpec.from_dict(ctx.grid))

    def close(self):
        self.reader.close()


def _loaded(ctx: _Context) -> _Loaded:
    ident = threading.get_ident()
    with _STATE_LOCK:
        state = _STATE.get(ident)
        if state is not None and state[0] == ctx.key:
            return state[1]
        if state is not None:
            state[1].close()
        loaded = _Loaded(ctx)
        _STATE[ident] = (ctx.key, loaded)
        return loaded


def _release_state():
    """Close this thread's open layers (the parent calls it when a map is done)."""
    with _STATE_LOCK:
        state = _STATE.pop(threading.get_ident(), None)
    if state is not None:
        state[1].close()


def _extra_layers(loaded: _Loaded, ctx: _Context, X: np.ndarray) -> dict:
    """Layers computed from the window's feature matrix besides potential and spread.

    The dissimilarity index and the area-of-applicability mask (one value per row of
    ``X``); the parent writes them as ``NAME.tif`` and the zone pass marks cells with
    ``applicable == 0`` as :data:`ZONE_OUTSIDE`.
    """
    model = loaded.applicability
    if model is None:
        return {}
    di = model.dissimilarity(pd.DataFrame(X, columns=list(ctx.features), copy=False))
    return {"dissimilarity": di, "applicable": (di <= model.threshold_).astype(np.uint8)}


def _score_window(loaded, ctx, X, valid, potential, spread, extras):
    """Fill the valid cells of the window's potential, spread and extra layers."""
    p = predict_cells(loaded.model, X, ctx.features, chunk_rows=ctx.chunk_rows)
    # float32 as written; adding 0 turns a -0.0 into +0.0 so bit patterns order the scores
    potential[valid] = np.clip(p, 0.0, 1.0).astype(np.float32) + np.float32(0.0)
    if spread is not None:
        preds = [predict_cells(m, X, ctx.features, chunk_rows=ctx.chunk_rows) for m in loaded.fold_models]
        spread[valid] = spread_of(preds).astype(np.float32)
    extras.update(_extra_layers(loaded, ctx, X))


def _window_task(ctx: _Context, window: tuple) -> dict:
    """Potential, spread and extra layers of one window (runs in a worker)."""
    with bounded_gdal_cache():
        loaded = _loaded(ctx)
        col, row, width, height = window
        stack = loaded.reader.read(Window(col, row, width, height))
    n_feat = stack.shape[0]
    flat = stack.reshape(n_feat, -1)
    missing = np.isnan(flat)
    valid = ~missing.any(axis=0)
    X = np.ascontiguousarray(flat[:, valid].T)
    out = {"missing": missing.sum(axis=1), "n_valid": int(valid.sum())}
    potential = np.full(valid.size, np.nan, dtype=np.float32)
    spread = np.full(valid.size, np.nan, dtype=np.float32) if ctx.with_spread else None
    extras = {}
    if X.shape[0]:
        from threadpoolctl import threadpool_limits

        # one thread per prediction: maps run in parallel over windows, and OpenMP or
        # BLAS threads of each call would only compete with the other workers
        with threadpool_limits(1):
            _score_window(loaded, ctx, X, valid, potential, spread, extras)
    shape = (height, width)
    out["potential"] = potential.reshape(shape)
    out["spread"] = None if spread is None else spread.reshape(shape)
    out["extras"] = {}
    for name in ctx.extras:
        dtype, nodata, _ = EXTRA_LAYERS[name]
        full = np.full(valid.size, np.nan if nodata is None else nodata, dtype=np.float64)
        if name in extras:
            full[valid] = extras[name]
        out["extras"][name] = full.reshape(shape)
    return out


# ------------------------------------------------------------------ scheduling


def _results(ctx, windows, n_jobs, scheduler):
    """Window results in window order, from this process, joblib workers or dask."""
    tasks = [(int(w.core.col_off), int(w.core.row_off), int(w.core.width), int(w.core.height)) for w in windows]
    # no more workers than windows; one window is mapped here (starting workers costs seconds)
    n_jobs = min(n_jobs, len(tasks))
    if scheduler is not None:
        yield from _dask_results(ctx, tasks, n_jobs, scheduler)
    elif n_jobs == 1:
        for t in tasks:
            yield _window_task(ctx, t)
    else:
        from joblib import Parallel, delayed

        # pre_dispatch bounds the windows waiting in memory; results come in order
        parallel = Parallel(n_jobs=n_jobs, return_as="generator", pre_dispatch="2*n_jobs")
        yield from parallel(delayed(_window_task)(ctx, t) for t in tasks)


def _dask_results(ctx, tasks, n_jobs, scheduler):
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise InputError("--scheduler needs dask.distributed; install the scale extra "
                         "(pip install 'mlsites[scale]')") from None
    cluster = None
    if scheduler == "local":
        cluster = LocalCluster(n_workers=n_jobs, threads_per_worker=1, processes=True, dashboard_address=None)
        client = Client(cluster)
    else:
        try:
            client = Client(scheduler, timeout=30)
        except (OSError, TimeoutError) as exc:
            raise InputError(f"--scheduler {scheduler}: cannot reach a dask scheduler there ({exc}); give its "
                             "address as tcp://HOST:PORT, or 'local'") from None
    try:
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        pending = collections.deque()
        for t in tasks:
            pending.append(client.submit(_window_task, ctx, t, pure=False))
            # a few windows per worker in flight: enough to keep them busy, bounded memory
            while len(pending) > 2 * n_workers:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


# ------------------------------------------------------------------ the map


def _fit_applicability(card, card_path, log, table_path=None):
    """The area-of-applicability model of a card's training table, or None without one.

    Fitted at map time from the sample table the model was trained on (its hash is
    checked against the card), its fold column and the card's layer weights
    (``applicability_weights``: the held-out permutation importances once the
    explanations ran, equal weights otherwise).
    """
    from mlsites.experiment._hashing import file_digest
    from mlsites.mapping._applicability import ApplicabilityModel

    entry = card.get("training_table")
    if not entry:
        log(f"{card_path.name} names no training table: no dissimilarity or applicability layers")
        return None
    path = Path(table_path or entry["path"])
    if not path.is_file():
        raise InputError(f"{card_path}: training table {path} not found; it is needed for the area of "
                         "applicability (re-run the experiment, or keep the run folder with the models)")
    if file_digest(path) != entry.get("sha256"):
        raise InputError(f"{path}: SHA-256 differs from training_table in {card_path.name}; the table changed "
                         "after the model was fitted (re-run the experiment)")
    table = pd.read_parquet(path, columns=list(card["features"]) + ["fold", "weight"])
    weights = card.get("applicability_weights")
    model = ApplicabilityModel().fit(table[list(card["features"])], table["fold"].to_numpy(),
                                     weights=weights, sample_weight=table["weight"].to_numpy(),
                                     categorical=tuple(card.get("categorical") or ()))
    log(f"{card['name']}: area of applicability from {model.n_reference_} training samples, threshold "
        f"{model.threshold_:.3g} ({'importance' if weights else 'equal'} weights)")
    return model


def _applicability_summary(model, card):
    if model is None:
        return None
    return {"method": "dissimilarity index, Meyer & Pebesma (2021)", "threshold": float(model.threshold_),
            "mean_distance": float(model.mean_distance_), "n_reference": int(model.n_reference_),
            "weights": "held-out permutation importance" if card.get("applicability_weights") else "equal",
            "layer_weights": {str(k): float(v) for k, v in zip(card["features"], np.ravel(model.weights_))}
            if np.size(model.weights_) == len(card["features"]) else None}


def _check_zones(card, card_path):
    zones = card.get("zones")
    if not zones or not zones.get("zones"):
        raise InputError(f"{card_path}: the model card holds no calibrated zones; re-run the experiment with this "
                         "version to calibrate them")
    return zones


def _progress(total, desc, quiet):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, unit="win", disable=quiet, leave=False)


def map_model(card, out_dir, *, dem=None, n_jobs=1, scheduler=None, fresh=False, quiet=False, log=None,
              block_rows=BLOCK_ROWS, block_cols=BLOCK_COLS, cache_dir=None, card_label=None,
              training_table=None) -> MapResult:
    """Map a saved model: potential, zones and spread rasters plus ``map.json``.

    Parameters
    ----------
    card : path-like
        The model card (``models/NAME/LEARNER.card.json``).
    out_dir : path-like
        Folder to create; refused if it exists unless ``fresh``.
    dem : path-like, optional
        Map another DEM (a neighbouring region, a new survey area): its terrain
        and distance layers are derived with the card's settings, the input layers
        aligned onto its grid. Default: the run's own layers on the study grid.
    n_jobs : int, default 1
        Worker processes (joblib), or dask workers with ``scheduler="local"``.
    scheduler : str, optional
        A dask.distributed scheduler address (``tcp://HOST:PORT``), or ``"local"``
        for a local cluster of ``n_jobs`` workers; the workers must see the same
        files. The result is identical to the local one.
    fresh : bool, default False
        Replace an existing ``out_dir`` (and derive ``dem`` layers again).
    quiet : bool, default False
        No progress bars.
    log : callable, optional
        Receives one line per step.
    block_rows, block_cols : int
        Window size in cells (default 256 x 2048: whole GeoTIFF tiles). The result
        does not depend on it.
    cache_dir : path-like, optional
        Cache for layers derived for ``dem`` (default: the run's cache folder).
    card_label : str, optional
        Path of the card as recorded in ``map.json`` (default ``card`` as given);
        the run passes the card's final place.
    training_table : path-like, optional
        Read the training table (for the area of applicability) from here instead
        of the card's path; its hash is still checked against the card.

    Returns
    -------
    MapResult

    Raises
    ------
    OutputExistsError
        ``out_dir`` exists and ``fresh`` is false (checked before any work).
    InputError, GridMismatchError, RasterReadError, ...
        A card without feature recipe or zones, a model or layer file missing or
        failing its hash, an input that does not cover ``dem``; nothing is left in
        ``out_dir``.

    Notes
    -----
    ``potential.tif`` (float32, 0-1) is the final model's score; ``spread.tif``
    (float32) the standard deviation (ddof = 1) of the fold models' scores per
    cell, an uncertainty layer (written when the card lists fold models);
    ``zones.tif`` (uint8) the zones: code ``n`` for the highest of ``n`` zones down
    to 1 for the remainder, 0 nodata, :data:`ZONE_OUTSIDE` outside the area of
    applicability, with the zone names in the tags ``zone_<code>`` and a colour
    table. Cells lacking a value in any layer are nodata in every raster and
    counted in ``map.json``.

    Zone z with calibrated cumulative area share a holds the ``a * N`` highest of
    the N mapped cells: its threshold is the exact score of the boundary cell,
    found from a histogram of the float32 bit patterns and a second count inside
    the boundary's bin. A tie group at the boundary is kept whole, joining the
    zone when that leaves the count nearer ``a * N``; without ties the zone is
    within half a cell of ``a * N``. The realised shares are in ``map.json``.

    Every prediction is made in batches of :data:`CHUNK_ROWS` rows (the last one
    padded) by single-threaded estimators, so scores are bit-identical for any
    window size, number of jobs and scheduler.
    """
    from mlsites.experiment._hashing import file_digest
    from mlsites.experiment._models import load_fold_models, load_model

    log = log or (lambda m: None)
    t_start = time.perf_counter()
    out_dir = Path(out_dir)
    if out_dir.exists() and not fresh:
        raise OutputExistsError(f"{out_dir}: exists already; use --fresh to replace it or --out for another folder")
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)) or n_jobs < 1:
        raise InputError(f"n_jobs={n_jobs!r}; expected a whole number of jobs >= 1")
    saved = load_model(card)  # integrity check of the model file before any work
    card_path, card_data = saved.card_path, saved.card
    zones = _check_zones(card_data, card_path)
    seconds = {}
    t0 = time.perf_counter()
    source = resolve_features(card_data, card_path, dem=dem, cache_dir=cache_dir, fresh=fresh, quiet=quiet,
                              log=log)
    seconds["features"] = round(time.perf_counter() - t0, 3)
    grid = source.grid
    with_spread = len(card_data.get("fold_models") or []) >= 2
    if not with_spread:
        log(f"{card_path.name} lists fewer than two fold models: no spread layer")
    fold_models = load_fold_models(saved) if with_spread else []
    t0 = time.perf_counter()
    applicability = _fit_applicability(card_data, card_path, log, training_table)
    seconds["applicability_fit"] = round(time.perf_counter() - t0, 3)
    card_sha = file_digest(card_path)
    windows = list(iter_windows(grid, block_rows=int(block_rows), block_cols=int(block_cols)))
    out_dir.parent.mkdir(parents=True, exist_ok=True)
    try:
        with staged_folder(out_dir) as staging:
            models_file = staging / ".models.pickle"
            with open(models_file, "wb") as f:
                pickle.dump((fast_predictor(single_threaded(saved.estimator)),
                             [fast_predictor(single_threaded(m)) for m in fold_models], applicability), f,
                            protocol=pickle.HIGHEST_PROTOCOL)
            ctx = _Context(key=f"{models_file}:{card_sha}", models_file=str(models_file), grid=grid.to_dict(),
                           layers=source.layers, features=tuple(card_data["features"]), with_spread=with_spread,
                           extras=tuple(EXTRA_LAYERS) if applicability is not None else (),
                           chunk_rows=CHUNK_ROWS)
            with bounded_gdal_cache():
                t0 = time.perf_counter()
                counts, missing, n_valid = _predict_pass(ctx, windows, staging, grid, n_jobs, scheduler, quiet,
                                                         card_data["name"])
                seconds["prediction"] = round(time.perf_counter() - t0, 3)
                log(f"{card_data['name']}: potential of {n_valid} cells in {seconds['prediction']:.1f} s")
                t0 = time.perf_counter()
                names = [z["name"] for z in zones["zones"]]
                cuts = plan_cuts(counts, [z["area_share"] for z in zones["zones"]])
                _refine_cuts(staging / "potential.tif", grid, cuts)
                seconds["zone_cuts"] = round(time.perf_counter() - t0, 3)
                t0 = time.perf_counter()
                applicable = staging / "applicable.tif" if "applicable" in ctx.extras else None
                code_counts = _zone_pass(staging, grid, names + [zones["remainder"]], cuts, applicable)
                seconds["zones"] = round(time.perf_counter() - t0, 3)
            seconds["total"] = round(time.perf_counter() - t_start, 3)
            summary = _summary(card_data, card_label or str(card), card_sha, grid, source, zones, cuts, code_counts,
                               n_valid, missing, ctx, n_jobs, scheduler, block_rows, block_cols, applicability,
                               seconds)
            for z in summary["zones"][:-1]:
                if z["calibrated_area_share"] >= 1.0:
                    log(f"{card_data['name']}: zone {z['name']} covers the whole mapped area: on held-out sites the "
                        f"model reaches {100 * z['target']:.0f} % of sites only with all of it (no zone below)")
            (staging / "map.json").write_text(json.dumps(summary, indent=2) + "\n")
            models_file.unlink()
    finally:
        _release_state()
    files = {p.name: p for p in sorted(out_dir.iterdir())}
    return MapResult(out_dir=out_dir, files=files, summary=summary)


def _predict_pass(ctx, windows, staging, grid, n_jobs, scheduler, quiet, learner):
    from mlsites.mapping._quantile import BIN_COUNT

    tags = {"software": f"mlsites {__version__}", "model": learner, "notice": _NOTICE}
    counts = np.zeros(BIN_COUNT, dtype=np.int64)
    missing = np.zeros(len(ctx.layers), dtype=np.int64)
    n_valid = 0
    with contextlib.ExitStack() as stack:
        writers = {"potential": stack.enter_context(RasterWriter(
            staging / "potential.tif", grid, dtype=np.float32, description="potential", compress=MAP_COMPRESSION,
            tags={**tags, "layer": "potential", "units": "score 0-1 (site class probability of the model)"}))}
        if ctx.with_spread:
            writers["spread"] = stack.enter_context(RasterWriter(
                staging / "spread.tif", grid, dtype=np.float32, description="spread", compress=MAP_COMPRESSION,
                tags={**tags, "layer": "spread", "units": "standard deviation of the fold models' scores"}))
        for name in ctx.extras:
            dtype, nodata, about = EXTRA_LAYERS[name]
            writers[name] = stack.enter_context(RasterWriter(
                staging / f"{name}.tif", grid, dtype=dtype, nodata=nodata, description=name,
                tags={**tags, "layer": name, "description": about}, categorical=np.dtype(dtype).kind != "f",
                compress=MAP_COMPRESSION))
        bar = stack.enter_context(_progress(len(windows), f"map {learner}", quiet))
        for w, res in zip(windows, _results(ctx, windows, n_jobs, scheduler)):
            pot = res["potential"]
            writers["potential"].write(pot, window=w.core)
            if ctx.with_spread:
                writers["spread"].write(res["spread"], window=w.core)
            for name in ctx.extras:
                writers[name].write(res["extras"][name], window=w.core)
            values = pot[~np.isnan(pot)]
            counts += coarse_counts(values)
            missing += res["missing"]
            n_valid += res["n_valid"]
            bar.update(1)
    if n_valid == 0:
        raise InputError(f"no cell of the {grid.height} x {grid.width} grid has a value in every feature layer "
                         f"({', '.join(l.name for l in ctx.layers)}); nothing to map")
    return counts, missing, n_valid


def _strips(grid):
    return iter_windows(grid, block_rows=max(1, min(grid.height, 4_000_000 // grid.width)))


def _refine_cuts(potential_path, grid, cuts):
    """Second pass: exact boundary values from counts inside the boundary bins."""
    bins = sorted({c.bin for c in cuts if c.threshold_bits is None})
    fine = {b: np.zeros(1 << 16, dtype=np.int64) for b in bins}
    if bins:
        with AlignedRaster(potential_path, grid) as src:
            for w in _strips(grid):
                pot = src.read(w.core).ravel()
                for b, c in fine_counts(pot[~np.isnan(pot)], bins).items():
                    fine[b] += c
    return finish_cuts(cuts, fine)


def _zone_pass(staging, grid, names, cuts, applicable):
    """Third pass: zone codes from the potential, written with names and colours."""
    import rasterio

    thresholds = [c.threshold for c in cuts]
    n_zones = len(names)
    tags = {f"zone_{n_zones - i}": name for i, name in enumerate(names)}
    tags.update({f"zone_{NODATA_ZONE}": "nodata", f"zone_{ZONE_OUTSIDE}": "outside the area of applicability",
                 "layer": "zones", "software": f"mlsites {__version__}", "notice": _NOTICE})
    # codes 0-255 by score zone, then per score zone the cells outside the area of applicability
    code_counts = np.zeros(512, dtype=np.int64)
    with AlignedRaster(staging / "potential.tif", grid) as src, \
            (AlignedRaster(applicable, grid, kind="categorical") if applicable else contextlib.nullcontext()) as app, \
            RasterWriter(staging / "zones.tif", grid, dtype=np.uint8, nodata=NODATA_ZONE, categorical=True,
                         description="zones", tags=tags, compress=MAP_COMPRESSION) as out:
        for w in _strips(grid):
            codes = assign_zones(src.read(w.core), thresholds)
            # counts by score zone, whether or not inside the area of applicability
            code_counts[:256] += np.bincount(codes.ravel(), minlength=256)
            if app is not None:
                outside = (app.read(w.core) == 0) & (codes != NODATA_ZONE)
                code_counts[256:] += np.bincount(codes[outside], minlength=256)
                codes[outside] = ZONE_OUTSIDE
            out.write(codes, window=w.core)
    # the colour table goes in after the writer renamed its file (it has no option for it)
    colours = dict.fromkeys(range(256), (0, 0, 0, 0)) | zone_colours(n_zones)  # unused codes transparent
    with rasterio.open(staging / "zones.tif", "r+") as ds:
        ds.write_colormap(1, colours)
    return code_counts


def _summary(card, card_label, card_sha, grid, source, zones, cuts, code_counts, n_valid, missing, ctx, n_jobs,
             scheduler, block_rows, block_cols, applicability, seconds):
    try:
        cell_km2 = grid.cell_area_m2() / 1e6
    except CRSError:  # geographic grid: cell areas vary by row
        cell_km2 = None
    names = [z["name"] for z in zones["zones"]] + [zones["remainder"]]
    n_zones = len(names)
    rows, cum = [], 0
    calib = zones["zones"] + [None]
    for i, name in enumerate(names):
        code = n_zones - i
        cells = int(code_counts[code])
        cum += cells
        z = calib[i]
        rows.append({
            "code": code, "name": name,
            "target": z["target"] if z else 1.0,
            "calibrated_area_share": z["area_share"] if z else 1.0,
            "threshold": cuts[i].threshold if z else None,
            "cells": cells,
            "cells_outside_applicability": int(code_counts[256 + code]) if applicability is not None else None,
            "area_share": cells / n_valid,
            "cumulative_area_share": cum / n_valid,
            "area_km2": cells * cell_km2 if cell_km2 is not None else None,
            "heldout_site_share": z["heldout_site_share"] if z else 1.0,
            "heldout_site_share_ci": [z["heldout_site_share_ci_low"], z["heldout_site_share_ci_high"]] if z else None,
            "n_heldout_sites": z["n_heldout_sites"] if z else None,
        })
    return {
        "software": f"mlsites {__version__}",
        "model_card": {"path": card_label, "sha256": card_sha, "learner": card["name"],
                       "model_sha256": card["model_sha256"], "fold_models": len(card.get("fold_models") or [])},
        "grid": grid.to_dict(),
        "features": {**source.info, "layers": [{"name": l.name, "path": l.path, "kind": l.kind}
                                               for l in source.layers]},
        "settings": {"jobs": n_jobs, "scheduler": scheduler, "block_rows": int(block_rows),
                     "block_cols": int(block_cols), "chunk_rows": ctx.chunk_rows},
        "cells": {"grid": grid.n_cells, "mapped": n_valid, "without_values": grid.n_cells - n_valid,
                  "missing_by_layer": {l.name: int(m) for l, m in zip(source.layers, missing) if m},
                  "outside_applicability": int(code_counts[256:].sum()) if applicability is not None else None},
        "applicability": _applicability_summary(applicability, card),
        "zones": rows,
        "zone_codes": {str(NODATA_ZONE): "nodata", str(ZONE_OUTSIDE): "outside the area of applicability",
                       **{str(r["code"]): r["name"] for r in rows}},
        "files": sorted(["potential.tif", "zones.tif"] + (["spread.tif"] if ctx.with_spread else [])
                        + [f"{n}.tif" for n in ctx.extras]),
        "seconds": seconds,
        "notice": _NOTICE,
    }
