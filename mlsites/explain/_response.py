"""Response curves: partial dependence with individual (ICE) curves per layer and learner.

For a layer j and a grid of its values, the individual curve of row i is the
learner's score with layer j set to each grid value and the other layers of row i
kept; the partial dependence is the mean of the individual curves over the rows
(Friedman 2001; Goldstein et al. 2015). Scores are the class-1 probability (the
membership of the fuzzy baseline), the values a map shows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from mlsites.errors import InputError, InsufficientDataError
from mlsites.explain._shap import predicted_score

__all__ = ["response_grid", "response_curves"]

#: Default numeric grid: this many values evenly spaced between the percentiles below.
DEFAULT_N_GRID = 20
DEFAULT_PERCENTILES = (2.5, 97.5)


def response_grid(values, *, categorical=False, n_grid=DEFAULT_N_GRID, percentiles=DEFAULT_PERCENTILES):
    """Grid of layer values for a response curve, in the layer's own units.

    Parameters
    ----------
    values : array_like
        The layer at the rows the curves average over.
    categorical : bool, default False
        True: every class present, sorted.
    n_grid : int, default 20
        Numeric layers: values evenly spaced between the two percentiles (all
        distinct values instead, when there are no more than ``n_grid``).
    percentiles : (float, float), default (2.5, 97.5)
        Numeric range, so a few extreme cells do not stretch the axis.

    Returns
    -------
    ndarray of float64
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    v = v[np.isfinite(v)]
    if v.size == 0:
        raise InsufficientDataError("a response grid needs finite layer values; the rows have none.")
    unique = np.unique(v)
    if categorical or unique.size <= n_grid:
        return unique
    lo, hi = np.percentile(v, percentiles)
    return np.linspace(lo, hi, int(n_grid))


def response_curves(estimators, X, *, layers=None, categorical=(), n_grid=DEFAULT_N_GRID,
                    percentiles=DEFAULT_PERCENTILES, n_ice=30, random_state=0):
    """Partial dependence and ICE curves of several learners on one grid per layer.

    Parameters
    ----------
    estimators : dict of str to fitted estimator
        Learner name -> fitted learner taking the layer columns.
    X : DataFrame
        Rows the curves average over (for example a random sample of landscape
        cells), with every layer column.
    layers : sequence of str, optional
        Default every column of ``X``.
    categorical : sequence of str, default ()
        Layers whose grid is their classes.
    n_grid, percentiles
        See :func:`response_grid`.
    n_ice : int, default 30
        Individual curves kept per learner and layer (the same rows, drawn with
        ``random_state``, for every learner); the average uses every row.
    random_state : int, default 0

    Returns
    -------
    DataFrame
        Long form: ``learner``, ``layer``, ``curve`` ("average" or "individual"),
        ``row`` (position in ``X``; -1 for the average), ``x`` (grid value),
        ``score``.

    Notes
    -----
    Brute force, as ``sklearn.inspection.partial_dependence(method="brute")``:
    one predict call per learner and layer on ``len(grid) * len(X)`` rows, so the
    result equals scikit-learn's on the same grid (``custom_values``).

    References
    ----------
    Friedman, J.H. (2001). Greedy function approximation: a gradient boosting
    machine. Annals of Statistics 29(5), 1189-1232. doi:10.1214/aos/1013203451
    Goldstein, A. et al. (2015). Peeking inside the black box: visualizing
    statistical learning with plots of individual conditional expectation.
    J. Comput. Graph. Stat. 24(1), 44-65. doi:10.1080/10618600.2014.907095
    """
    if not isinstance(X, pd.DataFrame) or len(X) == 0:
        raise InsufficientDataError("response curves need a non-empty DataFrame of rows to average over.")
    layers = list(X.columns) if layers is None else list(layers)
    unknown = [c for c in list(layers) + list(categorical) if c not in X.columns]
    if unknown:
        raise InputError(f"layer(s) {unknown} are not columns of X; columns are {list(X.columns)}.")
    X = X.reset_index(drop=True)
    n = len(X)
    ice_rows = np.sort(np.random.default_rng(random_state).choice(n, size=min(int(n_ice), n), replace=False))
    parts = []
    for layer in layers:
        grid = response_grid(X[layer], categorical=layer in categorical, n_grid=n_grid, percentiles=percentiles)
        stacked = pd.concat([X] * grid.size, ignore_index=True)
        stacked[layer] = np.repeat(grid, n).astype(X[layer].dtype, copy=False)
        for name, est in estimators.items():
            ice = predicted_score(est, stacked).reshape(grid.size, n)
            parts.append(pd.DataFrame({"learner": name, "layer": layer, "curve": "average", "row": -1,
                                       "x": grid, "score": ice.mean(axis=1)}))
            parts.append(pd.DataFrame({"learner": name, "layer": layer, "curve": "individual",
                                       "row": np.tile(ice_rows, grid.size), "x": np.repeat(grid, ice_rows.size),
                                       "score": ice[:, ice_rows].ravel()}))
    return pd.concat(parts, ignore_index=True)
