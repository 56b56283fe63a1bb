"""The explanation stage inside ``mlsites run`` (see mlsites.experiment._stages).

:func:`explain_in_run` explains every learner of a run into ``explain/`` (the
refitted models, the cross-validation's fold models on their own held-out rows)
and writes each learner's held-out permutation importance into its model card as
``applicability_weights``, so the maps that follow weight the layers of the area
of applicability by them. :func:`contributions_in_run` then maps the SHAP values
of the best learner's top layers into ``explain/contributions/``, window by window
through the mapping stage's feature readers and the project's raster writer.
"""

from __future__ import annotations

import contextlib
import json
import math
import time
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites.errors import InputError

__all__ = ["explain_in_run", "contributions_in_run", "heldout_fold_rows", "fold_model_tuples",
           "contribution_grid", "write_contribution_maps", "applicability_weights", "STAGE_KEYS"]

#: ``[explain]`` keys passed on to :func:`mlsites.explain.explain_learners`.
STAGE_KEYS = ("n_explain", "n_background", "n_permutations", "n_repeats", "n_grid", "n_ice", "survey_layers",
              "correlation_threshold")
#: Layers per contribution map set (the best learner's top layers).
N_CONTRIBUTION_LAYERS = 3
#: How the permutation importances become area-of-applicability weights (said in the card).
WEIGHTS_RULE = ("held-out permutation importance (mean drop of the fold AUC over folds x repeats), negative "
                "values set to 0, scaled to sum to 1")


# ------------------------------------------------------------------ fold rows


def heldout_fold_rows(table, splitter=None, fold_column="fold"):
    """Held-out rows of each fold, as the cross-validation scored them.

    Parameters
    ----------
    table : DataFrame
        The sample table (``label``, ``weight``, ``site_id`` and ``fold_column``).
    splitter : object, optional
        The splitter used instead of the fold column (buffered leave-one-out).

    Returns
    -------
    list of (site_rows, site_weights, landscape_rows)
        Per fold, in fold order: positions of its test site cells, their weights,
        and positions of its landscape cells (its held-out background, or for
        buffered leave-one-site-out the background within the buffer), the rows
        :func:`mlsites.evaluation.cross_validate` scored the fold's model on.
    """
    from mlsites.evaluation._crossval import _FoldRows, _make_splits, _site_codes

    label = table["label"].to_numpy().astype(np.int64)
    weight = table["weight"].to_numpy(dtype=np.float64)
    codes = _site_codes(table["site_id"].to_numpy(), label)
    splits = _make_splits(table, fold_column, splitter, table, label, codes)
    background = np.flatnonzero(label == 0)
    out = []
    for train, test in splits:
        f = _FoldRows.of(train, test, label, background)
        sites = f.test[f.site_pos]
        out.append((sites, weight[sites], f.land))
    return out


def fold_model_tuples(fold_estimators, rows):
    """``(estimator, site_rows, site_weights, landscape_rows)`` per fold, as explain_learners wants them."""
    if len(fold_estimators) != len(rows):
        raise InputError(f"{len(fold_estimators)} fold model(s) for {len(rows)} fold(s) of the sample table; the "
                         "models do not belong to this table (re-run the experiment)")
    return [(est, *r) for est, r in zip(fold_estimators, rows)]


# ------------------------------------------------------------------ weights


def applicability_weights(permutation, features):
    """Area-of-applicability weights from a held-out permutation importance, or None.

    Parameters
    ----------
    permutation : PermutationImportance or None
    features : sequence of str

    Returns
    -------
    dict of str to float or None
        Layer -> ``max(importance_mean, 0)`` scaled to sum to 1 (the dissimilarity
        index does not change when all weights are multiplied by one positive
        number, METHODS.md section 8); None when there is no importance or no
        layer has a positive one (equal weights are then kept).
    """
    if permutation is None:
        return None
    mean = permutation.summary.set_index("layer")["importance_mean"]
    w = np.array([max(float(mean.get(f, 0.0)), 0.0) if np.isfinite(mean.get(f, np.nan)) else 0.0
                  for f in features])
    if not w.sum() > 0:
        return None
    return {f: float(v) for f, v in zip(features, w / w.sum())}


def _write_card(path: Path, card: dict):
    from mlsites._files import replacing
    from mlsites.experiment._models import _json_default

    with replacing(path) as tmp:
        tmp.write_text(json.dumps(card, indent=2, default=_json_default) + "\n", encoding="utf-8")


# ------------------------------------------------------------------ stage


def _stage_settings(exp):
    from mlsites.explain._stage import EXPLAIN_DEFAULTS

    ex = exp["explain"]
    return {k: ex.get(k, EXPLAIN_DEFAULTS[k]) for k in STAGE_KEYS}


def explain_in_run(ctx):
    """Attributions and held-out importance of every learner of a run.

    Writes ``explain/`` into the run (:func:`mlsites.explain.explain_learners`
    with the ``[explain]`` settings, the run's seed and jobs), logs its warnings,
    and records each learner's held-out permutation importance in its model card
    (``applicability_weights``, see :func:`applicability_weights`). Keeps the
    :class:`ExplainResult` as ``ctx.explained`` for :func:`contributions_in_run`.

    Returns
    -------
    dict
        For the manifest: per learner its top layer, SHAP method, output space and
        seconds; the number of warnings; the learners whose cards got weights.
    """
    from mlsites.experiment._models import load_model
    from mlsites.explain._stage import explain_learners

    t0 = time.perf_counter()
    names = [str(n) for n in ctx.crossval.summary["learner"]]
    models = {n: load_model(ctx.card_path(n)).estimator for n in names}
    rows = heldout_fold_rows(ctx.table, ctx.splitter)
    folds = {n: fold_model_tuples(ctx.crossval.fold_models[n], rows) for n in names
             if ctx.crossval.fold_models.get(n)}
    settings = _stage_settings(ctx.exp)
    ctx.log(f"explain: {len(names)} learner(s), {settings['n_explain']} landscape cells explained, "
            f"{settings['n_background']} as background, held-out permutation importance on {len(rows)} folds x "
            f"{settings['n_repeats']} repeats")
    result = explain_learners(models, ctx.table, features=ctx.features, categorical=ctx.categorical,
                              fold_models=folds, out_dir=Path(ctx.staging) / "explain", **settings,
                              random_state=ctx.seed, n_jobs=ctx.n_jobs, quiet=ctx.quiet, log=ctx.log)
    # kept for the contribution maps after the maps (not part of the manifest)
    ctx.explained = result
    weighted = []
    for n in names:
        weights = applicability_weights(result.permutation.get(n), ctx.features)
        if weights is None:
            ctx.log(f"explain {n}: no positive held-out permutation importance; its maps keep equal layer "
                    "weights for the area of applicability")
            continue
        path = ctx.card_path(n)
        card = json.loads(path.read_text(encoding="utf-8"))
        card["applicability_weights"] = weights
        card["applicability_weights_source"] = WEIGHTS_RULE
        _write_card(path, card)
        weighted.append(n)
    per = result.settings["per_learner"]
    return {
        "learners": {n: {"top_layer": result.top_layers(n, 1)[0], "shap_method": per[n]["shap_method"],
                         "output_space": per[n]["output_space"], "seconds": per[n]["seconds"]} for n in names},
        "n_warnings": len(result.warnings),
        "applicability_weights": weighted,
        "seconds": round(time.perf_counter() - t0, 2),
    }


# ------------------------------------------------------------------ contribution maps


def contribution_grid(grid, max_cells):
    """The map grid, or the same extent in cells ``f`` times larger, with at most ``max_cells`` cells.

    ``f`` is the least whole factor for which :meth:`GridSpec.coarsened` gives at
    most ``max_cells`` cells; returns ``(grid, f)`` (``f = 1``: every map cell).
    """
    if isinstance(max_cells, bool) or not isinstance(max_cells, (int, np.integer)) or max_cells < 1:
        raise InputError(f"contribution_max_cells={max_cells!r}; expected a whole number of cells >= 1")
    if grid.n_cells <= max_cells:
        return grid, 1
    f = max(2, math.floor(math.sqrt(grid.n_cells / max_cells)))
    while True:
        coarse = grid.coarsened(max(1, math.ceil(max(grid.shape) / f)))
        if coarse.n_cells <= max_cells or coarse.shape == (1, 1):
            return coarse, f
        f += 1


def write_contribution_maps(explainer, layers, source, out_dir, *, features, max_cells, learner="",
                            block_rows=None, block_cols=None, quiet=True, log=None):
    """Per-cell SHAP values of ``layers`` as one GeoTIFF each, plus ``contributions.json``.

    Parameters
    ----------
    explainer : LayerExplainer
        Of the learner mapped.
    layers : sequence of str
        Layers to map (among ``explainer.layers``).
    source : FeatureSource
        Grid and feature layers of the model (:func:`mlsites.mapping.resolve_features`).
    out_dir : path-like
        Folder to write (staged; refused if it exists).
    features : sequence of str
        The model's feature order.
    max_cells : int
        At most this many cells: a larger map grid is read coarser
        (:func:`contribution_grid`; continuous layers resampled bilinearly,
        categorical ones by nearest neighbour).
    block_rows, block_cols : int, optional
        Window size in contribution cells (default: whole rows, about 2048 cells
        per window). The values do not depend on it.

    Returns
    -------
    dict
        The content of ``contributions.json``.

    Notes
    -----
    Windows of the contribution grid (:func:`mlsites.grid.iter_windows`) are read
    with :class:`mlsites.mapping.LayerReader`; the cells with a value in every
    layer are explained in one call of :func:`layer_contributions` per window.
    The values are in the explainer's output space; with every layer they would
    sum, with the expected value, to the learner's raw output of that cell.
    """
    from tqdm.auto import tqdm

    from mlsites import __version__
    from mlsites._files import staged_folder
    from mlsites.errors import OutputExistsError
    from mlsites.explain._shap import layer_contributions
    from mlsites.explain._stage import _safe
    from mlsites.grid import RasterWriter, bounded_gdal_cache, iter_windows
    from mlsites.mapping._features import LayerReader

    log = log or (lambda m: None)
    out_dir = Path(out_dir)
    if out_dir.exists():
        raise OutputExistsError(f"{out_dir}: exists already; choose another folder")
    t0 = time.perf_counter()
    layers = list(layers)
    features = list(features)
    grid, factor = contribution_grid(source.grid, max_cells)
    if block_rows is None:
        # windows of about 2048 cells: the progress bar moves, and SHAP needs no larger batches
        block_rows = max(1, 2048 // grid.width)
    windows = list(iter_windows(grid, block_rows=int(block_rows), block_cols=block_cols))
    n_valid = 0
    cell = [abs(float(v)) for v in grid.res]
    tags = {"software": f"mlsites {__version__}", "model": learner, "units": explainer.output_space,
            "expected_value": f"{explainer.expected_value:.10g}",
            "notice": "contribution of one layer to the model's output in this cell, relative to its mean; it "
                      "explains the model, not the past, and never replaces field survey"}
    with staged_folder(out_dir) as staging, bounded_gdal_cache(), contextlib.ExitStack() as stack:
        reader = LayerReader(source.layers, grid)
        stack.callback(reader.close)
        writers = {layer: stack.enter_context(RasterWriter(
            staging / f"{_safe(layer)}.tif", grid, dtype=np.float32, description=f"contribution of {layer}",
            tags={**tags, "layer": layer})) for layer in layers}
        bar = stack.enter_context(tqdm(total=len(windows), desc=f"contributions {learner}", unit="win",
                                       disable=quiet, leave=False))
        for w in windows:
            cells = reader.read(w.core)
            flat = cells.reshape(cells.shape[0], -1)
            valid = ~np.isnan(flat).any(axis=0)
            out = np.full((len(layers), valid.size), np.nan, dtype=np.float32)
            if valid.any():
                X = pd.DataFrame(flat[:, valid].T, columns=features)
                out[:, valid] = layer_contributions(explainer, X, layers).T
                n_valid += int(valid.sum())
            shape = (int(w.core.height), int(w.core.width))
            for k, layer in enumerate(layers):
                writers[layer].write(out[k].reshape(shape), window=w.core)
            bar.update(1)
        # the writers finish (overviews, rename) before the summary is written
        stack.close()
        seconds = time.perf_counter() - t0
        resolution = ("every map cell" if factor == 1 else
                      f"{factor} x {factor} map cells per contribution cell (at most {max_cells} cells)")
        info = {
            "learner": learner, "layers": layers, "units": explainer.output_space,
            "shap_method": explainer.method, "expected_value": float(explainer.expected_value),
            "files": {layer: f"{_safe(layer)}.tif" for layer in layers},
            "resolution": resolution, "cell_size": cell, "grid": [grid.height, grid.width],
            "map_grid": [source.grid.height, source.grid.width], "factor": factor, "max_cells": int(max_cells),
            "cells": {"grid": grid.n_cells, "explained": n_valid, "without_values": grid.n_cells - n_valid},
            "seconds": round(seconds, 2),
            "cells_per_second": round(n_valid / seconds, 1) if seconds > 0 else None,
            "reading": "positive values raise the learner's output in that cell above its mean "
                       "(the expected value), negative values lower it; values of one layer only",
        }
        (staging / "contributions.json").write_text(json.dumps(info, indent=2) + "\n")
    log(f"contributions {learner}: {', '.join(layers)} on {grid.height} x {grid.width} cells of "
        f"{cell[0]:g} x {cell[1]:g} ({resolution}), {n_valid} cells explained in {seconds:.1f} s; "
        f"{grid.n_cells - n_valid} cells without a value in every layer left nodata")
    return info


def contributions_in_run(ctx):
    """Per-layer contribution maps of the best learner; None when the explanations did not run."""
    from mlsites.mapping._features import resolve_features

    result = getattr(ctx, "explained", None)
    if result is None:
        return None
    best = ctx.best
    layers = result.top_layers(best, N_CONTRIBUTION_LAYERS)
    card_path = ctx.card_path(best)
    card = json.loads(card_path.read_text(encoding="utf-8"))
    source = resolve_features(card, card_path, quiet=ctx.quiet)
    max_cells = ctx.exp["explain"]["contribution_max_cells"]
    info = write_contribution_maps(result.explainers[best], layers, source,
                                   Path(ctx.staging) / "explain" / "contributions", features=card["features"],
                                   max_cells=max_cells, learner=best, quiet=ctx.quiet, log=ctx.log)
    return {"learner": best, "layers": layers, "resolution": info["resolution"], "cells": info["cells"]["explained"],
            "seconds": info["seconds"]}
