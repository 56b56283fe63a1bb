"""Permutation importance on held-out spatial folds (Breiman 2001; Fisher et al. 2019).

For every fold the model trained without that fold scores the fold's held-out rows
(its test site cells with their weights, against its landscape cells); one layer at
a time is permuted within those rows and the drop of the score is the layer's
importance in that fold and repeat.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from mlsites.errors import InputError, InsufficientDataError
from mlsites.explain._shap import predicted_score

__all__ = ["PermutationImportance", "heldout_permutation_importance", "auc_scorer"]


@dataclass(frozen=True)
class PermutationImportance:
    """Result of :func:`heldout_permutation_importance`.

    Attributes
    ----------
    summary : DataFrame
        One row per layer, in input order: ``layer``, ``importance_mean``,
        ``importance_sd`` (ddof 1 over folds x repeats; NaN for one value),
        ``n_values``, ``rank`` (1 = largest mean drop).
    by_fold : DataFrame
        ``fold``, ``repeat``, ``layer``, ``baseline``, ``permuted``, ``drop``.
    """

    summary: pd.DataFrame
    by_fold: pd.DataFrame


def auc_scorer(scores, is_site, weight):
    """ROC AUC of site rows against landscape rows (:func:`mlsites.evaluation.roc_auc`).

    Site rows carry their weights (each site counts once), landscape rows weight 1.
    """
    from mlsites.evaluation import roc_auc

    return roc_auc(scores[is_site], scores[~is_site], site_weight=weight[is_site])


def _default_permute(rng, n):
    return rng.permutation(n)


def _check_folds(folds, n_rows):
    if not isinstance(folds, (list, tuple)) or not folds:
        raise InputError("folds is empty; pass one (estimator, site_rows, site_weights, landscape_rows) "
                         "tuple per fold, from the models that cross-validation fitted.")
    out = []
    for k, item in enumerate(folds):
        try:
            est, site_rows, site_w, land_rows = item
        except (TypeError, ValueError):
            raise InputError(f"fold {k}: expected a tuple (estimator, site_rows, site_weights, "
                             f"landscape_rows), got {type(item).__name__}.") from None
        site_rows = np.asarray(site_rows, dtype=np.int64).ravel()
        land_rows = np.asarray(land_rows, dtype=np.int64).ravel()
        site_w = np.ones(site_rows.size) if site_w is None else np.asarray(site_w, dtype=np.float64).ravel()
        if site_w.size != site_rows.size:
            raise InputError(f"fold {k}: {site_w.size} site weights for {site_rows.size} site rows; give one "
                             "weight per site row.")
        rows = np.concatenate((site_rows, land_rows))
        if rows.size == 0:
            raise InsufficientDataError(f"fold {k} has no held-out rows; every fold needs test rows.")
        if rows.min() < 0 or rows.max() >= n_rows:
            raise InputError(f"fold {k}: row index {int(rows.max() if rows.max() >= n_rows else rows.min())} "
                             f"is outside the table of {n_rows} rows; pass positions (0 .. n-1) into X.")
        if not hasattr(est, "predict"):
            raise InputError(f"fold {k}: {type(est).__name__} has no predict; pass the fold's fitted model.")
        out.append((est, rows, np.concatenate((np.ones(site_rows.size, bool), np.zeros(land_rows.size, bool))),
                    np.concatenate((site_w, np.ones(land_rows.size)))))
    return out


def _one_fold(est, held, is_site, weight, layer_idx, seeds, n_repeats, predict, scorer, permute):
    """Baseline and permuted scores of one fold: (baseline, array (n_layers, n_repeats))."""
    n = len(held)
    baseline = float(scorer(np.asarray(predict(est, held), dtype=np.float64), is_site, weight))
    permuted = np.empty((len(layer_idx), n_repeats))
    for i, (j, seed) in enumerate(zip(layer_idx, seeds)):
        rng = np.random.default_rng(seed)
        # all repeats of one layer in one predict call; the copy keeps the caller's table intact
        stacked = pd.concat([held] * n_repeats, ignore_index=True)
        column = held.iloc[:, j].to_numpy()
        orders = [np.asarray(permute(rng, n), dtype=np.int64) for _ in range(n_repeats)]
        for order in orders:
            if order.shape != (n,) or not np.array_equal(np.sort(order), np.arange(n)):
                raise InputError(f"permute returned {order!r:.60}; expected a permutation of 0 .. {n - 1}.")
        stacked.iloc[:, j] = np.concatenate([column[o] for o in orders])
        scores = np.asarray(predict(est, stacked), dtype=np.float64).reshape(n_repeats, n)
        permuted[i] = [scorer(s, is_site, weight) for s in scores]
    return baseline, permuted


def heldout_permutation_importance(folds, X, *, layers=None, n_repeats=5, scorer=None, predict=None,
                                   permute=None, random_state=0, n_jobs=1):
    """Drop of the held-out score when one layer is permuted within a fold's held-out rows.

    Parameters
    ----------
    folds : list of (estimator, site_rows, site_weights, landscape_rows)
        Per fold: the model fitted without the fold, positions in ``X`` of its test
        site cells and their weights (``None``: 1 each), and positions of its
        landscape cells (its held-out background).
    X : DataFrame of shape (n_rows, n_layers)
        The layer columns of the sample table, as the models were fitted on them.
    layers : sequence of str, optional
        Layers to permute (default every column of ``X``).
    n_repeats : int, default 5
        Permutations per fold and layer.
    scorer : callable, optional
        ``scorer(scores, is_site, weight) -> float``, higher is better; default
        :func:`auc_scorer` (weighted ROC AUC, sites against landscape).
    predict : callable, optional
        ``predict(estimator, X_rows) -> scores``; default the class-1 probability
        (``predict`` for estimators without ``predict_proba``).
    permute : callable, optional
        ``permute(rng, n) -> order``, a permutation of ``0 .. n-1`` drawn from the
        numpy Generator ``rng``; default ``rng.permutation(n)``.
    random_state : int, default 0
        Seed of the per-(fold, layer) seeds, all drawn before any parallel work.
    n_jobs : int, default 1
        Folds scored in parallel (joblib); the result does not depend on it.

    Returns
    -------
    PermutationImportance

    Raises
    ------
    InputError
        Malformed folds, rows outside ``X``, unknown layers, ``n_repeats`` < 1.
    InsufficientDataError
        A fold with no held-out rows.

    Notes
    -----
    PI_j = mean over folds k and repeats r of (s_k - s_k^(j, r)), where s_k is the
    score of fold k's model on its held-out rows and s_k^(j, r) the score after
    permuting layer j among those rows (site and landscape rows together, so the
    layer's values lose their link to the label). Mean and sd are over all
    folds x repeats. Permuting breaks the layer's spatial pattern and its
    correlation with the other layers: the model is then asked about combinations
    the landscape does not hold, and correlated layers share (and each understates)
    their importance.

    References
    ----------
    Breiman, L. (2001). Random forests. Machine Learning 45, 5-32.
    doi:10.1023/A:1010933404324
    Fisher, A., Rudin, C. & Dominici, F. (2019). All models are wrong, but many are
    useful. Journal of Machine Learning Research 20(177), 1-81.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from sklearn.linear_model import LinearRegression
    >>> from sklearn.metrics import r2_score
    >>> X = pd.DataFrame({"x1": [1., 2, 3, 4, 5], "x2": [5., 3, 8, 1, 7]})
    >>> model = LinearRegression().fit(X, X["x1"])
    >>> result = heldout_permutation_importance(
    ...     [(model, range(5), None, [])], X, n_repeats=1,
    ...     scorer=lambda s, site, w: r2_score(X["x1"], s),
    ...     permute=lambda rng, n: np.arange(n)[::-1])
    >>> result.summary["importance_mean"].round(6).tolist()
    [4.0, 0.0]
    """
    from joblib import Parallel, delayed

    if not isinstance(X, pd.DataFrame):
        raise InputError(f"X is a {type(X).__name__}; pass the layer columns as a pandas DataFrame.")
    if isinstance(n_repeats, bool) or not isinstance(n_repeats, (int, np.integer)) or n_repeats < 1:
        raise InputError(f"n_repeats={n_repeats!r}; expected a whole number >= 1.")
    layers = list(X.columns) if layers is None else ([layers] if isinstance(layers, str) else list(layers))
    unknown = [c for c in layers if c not in X.columns]
    if unknown:
        raise InputError(f"layer(s) {unknown} are not columns of X; columns are {list(X.columns)}.")
    folds = _check_folds(folds, len(X))
    scorer = auc_scorer if scorer is None else scorer
    predict = predicted_score if predict is None else predict
    permute = _default_permute if permute is None else permute
    layer_idx = [X.columns.get_loc(c) for c in layers]
    # one seed per (fold, layer), drawn before fanning out, so n_jobs cannot change them
    seeds = np.random.default_rng(random_state).integers(0, 2**31 - 1, size=(len(folds), len(layers)))
    X = X.reset_index(drop=True)

    def run(k):
        est, rows, is_site, weight = folds[k]
        return _one_fold(est, X.iloc[rows].reset_index(drop=True), is_site, weight, layer_idx, seeds[k],
                         int(n_repeats), predict, scorer, permute)

    if n_jobs == 1 or len(folds) == 1:
        results = [run(k) for k in range(len(folds))]
    else:
        results = Parallel(n_jobs=n_jobs)(delayed(run)(k) for k in range(len(folds)))
    records = []
    for k, (baseline, permuted) in enumerate(results):
        for i, layer in enumerate(layers):
            for r in range(int(n_repeats)):
                records.append((k, r, layer, baseline, float(permuted[i, r])))
    by_fold = pd.DataFrame(records, columns=["fold", "repeat", "layer", "baseline", "permuted"])
    by_fold["drop"] = by_fold["baseline"] - by_fold["permuted"]
    grouped = by_fold.groupby("layer", sort=False)["drop"]
    summary = pd.DataFrame({
        "layer": layers,
        "importance_mean": grouped.mean().reindex(layers).to_numpy(),
        "importance_sd": grouped.std(ddof=1).reindex(layers).to_numpy(),
        "n_values": grouped.size().reindex(layers).to_numpy(),
    })
    summary["rank"] = _ranks(summary["importance_mean"].to_numpy())
    return PermutationImportance(summary=summary, by_fold=by_fold)


def _ranks(values):
    """Rank 1 for the largest value; ties share the smallest rank ("min" method); NaN last."""
    s = pd.Series(np.where(np.isfinite(values), values, -np.inf))
    return s.rank(ascending=False, method="min").astype(int).to_numpy()
