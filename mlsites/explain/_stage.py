"""The explanation stage for a set of learners: tables, figures and settings in one folder."""

from __future__ import annotations

import json
import re
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites._files import staged_folder
from mlsites.errors import InputError, InsufficientDataError, OutputExistsError
from mlsites.explain._importance import (
    DEFAULT_CORRELATION_THRESHOLD,
    check_survey_layers,
    correlated_layers,
    importance_table,
)
from mlsites.explain._permutation import heldout_permutation_importance
from mlsites.explain._plots import plot_importance, plot_response
from mlsites.explain._response import DEFAULT_N_GRID, response_curves
from mlsites.explain._shap import DEFAULT_N_PERMUTATIONS, LayerExplainer

__all__ = ["ExplainResult", "explain_learners", "EXPLAIN_DEFAULTS"]

#: Defaults of the stage (and of the experiment's ``[explain]`` section).
EXPLAIN_DEFAULTS = {
    "n_explain": 100,
    "n_background": 50,
    "n_permutations": DEFAULT_N_PERMUTATIONS,
    "n_repeats": 5,
    "n_grid": DEFAULT_N_GRID,
    "n_ice": 30,
    "survey_layers": [],
    "correlation_threshold": DEFAULT_CORRELATION_THRESHOLD,
    # read by the run's contribution maps (mlsites.explain._in_run), not by explain_learners
    "contribution_max_cells": 5000,
}


@dataclass(frozen=True)
class ExplainResult:
    """What :func:`explain_learners` produced.

    Attributes
    ----------
    importance : DataFrame
        ``importance.csv`` (see :func:`mlsites.explain.importance_table`).
    shap_values : dict of str to DataFrame
        Learner -> SHAP values of the explanation sample (index: ``sample_id``).
    permutation : dict of str to PermutationImportance or None
    curves : DataFrame
        ``response_curves.csv`` (see :func:`mlsites.explain.response_curves`).
    correlated : DataFrame
        Pairs of layers above the correlation threshold.
    explainers : dict of str to LayerExplainer
        Ready for contribution maps (:func:`mlsites.explain.layer_contributions`).
    warnings : list of str
    settings : dict
        The content of ``explain.json``.
    out_dir : Path or None
    """

    importance: pd.DataFrame
    shap_values: dict
    permutation: dict
    curves: pd.DataFrame
    correlated: pd.DataFrame
    explainers: dict
    warnings: list
    settings: dict
    out_dir: Path | None = field(default=None)

    def top_layers(self, learner, n=3):
        """The ``n`` most important layers of ``learner``: by held-out permutation
        importance when it was computed, else by mean |SHAP|."""
        rows = self.importance[self.importance["learner"] == learner]
        if rows.empty:
            raise InputError(f"learner {learner!r} was not explained; explained: {sorted(self.explainers)}.")
        key = "permutation_mean" if rows["permutation_mean"].notna().any() else "shap_mean_abs"
        return rows.sort_values([key, "layer"], ascending=[False, True])["layer"].head(int(n)).tolist()


def _count(name, value, minimum=1):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(f"{name}={value!r}; expected a whole number >= {minimum}.")
    return int(value)


def _check_inputs(models, table, features, categorical, fold_models):
    if not isinstance(models, dict) or not models:
        raise InputError("models is empty; pass a dict of learner name to fitted learner.")
    if not isinstance(table, pd.DataFrame):
        raise InputError(f"table is a {type(table).__name__}; pass the sample table as a pandas DataFrame.")
    features = [features] if isinstance(features, str) else list(features)
    missing = [c for c in ["sample_id", "label", "weight"] + features if c not in table.columns]
    if missing:
        raise InputError(f"column(s) {missing} not in the sample table; available: {list(table.columns)}.")
    bad = [c for c in categorical if c not in features]
    if bad:
        raise InputError(f"categorical layer(s) {bad} are not among the features {features}; list them in both.")
    fold_models = dict(fold_models or {})
    unknown = [n for n in fold_models if n not in models]
    if unknown:
        raise InputError(f"fold models given for {unknown}, which are not among the learners {list(models)}.")
    return features, list(categorical), fold_models


def _draw(rng, pool, n, what, key):
    if n > pool.size:
        raise InsufficientDataError(
            f"the {what} asks for {n} landscape cells but the sample table holds only {pool.size}; set "
            f"[explain] {key} to at most {pool.size} (or draw more background cells in [sampling]).")
    return np.sort(rng.choice(pool, size=n, replace=False))


def _safe(name):
    return re.sub(r"[^A-Za-z0-9_.-]", "_", str(name))


def explain_learners(models, table, *, features, categorical=(), fold_models=None, out_dir=None,
                     n_explain=EXPLAIN_DEFAULTS["n_explain"], n_background=EXPLAIN_DEFAULTS["n_background"],
                     n_permutations=EXPLAIN_DEFAULTS["n_permutations"], n_repeats=EXPLAIN_DEFAULTS["n_repeats"],
                     n_grid=EXPLAIN_DEFAULTS["n_grid"], n_ice=EXPLAIN_DEFAULTS["n_ice"], survey_layers=(),
                     correlation_threshold=DEFAULT_CORRELATION_THRESHOLD, random_state=0, n_jobs=1,
                     overwrite=False, quiet=False, log=None):
    """Explain several fitted learners: SHAP, held-out permutation importance, response curves.

    Parameters
    ----------
    models : dict of str to fitted estimator
        Learner name -> learner fitted on all samples (the saved models), in the
        order the figures list them.
    table : DataFrame
        The sample table: ``sample_id``, ``label`` (1 site cell, 0 landscape),
        ``weight`` and the feature columns.
    features : sequence of str
        Layer columns, as the learners were fitted on them.
    categorical : sequence of str, default ()
        Categorical layers (class grids and bars in the response figures).
    fold_models : dict of str to list, optional
        Learner -> per fold ``(estimator, site_rows, site_weights, landscape_rows)``
        with positions in ``table`` (see :func:`heldout_permutation_importance`).
        A learner without fold models gets no permutation importance, and a warning.
    out_dir : path-like, optional
        Folder to write (see Notes); None writes nothing.
    n_explain : int, default 100
        Landscape cells drawn at random (seeded) whose SHAP values are computed;
        the response curves average over the same cells.
    n_background : int, default 50
        Landscape cells drawn at random (seeded, independently of the explained
        cells) as the background of the interventional explainers.
    n_permutations : int, default 10
        Antithetic permutation pairs of the model-agnostic explainer.
    n_repeats : int, default 5
        Permutations per fold and layer of the permutation importance.
    n_grid, n_ice : int, default 20, 30
        Response grid size (numeric layers) and individual curves kept.
    survey_layers : sequence of str, default ()
        Layers that may encode survey effort (distance to modern roads, ...): a
        warning when one ranks first.
    correlation_threshold : float, default 0.8
        |Spearman rho| over the landscape cells above which two layers are flagged.
    random_state : int, default 0
    n_jobs : int, default 1
        Folds of the permutation importance in parallel; results do not depend on it.
    overwrite : bool, default False
        Replace an existing ``out_dir``; otherwise :class:`OutputExistsError`.
    quiet : bool, default False
        No progress bar.
    log : callable, optional
        Receives one line per step and every warning.

    Returns
    -------
    ExplainResult

    Raises
    ------
    InputError
        Unknown columns, survey layers that are not features, bad counts.
    InsufficientDataError
        ``n_explain`` or ``n_background`` larger than the landscape cells available.
    OutputExistsError
        ``out_dir`` exists and ``overwrite`` is false (checked before any work).

    Notes
    -----
    Files in ``out_dir``: ``importance.csv`` and ``importance.png`` (per learner and
    layer: mean |SHAP| and its share, held-out permutation importance with sd, ranks,
    notes), ``shap_values.csv`` (learner, sample_id, expected_value, one column per
    layer; no coordinates), ``permutation_by_fold.csv``, ``response_curves.csv`` and
    one ``response_<layer>.png`` per layer, ``correlated_layers.csv`` and
    ``explain.json`` (settings, per learner method, output space, expected value,
    background, seconds, and the warnings). Everything is written to a hidden
    staging folder beside ``out_dir`` and renamed into place at the end.
    """
    from tqdm.auto import tqdm

    t_start = time.perf_counter()
    emit = log or (lambda message: None)
    features, categorical, fold_models = _check_inputs(models, table, features, categorical, fold_models)
    survey_layers = check_survey_layers(survey_layers, features)
    n_explain = _count("n_explain", n_explain)
    n_background = _count("n_background", n_background)
    n_repeats = _count("n_repeats", n_repeats)
    out_dir = None if out_dir is None else Path(out_dir)
    if out_dir is not None and out_dir.exists() and not overwrite:
        raise OutputExistsError(f"{out_dir} exists already; choose another folder or allow overwriting.")
    label = table["label"].to_numpy()
    landscape = np.flatnonzero(label == 0)
    rng = np.random.default_rng(random_state)
    explained = _draw(rng, landscape, n_explain, "explanation sample (n_explain)", "n_explain")
    background = _draw(rng, landscape, n_background, "background sample (n_background)", "n_background")
    seeds = rng.integers(0, 2**31 - 1, size=3)
    X = table[features].reset_index(drop=True)
    X_explain = X.iloc[explained].set_axis(table["sample_id"].to_numpy()[explained])
    X_background = X.iloc[background]
    correlated = correlated_layers(X.iloc[landscape], categorical=categorical, threshold=correlation_threshold)

    names = list(models)
    shap_frames, permutation, explainers, info = {}, {}, {}, {}
    warnings = []
    steps = len(names) * 3
    with tqdm(total=steps, desc="explanations", unit="step", disable=quiet, leave=False) as bar:
        for name in names:
            est = models[name]
            t0 = time.perf_counter()
            explainer = LayerExplainer(est, background=X_background, n_permutations=n_permutations,
                                       random_state=int(seeds[0]))
            phi = explainer.shap_values(X_explain)
            phi.index.name = "sample_id"
            t_shap = time.perf_counter() - t0
            bar.update(1)
            explainers[name], shap_frames[name] = explainer, phi
            t0 = time.perf_counter()
            if name in fold_models:
                permutation[name] = heldout_permutation_importance(
                    fold_models[name], X, n_repeats=n_repeats, random_state=int(seeds[1]), n_jobs=n_jobs)
            else:
                permutation[name] = None
                warnings.append(f"{name}: no fold models, so no held-out permutation importance; it needs the "
                                "models of a cross-validation run (run the experiment again to keep them)")
            t_perm = time.perf_counter() - t0
            bar.update(1)
            t0 = time.perf_counter()
            curves = response_curves({name: est}, X_explain, categorical=categorical, n_grid=n_grid, n_ice=n_ice,
                                     random_state=int(seeds[2]))
            t_curves = time.perf_counter() - t0
            bar.update(1)
            info[name] = {
                "shap_method": explainer.method, "output_space": explainer.output_space,
                "expected_value": explainer.expected_value,
                "background": (f"{explainer.n_background} landscape cells drawn at random (seed {random_state})"
                               if explainer.n_background else "training cover of the trees (no background rows)"),
                "seconds": {"shap": round(t_shap, 2), "permutation": round(t_perm, 2),
                            "response": round(t_curves, 2)},
                "_curves": curves,
            }
            emit(f"explain {name}: SHAP ({explainer.method}, {explainer.output_space}) {t_shap:.1f} s, "
                 f"permutation {t_perm:.1f} s, response curves {t_curves:.1f} s")
    curves = pd.concat([info[n].pop("_curves") for n in names], ignore_index=True)
    table_out, more = importance_table(
        shap_frames, permutation, output_spaces={n: info[n]["output_space"] for n in names},
        methods={n: info[n]["shap_method"] for n in names}, survey_layers=survey_layers, correlated=correlated,
        threshold=correlation_threshold, n_correlation_rows=int(landscape.size))
    warnings = more + warnings
    for w in warnings:
        emit(f"warning: {w}")
    settings = {
        "learners": names, "features": features, "categorical": categorical,
        "n_explain": n_explain, "n_background": n_background, "n_permutations": int(n_permutations),
        "n_repeats": n_repeats, "n_grid": int(n_grid), "n_ice": int(n_ice), "survey_layers": survey_layers,
        "correlation_threshold": correlation_threshold, "random_state": random_state,
        "explained_rows": f"{n_explain} landscape cells (label 0) drawn at random without replacement",
        "response_scale": "class-1 probability (membership for the fuzzy baseline); figures centre each "
                          "learner's curves on its own mean partial dependence",
        "per_learner": info, "warnings": warnings,
    }
    result = ExplainResult(importance=table_out, shap_values=shap_frames, permutation=permutation, curves=curves,
                           correlated=correlated, explainers=explainers, warnings=warnings, settings=settings,
                           out_dir=out_dir)
    settings["seconds_computing"] = round(time.perf_counter() - t_start, 2)
    if out_dir is not None:
        _write(result, table, label, features, categorical, out_dir, overwrite)
    return result


def _write(result, table, label, features, categorical, out_dir, overwrite):
    with staged_folder(out_dir) as staging:
        names = result.settings["learners"]
        result.importance.to_csv(staging / "importance.csv", index=False, float_format="%.10g")
        plot_importance(result.importance, staging / "importance.png", names)
        shap_long = pd.concat(
            [phi.reset_index().assign(learner=n, expected_value=result.explainers[n].expected_value)
             for n, phi in result.shap_values.items()], ignore_index=True)
        shap_long = shap_long[["learner", "sample_id", "expected_value"] + features]
        shap_long.to_csv(staging / "shap_values.csv", index=False, float_format="%.10g")
        by_fold = [pi.by_fold.assign(learner=n) for n, pi in result.permutation.items() if pi is not None]
        cols = ["learner", "fold", "repeat", "layer", "baseline", "permuted", "drop"]
        (pd.concat(by_fold, ignore_index=True)[cols] if by_fold else pd.DataFrame(columns=cols)).to_csv(
            staging / "permutation_by_fold.csv", index=False, float_format="%.10g")
        result.curves.to_csv(staging / "response_curves.csv", index=False, float_format="%.10g")
        result.correlated.to_csv(staging / "correlated_layers.csv", index=False, float_format="%.10g")
        site = label == 1
        weight = table["weight"].to_numpy(dtype=np.float64)
        for layer in features:
            values = table[layer].to_numpy(dtype=np.float64)
            plot_response(result.curves, layer, staging / f"response_{_safe(layer)}.png", names,
                          categorical=layer in categorical, site_values=values[site], site_weight=weight[site],
                          landscape_values=values[~site])
        (staging / "explain.json").write_text(json.dumps(result.settings, indent=2, default=str) + "\n")
        if out_dir.exists() and not overwrite:
            raise OutputExistsError(f"{out_dir} appeared while explaining; choose another folder.")
