"""Period-specific models: one model per time window, every learner on the same folds.

Each site enters a window's sample table with its probability of belonging to
the window (:func:`mlsites.periods.window_probabilities`) as its weight; sites
below the minimum probability are left out and listed. The background rows stay
the same for every window. Every learner is cross-validated per window on the
same spatial folds (:func:`mlsites.evaluation.cross_validate`), its layers ranked
by held-out permutation importance, and consecutive windows are compared: does
the next window's high zone cover the same ground, and does it hold this
window's held-out sites?
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites.errors import InputError, InsufficientDataError

__all__ = ["WindowModels", "window_weights", "window_table", "fit_window_models", "write_window_models",
           "ZONE_CELLS"]

#: Where the high zones of the continuity table are cut and compared.
ZONE_CELLS = ("the sample table's background cells (a seeded random sample of the study area), "
              "not every map cell")
_FLOAT_FORMAT = "%.10g"


@dataclass(frozen=True)
class WindowModels:
    """Result of :func:`fit_window_models`.

    Attributes
    ----------
    metrics : pandas.DataFrame
        One row per learner per window (``window_metrics.csv``): ``window``,
        ``learner``, ``rank`` (within the window), ``auc_mean``, ``auc_sd``,
        ``boyce_mean``, ``auc_pooled``, ``n_sites``, ``effective_sites``,
        ``high_area_share`` (calibrated area of the top zone),
        ``heldout_site_share_high``, ``top_layer`` (largest held-out
        permutation importance) and ``top_importance``.
    importance : pandas.DataFrame
        ``window``, ``learner``, ``layer``, ``importance_mean``,
        ``importance_sd``, ``rank`` (``importance.csv``).
    continuity : pandas.DataFrame
        One row per pair of consecutive windows (``continuity.csv``), see
        :func:`fit_window_models`.
    dropped : pandas.DataFrame
        ``window``, ``site_id``, ``probability``, ``reason``: every site of the
        sample table left out of a window (``dropped_sites.csv``).
    crossval : dict of str to CrossValResult
        Per window.
    summary : dict
        Settings, counts and seconds (``windows.json``).
    """

    metrics: pd.DataFrame
    importance: pd.DataFrame
    continuity: pd.DataFrame
    dropped: pd.DataFrame
    crossval: dict = field(default_factory=dict)
    summary: dict = field(default_factory=dict)


def window_weights(label, site_id, site_probability) -> np.ndarray:
    """Sample weights of a window's table: each site counts by its probability, mean weight 1.

    Parameters
    ----------
    label : array-like of int, shape (n_samples,)
        1 for site cells, 0 for background cells.
    site_id : array-like, shape (n_samples,)
        Site of each site cell (ignored for background).
    site_probability : array-like of float, shape (n_samples,)
        The probability of the row's site belonging to the window (ignored for
        background), in (0, 1].

    Returns
    -------
    ndarray of float64, shape (n_samples,)
        The weights of :func:`mlsites.sampling.sample_weights` with each site's
        cells multiplied by its probability, the background rebalanced
        (:func:`mlsites.sampling.balance_weights`) to the summed probability of
        the sites, then all scaled to average 1. With every probability 1 they
        equal :func:`~mlsites.sampling.sample_weights`; a site of probability 1
        weighs twice a site of probability 0.5.

    Raises
    ------
    InputError
        A site probability outside (0, 1], or the checks of ``sample_weights``.
    """
    from mlsites.sampling import balance_weights, sample_weights

    label = np.asarray(label)
    w = sample_weights(label, site_id)
    prob = np.asarray(site_probability, dtype=np.float64)
    if prob.shape != label.shape:
        raise InputError(f"site_probability {prob.shape} and label {label.shape} must be of one length")
    pres = label == 1
    bad = pres & ~((prob > 0) & (prob <= 1))
    if bad.any():
        raise InputError(f"{int(bad.sum())} site cell(s) have a window probability outside (0, 1] (first "
                         f"{prob[bad][0]!r}); leave such sites out of the window instead")
    w[pres] *= prob[pres]
    w[~pres] = balance_weights(float(w[pres].sum()), int((~pres).sum()))
    return w * (label.size / w.sum())


def window_table(table, probability, *, window="window"):
    """The sample table of one window: its sites (weighted by probability) and all background.

    Parameters
    ----------
    table : pandas.DataFrame
        The run's sample table (``label``, ``site_id``, ``weight``, ...).
    probability : pandas.Series
        Probability of each kept site, indexed by site id
        (:meth:`WindowWeights.for_window`).
    window : str
        Name used in the dropped list.

    Returns
    -------
    (pandas.DataFrame, pandas.DataFrame)
        The window's table (rows in the table's order, index reset, ``weight``
        from :func:`window_weights`, column ``window_probability`` added) and the
        sites of ``table`` not kept: ``window``, ``site_id``, ``probability``
        (NaN when the site has no date), ``reason``.
    """
    label = table["label"].to_numpy()
    sid = table["site_id"].astype(str).to_numpy()
    prob = pd.Series(probability, dtype=np.float64)
    prob.index = prob.index.astype(str)
    p_row = np.where(label == 1, prob.reindex(sid).to_numpy(), np.nan)
    keep = (label == 0) | np.isfinite(p_row)
    out = table.loc[keep].reset_index(drop=True)
    out["window_probability"] = np.where(out["label"] == 1, p_row[keep], np.nan)
    out["weight"] = window_weights(out["label"].to_numpy(), out["site_id"].to_numpy(),
                                   np.nan_to_num(out["window_probability"].to_numpy(), nan=1.0))
    left = pd.unique(sid[(label == 1) & ~keep])
    dropped = pd.DataFrame({"window": window, "site_id": left, "probability": np.nan, "reason": ""})
    return out, dropped


def _effective(p) -> float:
    """Kish's effective number of sites, (sum w)^2 / sum w^2."""
    p = np.asarray(p, dtype=np.float64)
    return float(p.sum() ** 2 / (p ** 2).sum()) if p.size else 0.0


def _splits(table, fold_column, splitter):
    """(train, test) positions of the folds, as cross_validate makes them."""
    from mlsites.folds import PrecomputedFolds

    label = table["label"].to_numpy()
    split = splitter if splitter is not None else PrecomputedFolds(table[fold_column].to_numpy())
    return [(np.asarray(tr, dtype=np.int64), np.asarray(te, dtype=np.int64))
            for tr, te in split.split(np.zeros((label.size, 1)), label, np.zeros(label.size))]


def _heldout_folds(models, table, splits):
    """Per fold ``(model, site_rows, site_weights, landscape_rows)`` for permutation importance."""
    label, weight = table["label"].to_numpy(), table["weight"].to_numpy()
    background = np.flatnonzero(label == 0)
    out = []
    for est, (train, test) in zip(models, splits):
        sites = test[label[test] == 1]
        land = test[label[test] == 0]
        if land.size == 0:  # buffered leave-one-site-out: the background the fold never saw
            land = np.setdiff1d(np.setdiff1d(background, test), train)
        out.append((est, sites, weight[sites], land))
    return out


def _high_share(zones, learner) -> float:
    """Calibrated area share of the top zone of a learner (METHODS.md §13)."""
    return float(zones.loc[zones["learner"] == learner, "area_share"].iloc[0])


def fit_window_models(table, windows, *, features, categorical=(), learners, fold_column="fold", splitter=None,
                      random_state=0, zone_targets=None, top_area_shares=None, n_repeats=3, n_jobs=1,
                      progress=None, log=None) -> WindowModels:
    """Cross-validate every learner per time window on the same folds; compare consecutive windows.

    Parameters
    ----------
    table : pandas.DataFrame
        The sample table every learner of the run used (``sample_id``,
        ``label``, ``weight``, ``site_id``, ``fold_column``, features).
    windows : WindowWeights
        From :func:`mlsites.periods.window_probabilities`. Windows are taken in
        time order (by start, then end); continuity compares each with the next.
    features, categorical : sequence of str
    learners : dict of str to callable, or callable
        Learner name -> zero-argument factory of a fresh estimator; or a function
        of a window's sample table returning that dict (settings that depend on
        the table, such as the forest's rows drawn per tree, are then set per
        window).
    fold_column : str, default "fold"
        The fold of each row; every window uses it, so fold k holds out the same
        ground in every window.
    splitter : callable, optional
        ``splitter(window_table)`` -> a splitter replacing ``fold_column``
        (buffered leave-one-site-out, whose folds depend on the window's sites).
    random_state : int, default 0
        Seed of the cross-validation and of the permutations.
    zone_targets, top_area_shares : optional
        As in :func:`mlsites.evaluation.cross_validate`.
    n_repeats : int, default 3
        Permutations per fold and layer.
    n_jobs : int, default 1
    progress : tqdm-like or callable, optional
        Passed to :func:`~mlsites.evaluation.cross_validate` (one step per fit).
    log : callable, optional

    Returns
    -------
    WindowModels

    Raises
    ------
    InsufficientDataError
        No window could be cross-validated. A window that keeps no site of the
        table, or has a fold without sites, is skipped, logged and named with
        the reason in ``summary["skipped"]``; the others go on (continuity then
        compares the windows that have models).

    Notes
    -----
    Continuity between window i and the next, each cut at the calibrated area
    share of its best learner's top zone (``area_share`` of
    :attr:`CrossValResult.zones`, METHODS.md §13), scored by that learner fitted
    on all of its window's samples, on the sample table's background cells
    (:data:`ZONE_CELLS`): ``zone_overlap`` is the share of window i's high zone
    that is also in the next window's high zone; ``overlap_by_chance`` is what
    two unrelated zones would share (the next zone's area share).
    ``sites_in_next_zone`` is the weighted share of window i's held-out site cells
    that the next window's model of the same fold (which never saw the fold)
    places inside its high zone, measured by the area rank among that fold's
    landscape cells; ``sites_in_own_zone`` is the same for window i's own model,
    for comparison. A shift of preferences shows as an overlap near chance and a
    next-window capture well below the own one; a change in numbers only leaves
    both high. With a ``splitter`` the folds differ between windows and the two
    capture columns are left empty.
    """
    from mlsites.evaluation import area_ranks, cross_validate, cut_for_area_share
    from mlsites.explain import heldout_permutation_importance
    from mlsites.learners import fit_learner

    t0 = time.perf_counter()
    log = log or (lambda m: None)
    kwargs = {k: v for k, v in (("zone_targets", zone_targets), ("top_area_shares", top_area_shares))
              if v is not None}
    feats = list(features)
    label_all = table["label"].to_numpy()
    background = np.flatnonzero(label_all == 0)
    X_bg = table[feats].iloc[background]
    table_sites = set(table.loc[label_all == 1, "site_id"].astype(str))
    rows, imp_rows, dropped_parts, results, per_window, skipped, counts = [], [], [], {}, {}, {}, {}
    for w in windows.windows.sort_values(["start", "end"], kind="stable").itertuples():
        name = str(w.window)
        wt, undated = window_table(table, windows.for_window(name), window=name)
        left = windows.left_out[windows.left_out["window"] == name]
        left = left[left["site_id"].astype(str).isin(table_sites)]
        undated = undated[~undated["site_id"].astype(str).isin(set(left["site_id"].astype(str)))]
        undated = undated.assign(reason="no date range (see dropped_dates.csv)")
        dropped = pd.concat([left[["window", "site_id", "probability", "reason"]], undated], ignore_index=True)
        dropped_parts.append(dropped)
        site_p = wt.loc[wt["label"] == 1].drop_duplicates("site_id")["window_probability"].to_numpy()
        if site_p.size == 0:
            skipped[name] = (f"keeps no site of the sample table ({len(dropped)} left out); widen the window or "
                             "lower min_probability")
            log(f"window {name}: no models; {skipped[name]}")
            continue
        counts[name] = {"n_sites": int(site_p.size), "effective_sites": _effective(site_p),
                        "n_site_cells": int((wt["label"] == 1).sum()), "n_left_out": int(len(dropped))}
        log(f"window {name}: {site_p.size} sites (effective {_effective(site_p):.1f}), {len(dropped)} site(s) of the "
            f"sample table left out (listed with the reason), {int((wt['label'] == 0).sum())} background cells")
        split_obj = splitter(wt) if splitter is not None else None
        try:
            factories = learners(wt) if callable(learners) else learners
            cv = cross_validate(wt, features=feats, categorical=categorical, learners=factories,
                                fold_column=fold_column, splitter=split_obj, random_state=random_state,
                                n_jobs=n_jobs, progress=progress, **kwargs)
        except InsufficientDataError as exc:  # too few sites in some fold: say so, go on with the others
            skipped[name] = str(exc)
            log(f"window {name}: no models; {exc}")
            continue
        results[name] = cv
        splits = _splits(wt, fold_column, split_obj)
        top = {}
        for lname in cv.summary["learner"]:
            pi = heldout_permutation_importance(_heldout_folds(cv.fold_models[lname], wt, splits), wt[feats],
                                                n_repeats=n_repeats, random_state=random_state, n_jobs=n_jobs)
            s = pi.summary
            imp_rows.append(s.assign(window=name, learner=lname)[["window", "learner", "layer", "importance_mean",
                                                                   "importance_sd", "rank"]])
            top[lname] = s.sort_values("rank").iloc[0]
        for r in cv.summary.itertuples():
            zl = cv.zones[cv.zones["learner"] == r.learner].iloc[0]
            rows.append({"window": name, "learner": r.learner, "rank": int(r.rank), "auc_mean": r.auc_mean,
                         "auc_sd": r.auc_sd, "boyce_mean": r.boyce_mean, "auc_pooled": r.auc_pooled,
                         "n_sites": int(site_p.size), "effective_sites": _effective(site_p),
                         "high_area_share": float(zl["area_share"]),
                         "heldout_site_share_high": float(zl["heldout_site_share"]),
                         "top_layer": str(top[r.learner]["layer"]),
                         "top_importance": float(top[r.learner]["importance_mean"])})
        best = str(cv.summary["learner"].iloc[0])
        model = fit_learner(factories[best](), wt[feats], wt["label"].to_numpy(), sample_weight=wt["weight"].to_numpy())
        per_window[name] = {"table": wt, "splits": splits, "best": best, "high": _high_share(cv.zones, best),
                            "bg_scores": np.asarray(model.predict_proba(X_bg))[:, 1],
                            "fold_models": cv.fold_models[best],
                            "fold_ids": [wt[fold_column].iloc[te[0]] for _, te in splits] if split_obj is None
                            else None}
        log(f"window {name}: best {best} (AUC {cv.summary['auc_mean'].iloc[0]:.3f}), top layer "
            f"{top[best]['layer']}")

    if not per_window:
        raise InsufficientDataError("no time window could be cross-validated: " + "; ".join(
            f"{k}: {v}" for k, v in skipped.items()))
    names = list(per_window)
    cont = []
    for a, b in zip(names[:-1], names[1:]):
        A, B = per_window[a], per_window[b]
        in_a = A["bg_scores"] >= cut_for_area_share(A["bg_scores"], A["high"])
        in_b = B["bg_scores"] >= cut_for_area_share(B["bg_scores"], B["high"])
        row = {"window": a, "next_window": b, "learner": A["best"], "next_learner": B["best"],
               "high_area_share": A["high"], "next_high_area_share": B["high"],
               "zone_overlap": float(in_b[in_a].mean()) if in_a.any() else np.nan,
               "overlap_by_chance": float(in_b.mean()),
               "sites_in_next_zone": np.nan, "sites_in_own_zone": np.nan,
               "n_zone_cells": int(background.size), "zone_cells": "run background sample"}
        if A["fold_ids"] is not None and A["fold_ids"] == B["fold_ids"]:  # fold k holds out the same ground
            row["sites_in_next_zone"] = _captured(A, B["fold_models"], B["high"], feats, area_ranks)
            row["sites_in_own_zone"] = _captured(A, A["fold_models"], A["high"], feats, area_ranks)
        cont.append(row)
    continuity = pd.DataFrame(cont, columns=["window", "next_window", "learner", "next_learner", "high_area_share",
                                             "next_high_area_share", "zone_overlap", "overlap_by_chance",
                                             "sites_in_next_zone", "sites_in_own_zone", "n_zone_cells",
                                             "zone_cells"])
    dropped = pd.concat(dropped_parts, ignore_index=True)
    summary = {"windows": windows.windows.to_dict(orient="records"), "min_probability": windows.min_probability,
               "learners": sorted({n for cv in results.values() for n in cv.summary["learner"]}), "fold_column": fold_column if splitter is None else None,
               "splitter": None if splitter is None else "rebuilt per window",
               "n_repeats": int(n_repeats), "seed": random_state, "n_background": int(background.size),
               "n_dropped": int(len(dropped)), "per_window": counts, "skipped": skipped, "zone_cells": ZONE_CELLS,
               "weights": "site cells: probability / cells of the site; background balanced to the summed "
                          "probability; mean weight 1",
               "seconds": round(time.perf_counter() - t0, 2)}
    return WindowModels(metrics=pd.DataFrame(rows), importance=pd.concat(imp_rows, ignore_index=True),
                        continuity=continuity, dropped=dropped, crossval=results, summary=summary)


def _captured(A, models, high, feats, area_ranks) -> float:
    """Weighted share of window A's held-out site cells inside the high zone of each fold's model.

    ``models[k]`` never saw fold k; a site cell is inside when its area rank among
    fold k's landscape cells is at most ``high``.
    """
    wt = A["table"]
    hit = tot = 0.0
    for est, sites, sw, land in _heldout_folds(models, wt, A["splits"]):
        X_s, X_l = wt[feats].iloc[sites], wt[feats].iloc[land]
        ranks = area_ranks(np.asarray(est.predict_proba(X_s))[:, 1], np.asarray(est.predict_proba(X_l))[:, 1])
        hit += float(sw[ranks <= high + 1e-12].sum())
        tot += float(sw.sum())
    return hit / tot if tot > 0 else np.nan


def write_window_models(result: WindowModels, out_dir) -> None:
    """Write ``window_metrics.csv``, ``importance.csv``, ``continuity.csv``, ``dropped_sites.csv`` and
    ``windows.json`` into ``out_dir`` (created; no table holds coordinates)."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    for frame, fname in ((result.metrics, "window_metrics.csv"), (result.importance, "importance.csv"),
                         (result.continuity, "continuity.csv"), (result.dropped, "dropped_sites.csv")):
        frame.to_csv(out / fname, index=False, float_format=_FLOAT_FORMAT, lineterminator="\n")
    (out / "windows.json").write_text(json.dumps(result.summary, indent=2, default=str) + "\n")
