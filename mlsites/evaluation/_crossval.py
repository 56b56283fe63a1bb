"""Spatial cross-validation of several learners on the same saved folds.

Every learner is trained and scored on exactly the same splits of one sample table
(site cells and background cells, see ``mlsites.experiment`` for how it is built).
Per fold and pooled over folds the held-out scores go through
:func:`mlsites.evaluation.evaluate_scores`; a summary ranks the learners and compares
each with the best one across folds; zones and curves come from the pooled
out-of-fold scores.
"""

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from mlsites._files import replacing
from mlsites.errors import InputError, InsufficientDataError
from mlsites.evaluation._metrics import (
    DEFAULT_TOP_AREA_SHARES,
    DEFAULT_ZONE_TARGETS,
    capture_curve,
    evaluate_scores,
)
from mlsites.evaluation._zones import _zone_shares, assign_zones, zone_thresholds

__all__ = ["CrossValResult", "cross_validate", "write_crossval"]

#: Fold label of the pooled out-of-fold row in ``CrossValResult.by_fold``.
POOLED_FOLD = "all"

# Folds needed before the paired comparison switches from the t-test to Wilcoxon's
# signed-rank test (common practice: below 6 pairs the exact two-sided Wilcoxon
# p-value cannot go below 2/2^5 = 0.0625).
_MIN_FOLDS_WILCOXON = 6

_COUNT_COLUMNS = ["n_train", "n_test_site_cells", "n_test_sites", "n_test_background"]
# evaluate_scores counts duplicate n_test_site_cells and n_test_background
_DROPPED_KEYS = ("n_sites", "n_landscape")
_FLOAT_FORMAT = "%.10g"


@dataclass(frozen=True)
class CrossValResult:
    """Result of :func:`cross_validate`.

    Attributes
    ----------
    by_fold : pandas.DataFrame
        One row per learner and fold, plus one pooled row per learner with
        ``fold == "all"``: ``learner``, ``fold``, ``n_train``, ``n_test_site_cells``,
        ``n_test_sites``, ``n_test_background``, ``landscape`` ("held_out" or
        "within_buffer", see Notes of :func:`cross_validate`), then the measures
        of :func:`evaluate_scores` (``auc``, ``boyce``, ``captured_top_10`` ...,
        ``gini_zones``).
    summary : pandas.DataFrame
        One row per learner, best first: ``learner``, ``rank``, ``n_folds``,
        ``<measure>_mean`` and ``<measure>_sd`` over folds, ``auc_pooled``,
        ``auc_diff_vs_best`` (mean over folds of this learner's AUC minus the
        best learner's), ``p_value_vs_best`` and ``test_vs_best``.
    zones : pandas.DataFrame
        Per learner, one row per zone from the top (the remainder ``low`` last),
        every share cumulative (the zone and all zones above it): ``target``;
        ``area_share``, the least share of the area whose highest-scored cells hold
        the target share of the pooled held-out sites (what a map is cut at);
        ``calibration_site_share``, the held-out share it holds (at least the
        target); ``heldout_area_share`` and ``heldout_site_share``, the zones of each
        fold calibrated on the *other* folds and cut on its own landscape, pooled,
        with ``heldout_site_share_ci_low`` and ``_ci_high`` (95 % Wilson interval
        over ``n_heldout_sites``) and ``heldout_gain`` (Kvamme's gain). As a
        diagnostic only, ``insample_cut_area_share`` and ``insample_cut_site_share``:
        the held-out shares when each fold cuts its zones at its training sites'
        own scores, which overfitting learners make far too small.
    oof : pandas.DataFrame
        ``sample_id``, ``learner``, ``fold``, ``score``: every held-out prediction.
    curves : pandas.DataFrame
        Long form ``learner``, ``curve`` ("capture" or "roc"), ``x``, ``y``.
    fold_models : dict of str to list
        Per learner, the fitted estimator of each fold, in fold order (kept for the
        spread layer of a map, so nothing is refitted at map time).
    """

    by_fold: pd.DataFrame
    summary: pd.DataFrame
    zones: pd.DataFrame
    oof: pd.DataFrame
    curves: pd.DataFrame
    fold_models: dict = field(default_factory=dict)


# --------------------------------------------------------------------- checks


def _check_table(table, features, categorical, fold_column, splitter):
    if not isinstance(table, pd.DataFrame):
        raise InputError(f"table is a {type(table).__name__}; expected the sample table as a pandas DataFrame.")
    features = [features] if isinstance(features, str) else list(features)
    if not features:
        raise InputError("features is empty; name at least one feature column of the sample table.")
    needed = ["sample_id", "label", "weight", "site_id"] + features
    if splitter is None:
        needed.append(fold_column)
    missing = [c for c in needed if c not in table.columns]
    if missing:
        raise InputError(
            f"column(s) {missing} not in the sample table; available columns: {list(table.columns)}. "
            f"Check the feature names and fold_column={fold_column!r}."
        )
    bad_cat = [c for c in categorical if c not in features]
    if bad_cat:
        raise InputError(f"categorical column(s) {bad_cat} are not among features {features}; list them in both.")
    if len(table) == 0:
        raise InsufficientDataError("the sample table is empty; build samples before cross-validating.")
    label = table["label"].to_numpy()
    if not np.all(np.isin(label, (0, 1))):
        raise InputError(
            f"column 'label' holds {sorted(set(pd.unique(label)) - {0, 1})[:5]}; expected 1 for site cells, 0 for background."
        )
    weight = table["weight"].to_numpy(dtype=np.float64)
    if not np.all(np.isfinite(weight) & (weight >= 0)):
        row = int(np.flatnonzero(~(np.isfinite(weight) & (weight >= 0)))[0])
        raise InputError(f"column 'weight' is {weight[row]!r} at row {row}; weights must be finite and >= 0.")
    if table["sample_id"].duplicated().any():
        dup = table["sample_id"][table["sample_id"].duplicated()].iloc[0]
        raise InputError(f"sample_id {dup!r} appears more than once; every sample needs its own id.")
    return features, label.astype(np.int64), weight


def _check_learners(learners):
    if not isinstance(learners, Mapping) or not learners:
        raise InputError(
            f"learners={learners!r}; expected a non-empty dict of name to a zero-argument "
            f"callable that returns a fresh estimator, e.g. {{'logistic': lambda: make_learner('logistic')}}."
        )
    for name, factory in learners.items():
        if not isinstance(name, str) or not name or not callable(factory):
            raise InputError(
                f"learner {name!r}: expected a non-empty name and a zero-argument callable returning "
                f"an unfitted estimator, got {type(factory).__name__}."
            )
    return dict(learners)


def _site_codes(site_id, label):
    """Integer code per site (-1 for background), from the site_id of site cells."""
    codes = np.full(label.size, -1, dtype=np.int64)
    pres = label == 1
    if pres.any():
        codes[pres] = pd.factorize(pd.Series(np.asarray(site_id, dtype=object)[pres]).astype(str))[0]
    return codes


def _make_splits(table, fold_column, splitter, X, label, codes):
    if splitter is None:
        from mlsites.folds import PrecomputedFolds

        fold = table[fold_column].to_numpy()
        if np.issubdtype(np.asarray(fold).dtype, np.number) and np.any(fold < 0):
            raise InputError(
                f"column {fold_column!r} holds negative fold numbers ({int((fold < 0).sum())} rows), as "
                f"buffered leave-one-site-out writes for background; pass splitter=BufferedLeaveOneSiteOut(...) "
                f"so the buffer is honoured."
            )
        splitter = PrecomputedFolds(fold)
    groups = np.where(codes >= 0, codes, -1)
    splits = [(np.asarray(tr, dtype=np.int64), np.asarray(te, dtype=np.int64))
              for tr, te in splitter.split(X, label, groups)]
    if len(splits) < 2:
        raise InsufficientDataError(
            f"the splitter gave {len(splits)} fold(s); at least 2 are needed to cross-validate. "
            f"Use more folds or smaller blocks."
        )
    for k, (train, test) in enumerate(splits):
        n_test_sites = int((label[test] == 1).sum())
        if n_test_sites == 0:
            raise InsufficientDataError(
                f"Fold {k} has no site cells among its {test.size} test rows; every fold must hold "
                f"held-out sites. Use fewer folds or a different block size."
            )
        for what, value in (("site", 1), ("background", 0)):
            if not (label[train] == value).any():
                raise InsufficientDataError(
                    f"Fold {k} has no {what} cells among its {train.size} training rows; a learner needs "
                    f"both. Use fewer folds or a different block size."
                )
        if not (label[test] == 0).any():
            untrained = np.ones(label.size, dtype=bool)
            untrained[train] = False
            if not (untrained & (label == 0)).any():
                raise InsufficientDataError(
                    f"Fold {k} has no background outside its {train.size} training rows to score its "
                    f"held-out sites against (for buffered leave-one-site-out: no background cell within "
                    f"the buffer of the held-out site). Use a larger buffer or more background cells."
                )
    return splits


# --------------------------------------------------------------------- one task


def _with_seed(estimator, seed):
    """Set every ``random_state`` parameter (pipeline steps included) to ``seed``."""
    try:
        keys = [k for k in estimator.get_params(deep=True) if k == "random_state" or k.endswith("__random_state")]
    except AttributeError:
        return estimator
    if keys:
        estimator.set_params(**{k: int(seed) for k in keys})
    return estimator


def _fit_and_score(factory, seed, X, label, weight, train, test, train_sites):
    """Fit one fresh estimator; return its scores on the test rows and training sites, and itself."""
    from mlsites.learners import fit_learner

    est = _with_seed(factory(), seed)
    fit_learner(est, X.iloc[train], label[train], sample_weight=weight[train])
    rows = np.concatenate((test, train_sites))
    proba = np.asarray(est.predict_proba(X.iloc[rows]))
    if proba.ndim != 2 or proba.shape[1] != 2:
        raise InputError(
            f"{type(est).__name__}.predict_proba returned shape {proba.shape}; expected (n, 2) for the "
            f"labels 0 (background) and 1 (site)."
        )
    scores = proba[:, 1].astype(np.float64)
    if not np.all(np.isfinite(scores)):
        raise InputError(f"{type(est).__name__} predicted {int((~np.isfinite(scores)).sum())} non-finite score(s).")
    return scores[: test.size], scores[test.size :], est


#: ``landscape`` values: background among the fold's test rows, or background in
#: neither its training nor its test rows (for buffered leave-one-site-out, the
#: background within the buffer around the held-out site).
LANDSCAPES = ("held_out", "within_buffer")


@dataclass(frozen=True)
class _FoldRows:
    """Rows of one fold: training rows and sites, test rows, landscape rows, rows to score.

    The landscape is background the fold's model was not trained on: the fold's
    held-out background, or, when its test rows hold none (buffered
    leave-one-site-out), the background in neither its training nor its test rows
    (the background within the buffer). ``scored`` lists the test rows, then
    landscape rows outside them; ``site_pos`` and ``land_pos`` index the held-out
    sites and the landscape in ``scored``.
    """

    train: np.ndarray
    train_sites: np.ndarray
    test: np.ndarray
    land: np.ndarray
    source: str
    scored: np.ndarray
    site_pos: np.ndarray
    land_pos: np.ndarray

    @classmethod
    def of(cls, train, test, label, background_rows):
        site_pos = np.flatnonzero(label[test] == 1)
        held = np.flatnonzero(label[test] == 0)
        if held.size:
            land, source, scored, land_pos = test[held], "held_out", test, held
        else:
            land = np.setdiff1d(np.setdiff1d(background_rows, test), train)
            source, scored = "within_buffer", np.concatenate((test, land))
            land_pos = test.size + np.arange(land.size)
        return cls(train, train[label[train] == 1], test, land, source, scored, site_pos, land_pos)


def _report(progress, message):
    if progress is None:
        return
    if hasattr(progress, "update"):
        progress.update(1)
    else:
        progress(message)


# --------------------------------------------------------------------- summary


def _paired_test(diff):
    """Two-sided paired test of fold differences; returns (p, test name)."""
    diff = diff[np.isfinite(diff)]
    if diff.size < 2:
        return np.nan, ""
    name = "wilcoxon" if diff.size >= _MIN_FOLDS_WILCOXON else "ttest_rel"
    if np.all(diff == 0):
        return 1.0, name
    if name == "wilcoxon":
        return float(stats.wilcoxon(diff).pvalue), name
    # ttest_rel(a, b) is the one-sample t-test of a - b against 0
    return float(stats.ttest_1samp(diff, 0.0).pvalue), name


def _summarise(by_fold, metric_columns):
    folds = by_fold[by_fold["fold"] != POOLED_FOLD]
    pooled = by_fold[by_fold["fold"] == POOLED_FOLD].set_index("learner")
    rows = []
    for name, group in folds.groupby("learner", sort=False):
        row = {"learner": name, "n_folds": int(len(group))}
        for col in metric_columns:
            values = group[col].astype(np.float64)
            row[f"{col}_mean"] = float(values.mean())
            row[f"{col}_sd"] = float(values.std(ddof=1))
        row["auc_pooled"] = float(pooled.loc[name, "auc"])
        rows.append(row)
    summary = pd.DataFrame(rows)
    boyce = summary["boyce_mean"].fillna(-np.inf)
    order = np.lexsort((summary["learner"].to_numpy(), -boyce.to_numpy(), -summary["auc_mean"].to_numpy()))
    summary = summary.iloc[order].reset_index(drop=True)
    summary.insert(1, "rank", np.arange(1, len(summary) + 1))
    best = summary["learner"].iloc[0]
    auc = folds.pivot(index="fold", columns="learner", values="auc").astype(np.float64)
    diffs, pvals, tests = [], [], []
    for name in summary["learner"]:
        if name == best:
            diffs.append(np.nan)
            pvals.append(np.nan)
            tests.append("")
            continue
        d = (auc[name] - auc[best]).to_numpy()
        p, test = _paired_test(d)
        diffs.append(float(np.nanmean(d)) if np.isfinite(d).any() else np.nan)
        pvals.append(p)
        tests.append(test)
    summary["auc_diff_vs_best"] = diffs
    summary["p_value_vs_best"] = pvals
    summary["test_vs_best"] = tests
    return summary


# --------------------------------------------------------------------- main


def cross_validate(
    table,
    *,
    features,
    categorical=(),
    learners,
    fold_column="fold",
    splitter=None,
    random_state=0,
    zone_targets=DEFAULT_ZONE_TARGETS,
    top_area_shares=DEFAULT_TOP_AREA_SHARES,
    n_jobs=1,
    progress=None,
):
    """Train and score every learner on the same spatial folds.

    Parameters
    ----------
    table : pandas.DataFrame
        Sample table with columns ``sample_id``, ``label`` (1 site cell, 0
        background), ``weight`` (site cells ``1 / n_cells`` of their site,
        background balanced), ``site_id`` and ``fold_column``, plus the features.
    features : sequence of str
        Feature columns passed to the learners (as a DataFrame, in this order).
    categorical : sequence of str, default ()
        Categorical features; only checked here (the learner factories must
        already know them, e.g. ``make_learner(..., categorical_features=...)``).
    learners : dict of str to callable
        Learner name to a zero-argument callable returning a fresh, unfitted
        estimator with ``predict_proba``; called once per fold.
    fold_column : str, default "fold"
        Column with the saved fold of each sample, 0 .. k-1 (read through
        :class:`mlsites.folds.PrecomputedFolds`).
    splitter : object, optional
        Any splitter with ``split(X, y, groups)`` yielding ``(train, test)`` index
        arrays, e.g. :class:`mlsites.folds.BufferedLeaveOneSiteOut`; replaces
        ``fold_column``. ``groups`` is an integer site code, -1 for background.
    random_state : int or None, default 0
        Seed of the integer seeds given to each (learner, fold) fit.
    zone_targets : mapping of str to float, default {"high": 0.70, "medium": 0.90}
        Cumulative share of sites each zone must hold, from the top.
    top_area_shares : sequence of float, default (0.10, 0.20, 0.33)
        Area shares for ``captured_top_*`` and ``gain_top_*``.
    n_jobs : int, default 1
        Parallel (learner, fold) fits with joblib; results do not depend on it.
    progress : callable or tqdm-like, optional
        Called with a one-line message after each (learner, fold) fit, or its
        ``update(1)`` if it has one.

    Returns
    -------
    CrossValResult

    Raises
    ------
    InputError
        Unknown feature or fold column, bad labels, weights, learners, zone targets
        or area shares (all checked before any fit).
    InsufficientDataError
        A fold with no site cell among its test rows, no site or background cell
        among its training rows, or no background outside its training rows to
        score against (checked before any fit).

    Notes
    -----
    For fold k a fresh estimator is fitted on the training rows with
    :func:`mlsites.learners.fit_learner` and the sample weights; its score is
    ``predict_proba[:, 1]``. Every parameter named ``random_state`` (also inside a
    pipeline) is set to an integer seed drawn, before any fit, from
    ``numpy.random.default_rng(random_state)`` as a (learner, fold) matrix in the
    order of ``learners``; so the same seed gives the same results for any
    ``n_jobs``.

    Held-out measures of fold k (:func:`evaluate_scores`): the test site cells
    with their weights as ``site_weight`` (each site counts once) against the test
    background cells, weight 1, as ``landscape_scores``. A fold whose test rows hold
    no background (buffered leave-one-site-out without ``background_in_test``)
    uses the background that is in neither its training nor its test rows instead:
    for buffered leave-one-site-out, the background within the buffer of the
    held-out site, which the fold's model never saw, just as it never saw the
    site. Scoring against the training background instead would flatter every
    learner that fits its training data closely. Column ``landscape`` says which
    was used ("held_out" or "within_buffer"; "mixed" in the pooled row when folds
    differ); ``n_test_background`` counts the landscape cells.

    Zones are calibrated on held-out sites (METHODS.md §13). Each held-out site
    cell is placed at its fold's area rank, the share of that fold's landscape
    scoring at least as high (so scores of different fold models are never
    compared with each other), and for each target t the least area share a(t)
    whose top cells hold a share t of the held-out sites (weighted, each site
    counting once) is read off the pooled ranks. ``zones.area_share`` is a(t) from
    all folds: a map of the final model is cut at its own top a(t) of cells. To
    test that rule on sites it has not seen, fold k's zones use a(t) calibrated on
    the other folds only, cut on fold k's landscape (:func:`cut_for_area_share`);
    its held-out ``site_share_<zone>`` and ``gain_<zone>`` measure those zones, and
    ``zones.heldout_site_share`` pools them with a Wilson interval. Zones cut at the
    training sites' own scores are kept only as the ``insample_cut_*`` diagnostic:
    a learner that fits its training sites closely (fully grown trees) scores them
    too high and its in-sample zones hold far fewer unseen sites than promised.

    The pooled row (``fold == "all"``) evaluates all held-out scores of the folds
    together (site cells with their weights, landscape cells of every fold with
    weight 1); its zone thresholds come from these pooled held-out site scores, so
    its zone shares meet the targets by construction. ``curves`` holds the
    capture curve (share of sites against share of area, from
    :func:`capture_curve`) and the ROC curve (``sklearn.metrics.roc_curve``, site
    cells weighted) of the pooled scores; with a background sample of equal weights
    as landscape the two coincide, computed independently.

    The summary ranks learners by mean fold AUC, descending (ties: mean Boyce
    index, then name). Means and standard deviations (ddof = 1) skip folds where a
    measure is undefined (NaN, e.g. gain with no site in the zone). Each learner is
    compared with the best on the fold AUCs: ``auc_diff_vs_best`` is the mean
    difference and ``p_value_vs_best`` a two-sided paired test of the differences,
    Wilcoxon's signed-rank test (``scipy.stats.wilcoxon``) with 6 folds or more,
    else the paired t-test (as ``scipy.stats.ttest_rel``); 1 when all differences
    are 0, NaN for the best learner itself. Folds are not independent samples, so
    read the p-value as a guide, not an exact error rate.

    References
    ----------
    Roberts, D.R. et al. (2017). Cross-validation strategies for data with temporal,
    spatial, hierarchical, or phylogenetic structure. Ecography 40:913-929.
    doi:10.1111/ecog.02881
    """
    from joblib import Parallel, delayed

    features, label, weight = _check_table(table, features, categorical, fold_column, splitter)
    learners = _check_learners(learners)
    if isinstance(random_state, bool) or not (random_state is None or isinstance(random_state, (int, np.integer))):
        raise InputError(f"random_state={random_state!r}; expected an integer seed (or None).")
    # a dummy evaluation checks the zone targets and area shares before any fit
    evaluate_scores([1.0], [0.0, 1.0], zone_targets=zone_targets, top_area_shares=top_area_shares)
    codes = _site_codes(table["site_id"].to_numpy(), label)
    X = table[features].reset_index(drop=True)
    splits = _make_splits(table, fold_column, splitter, X, label, codes)
    n_folds = len(splits)
    seeds = np.random.default_rng(random_state).integers(0, 2**31 - 1, size=(len(learners), n_folds))
    names = list(learners)
    tasks = [(i, k) for i in range(len(names)) for k in range(n_folds)]
    background_rows = np.flatnonzero(label == 0)
    # Per fold, once for all learners: its landscape rows, the rows to score (test
    # rows, then landscape rows outside them) and where sites and landscape sit in them.
    folds = [_FoldRows.of(train, test, label, background_rows) for train, test in splits]

    def run(i, k):
        f = folds[k]
        return _fit_and_score(learners[names[i]], seeds[i, k], X, label, weight, f.train, f.scored,
                              f.train_sites)

    if n_jobs == 1:
        results = (run(i, k) for i, k in tasks)
    else:
        results = Parallel(n_jobs=n_jobs, return_as="generator")(delayed(run)(i, k) for i, k in tasks)
    outputs = []
    for (i, k), out in zip(tasks, results):
        outputs.append(out)
        _report(progress, f"{names[i]}: fold {k + 1}/{n_folds} done")

    sample_id = table["sample_id"].to_numpy()
    all_test = np.concatenate([f.test for f in folds])
    all_land = np.concatenate([f.land for f in folds])
    sources = {f.source for f in folds}
    pooled_source = sources.pop() if len(sources) == 1 else "mixed"
    n_heldout_sites = int(np.unique(codes[all_test[label[all_test] == 1]]).size)
    fold_rows, oof_parts, zone_parts, curve_parts = [], [], [], []
    fold_models = {}
    for i, name in enumerate(names):
        per_fold = [outputs[i * n_folds + k] for k in range(n_folds)]
        fold_models[name] = [est for _, _, est in per_fold]
        site_scores = [s_all[f.site_pos] for f, (s_all, _, _) in zip(folds, per_fold)]
        land_scores = [s_all[f.land_pos] for f, (s_all, _, _) in zip(folds, per_fold)]
        site_weights = [weight[f.test[f.site_pos]] for f in folds]
        calibration = _HeldOutCalibration(site_scores, land_scores, site_weights, zone_targets)
        insample_site, insample_land = [], []
        for k, f in enumerate(folds):
            s_all, s_train_sites, _ = per_fold[k]
            site_rows = f.test[f.site_pos]
            thresholds = calibration.fold_thresholds(k)
            metrics = evaluate_scores(
                site_scores[k], land_scores[k], site_weight=site_weights[k], thresholds=thresholds,
                top_area_shares=top_area_shares,
            )
            fold_rows.append(_fold_row(name, k, f.train.size, site_rows, f.land, codes, f.source, metrics))
            oof_parts.append(pd.DataFrame({
                "sample_id": sample_id[f.test], "learner": name, "fold": k,
                "score": s_all[: f.test.size],
            }))
            # Diagnostic only: the zones as each fold would cut them from its training
            # sites' own (in-sample) scores.
            insample = zone_thresholds(s_train_sites, targets=zone_targets, site_weight=weight[f.train_sites])
            insample_site.append(assign_zones(site_scores[k], insample))
            insample_land.append(assign_zones(land_scores[k], insample))
        s_site, sw, s_land = (np.concatenate(v) for v in (site_scores, site_weights, land_scores))
        thresholds = zone_thresholds(s_site, targets=zone_targets, site_weight=sw)
        metrics = evaluate_scores(s_site, s_land, site_weight=sw, thresholds=thresholds,
                                  top_area_shares=top_area_shares)
        fold_rows.append(_fold_row(name, POOLED_FOLD, np.nan, all_test[label[all_test] == 1],
                                   all_land, codes, pooled_source, metrics))
        zt = calibration.table(n_heldout_sites)
        n_zones = len(zt)
        zt["insample_cut_area_share"] = _cumulative(_zone_shares(np.concatenate(insample_land), None, n_zones))
        zt["insample_cut_site_share"] = _cumulative(_zone_shares(np.concatenate(insample_site), sw, n_zones))
        zt.insert(0, "learner", name)
        zone_parts.append(zt)
        curve_parts.append(_curves(name, s_site, sw, s_land))

    by_fold = pd.DataFrame(fold_rows)
    metric_columns = [c for c in by_fold.columns if c not in ("learner", "fold", "landscape", *_COUNT_COLUMNS)]
    summary = _summarise(by_fold, metric_columns)
    return CrossValResult(
        by_fold=by_fold,
        summary=summary,
        zones=pd.concat(zone_parts, ignore_index=True),
        oof=pd.concat(oof_parts, ignore_index=True),
        curves=pd.concat(curve_parts, ignore_index=True),
        fold_models=fold_models,
    )


def _cumulative(shares):
    return np.minimum(np.cumsum(shares), 1.0)


class _HeldOutCalibration:
    """Zone area shares of one learner from its pooled held-out scores (METHODS.md §13).

    Each held-out site cell is placed at its fold's area rank (share of the fold's
    landscape scoring at least as high). ``a(t)`` from all folds is what a map of
    the final model is cut at; fold k is tested with ``a(t)`` calibrated on the
    other folds only, cut on its own landscape, so its sites check the calibration
    without having taken part in it.
    """

    def __init__(self, site_scores, land_scores, site_weights, targets):
        from mlsites.evaluation._calibration import area_ranks, calibrate_zone_areas

        self.targets = dict(targets)
        self.land_scores = land_scores
        self.site_scores = site_scores
        self.weights = site_weights
        self.ranks = [area_ranks(s, land) for s, land in zip(site_scores, land_scores)]
        self._calibrate = calibrate_zone_areas
        self._fold_cuts = {}
        self.area_shares = calibrate_zone_areas(np.concatenate(self.ranks), targets=self.targets,
                                                site_weight=np.concatenate(site_weights))

    def fold_thresholds(self, k):
        """Score thresholds of fold k: its landscape cut at the shares of the other folds."""
        from mlsites.evaluation._calibration import cut_for_area_share

        if k in self._fold_cuts:
            return self._fold_cuts[k]
        others = [j for j in range(len(self.ranks)) if j != k]
        shares = self._calibrate(np.concatenate([self.ranks[j] for j in others]), targets=self.targets,
                                 site_weight=np.concatenate([self.weights[j] for j in others]))
        self._fold_cuts[k] = {zone: cut_for_area_share(self.land_scores[k], a) for zone, a in shares.items()}
        return self._fold_cuts[k]

    def table(self, n_sites):
        """Zone table: target, calibrated share, held-out test of it with a Wilson interval."""
        from mlsites.evaluation._checks import wilson_interval
        from mlsites.evaluation._metrics import kvamme_gain

        names = list(self.targets)
        n_zones = len(names) + 1
        site_codes, land_codes = [], []
        for k in range(len(self.ranks)):
            thresholds = self.fold_thresholds(k)
            site_codes.append(assign_zones(self.site_scores[k], thresholds))
            land_codes.append(assign_zones(self.land_scores[k], thresholds))
        w = np.concatenate(self.weights)
        ranks = np.concatenate(self.ranks)
        area = np.array([self.area_shares[z] for z in names] + [1.0])
        held_site = _cumulative(_zone_shares(np.concatenate(site_codes), w, n_zones))
        held_area = _cumulative(_zone_shares(np.concatenate(land_codes), None, n_zones))
        calib_site = np.array([w[ranks <= a].sum() / w.sum() for a in area[:-1]] + [1.0])
        ci = [wilson_interval(round(share * n_sites), n_sites) for share in held_site]
        return pd.DataFrame({
            "zone": names + ["low"],
            "target": [self.targets[z] for z in names] + [1.0],
            "area_share": area,
            "calibration_site_share": np.minimum(calib_site, 1.0),
            "heldout_area_share": held_area,
            "heldout_site_share": held_site,
            "heldout_site_share_ci_low": [lo for lo, _ in ci],
            "heldout_site_share_ci_high": [hi for _, hi in ci],
            "n_heldout_sites": n_sites,
            "heldout_gain": kvamme_gain(held_site, held_area),
        })


def _fold_row(name, fold, n_train, site_rows, land, codes, source, metrics):
    row = {
        "learner": name,
        "fold": fold,
        "n_train": n_train,
        "n_test_site_cells": int(site_rows.size),
        "n_test_sites": int(np.unique(codes[site_rows]).size),
        "n_test_background": int(land.size),
        "landscape": source,
    }
    row.update({k: v for k, v in metrics.items() if k not in _DROPPED_KEYS})
    return row


def _curves(name, s_site, sw, s_land):
    from sklearn.metrics import roc_curve

    cap = capture_curve(s_site, s_land, site_weight=sw)
    y_true = np.concatenate((np.ones(s_site.size), np.zeros(s_land.size)))
    fpr, tpr, _ = roc_curve(y_true, np.concatenate((s_site, s_land)),
                            sample_weight=np.concatenate((sw, np.ones(s_land.size))))
    return pd.concat([
        pd.DataFrame({"learner": name, "curve": "capture",
                      "x": cap["area_share"].to_numpy(), "y": cap["site_share"].to_numpy()}),
        pd.DataFrame({"learner": name, "curve": "roc", "x": fpr, "y": tpr}),
    ], ignore_index=True)


# --------------------------------------------------------------------- output


def _write_csv(frame, path):
    with replacing(path) as tmp:
        frame.to_csv(tmp, index=False, float_format=_FLOAT_FORMAT, lineterminator="\n")


def _plot(curves, kind, path, xlabel, ylabel, title):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from mlsites._style import LEARNER_DASHES, learner_style

    fig, ax = plt.subplots(figsize=(5.0, 5.0), dpi=100)
    try:
        ax.plot([0, 1], [0, 1], color="0.6", linestyle="--", linewidth=1, label="chance")
        part = curves[curves["curve"] == kind]
        for i, (name, group) in enumerate(part.groupby("learner", sort=False)):
            colour, _ = learner_style(i)
            ax.plot(group["x"].to_numpy(), group["y"].to_numpy(), color=colour,
                    linestyle=LEARNER_DASHES[i % len(LEARNER_DASHES)], linewidth=1.5, label=name)
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.set_title(title)
        ax.legend(loc="lower right", frameon=False)
        fig.tight_layout()
        with replacing(path) as tmp:
            fig.savefig(tmp, format="png", metadata={"Software": None})
    finally:
        plt.close(fig)


def write_crossval(result, out_dir):
    """Write the cross-validation tables and curve plots to ``out_dir``.

    Parameters
    ----------
    result : CrossValResult
        From :func:`cross_validate`.
    out_dir : path-like
        Folder; created if missing. Existing files of the same names are replaced.

    Returns
    -------
    dict of str to pathlib.Path
        File name to path: ``metrics_by_fold.csv``, ``metrics_summary.csv``,
        ``zones.csv``, ``curves.csv``, ``capture_curves.png``, ``roc_curves.png``.

    Notes
    -----
    Each file is written to a temporary name in ``out_dir`` and renamed into place
    (``os.replace``), so a reader never sees half a file. Floats are written with
    ``%.10g`` and the PNGs carry no version or time stamp, so the same result gives
    byte-identical files.
    """
    if not isinstance(result, CrossValResult):
        raise InputError(f"result is a {type(result).__name__}; expected the CrossValResult of cross_validate.")
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = {
        "metrics_by_fold.csv": result.by_fold,
        "metrics_summary.csv": result.summary,
        "zones.csv": result.zones,
        "curves.csv": result.curves,
    }
    paths = {}
    for fname, frame in files.items():
        paths[fname] = out / fname
        _write_csv(frame, paths[fname])
    paths["capture_curves.png"] = out / "capture_curves.png"
    _plot(result.curves, "capture", paths["capture_curves.png"], "share of study area", "share of held-out sites",
          "Sites captured against area (held-out, pooled)")
    paths["roc_curves.png"] = out / "roc_curves.png"
    _plot(result.curves, "roc", paths["roc_curves.png"], "false positive rate (share of background)",
          "true positive rate (share of held-out sites)", "ROC of held-out sites against background")
    return paths
