"""Site scores of many cells, identical whatever the window they come in.

Every prediction of a map goes through :func:`_predict_site`, so a faster
predictor for a learner family is switched on in one place. Around it,
:func:`predict_cells` feeds the estimator rows in chunks of one fixed size, the
last chunk padded: BLAS kernels (logistic regression, the neural network) round
the last bit differently for different numbers of rows, so only equal-sized
batches make a cell's score independent of the window size and the number of
jobs.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from mlsites.errors import InputError

__all__ = ["CHUNK_ROWS", "predict_cells", "single_threaded", "spread_of"]

#: Rows per prediction batch. Fixed: changing it may change the last bit of scores.
CHUNK_ROWS = 16384


def _predict_site(estimator, X):
    """Score of the site class (label 1) per row, float64.

    The one place a map calls the estimator. A
    :class:`~mlsites.learners.SitePredictor` (the compiled tree walks of
    :func:`~mlsites.learners.fast_predictor`, equal to ``predict_proba``) is called
    on one thread: maps run in parallel over windows instead.
    """
    if hasattr(estimator, "predict_site"):
        return np.asarray(estimator.predict_site(X, n_threads=1), dtype=np.float64)
    proba = np.asarray(estimator.predict_proba(X))
    if proba.ndim != 2 or proba.shape[1] != 2:
        raise InputError(f"{type(estimator).__name__}.predict_proba returned shape {proba.shape}; expected "
                         "(n, 2) for the labels 0 (background) and 1 (site)")
    return proba[:, 1].astype(np.float64, copy=False)


def predict_cells(estimator, X, features, *, chunk_rows=CHUNK_ROWS):
    """Site scores of the rows of ``X`` in fixed-size, padded batches.

    Parameters
    ----------
    estimator : fitted estimator with ``predict_proba``
    X : numpy.ndarray of shape (n, n_features), float64
        Feature values, every one finite, columns in the order of ``features``.
    features : sequence of str
        Column names the estimator was fitted with.
    chunk_rows : int, default :data:`CHUNK_ROWS`

    Returns
    -------
    numpy.ndarray of float64, shape (n,)

    Notes
    -----
    The last batch is filled up to ``chunk_rows`` with copies of its last row and
    the extra scores are dropped, so every call of the estimator sees the same
    number of rows. The feature frame has float64 columns, as the sample table the
    model was fitted on.
    """
    n = X.shape[0]
    out = np.empty(n, dtype=np.float64)
    for start in range(0, n, chunk_rows):
        block = X[start:start + chunk_rows]
        m = block.shape[0]
        if m < chunk_rows:
            block = np.concatenate((block, np.repeat(block[-1:], chunk_rows - m, axis=0)))
        frame = pd.DataFrame(block, columns=list(features), copy=False)
        out[start:start + m] = _predict_site(estimator, frame)[:m]
    return out


def spread_of(predictions):
    """Standard deviation (ddof = 1) over models of each cell's score.

    Parameters
    ----------
    predictions : sequence of numpy.ndarray, each of shape (n,)
        One score array per fold model (at least two).

    Returns
    -------
    numpy.ndarray of float64, shape (n,)

    Notes
    -----
    Computed from the differences to the first model's score (the shifted-data
    form of the variance), so models that agree on a cell give exactly 0 there,
    not a rounding residue of the mean.
    """
    base = predictions[0]
    d = np.stack([p - base for p in predictions])
    k = d.shape[0]
    var = (np.einsum("ij,ij->j", d, d) - d.sum(axis=0) ** 2 / k) / (k - 1)
    return np.sqrt(np.maximum(var, 0.0))


def single_threaded(estimator):
    """Set every ``n_jobs`` of an estimator (pipeline steps included) to 1; return it.

    A forest predicting on several threads adds the trees' votes in the order the
    threads finish, which changes the last bit from run to run; maps are made
    parallel over windows instead.
    """
    try:
        keys = [k for k in estimator.get_params(deep=True) if k == "n_jobs" or k.endswith("__n_jobs")]
    except AttributeError:
        return estimator
    if keys:
        estimator.set_params(**{k: 1 for k in keys})
    return estimator
