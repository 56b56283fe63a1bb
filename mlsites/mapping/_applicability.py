"""Area of applicability: the dissimilarity index of Meyer & Pebesma (2021).

A learner's score is trustworthy only where the predictors look like something it
saw in training. The dissimilarity index (DI) of a cell is its distance, in
standardised and importance-weighted predictor space, to the nearest training
sample, divided by the mean distance between training samples. Cells whose DI
exceeds what the cross-validation itself produced (the threshold) lie outside the
area of applicability: the score there is an extrapolation.

The fitted :class:`ApplicabilityModel` is array in, array out, so the windowed
mapping engine can call :meth:`ApplicabilityModel.dissimilarity` on each window's
feature matrix, in any window size and in any worker process (it pickles).
"""

from __future__ import annotations

import numbers
import warnings
from collections.abc import Mapping

import numpy as np
import pandas as pd
from scipy.spatial import cKDTree
from sklearn.exceptions import NotFittedError

from mlsites.errors import DataQualityWarning, InputError, InsufficientDataError
from mlsites.learners._fuzzy import _check_weights, resolve_columns
from mlsites.mapping._applicability_kernels import _pairwise_distance_sums_kernel

__all__ = ["ApplicabilityModel", "mean_pairwise_distance", "DEFAULT_CHUNK_SIZE"]

#: Rows embedded and queried at a time by :meth:`ApplicabilityModel.dissimilarity`;
#: bounds the temporary memory to about ``chunk_size * n_columns * 8`` bytes.
DEFAULT_CHUNK_SIZE = 65536

# Upper whisker of a boxplot: Q3 + 1.5 IQR (Tukey's fences).
_WHISKER = 1.5


def mean_pairwise_distance(Z, codes=None, penalty=None):
    """Mean Euclidean distance over all pairs of rows of ``Z``, exactly.

    Parameters
    ----------
    Z : array-like of shape (n, q)
        Points, one per row, finite; n >= 2.
    codes : array-like of int of shape (n, L), optional
        Category index of each point in L categorical layers.
    penalty : array-like of shape (L,), optional
        Added to the squared distance of two points for each layer in which their
        categories differ (``w_j^2``; this is the squared distance of one-hot
        columns holding ``w_j / sqrt(2)``).

    Returns
    -------
    float
        ``sum_{i<j} d(z_i, z_j) / (n (n - 1) / 2)`` with
        ``d^2 = ||z_i - z_j||^2 + sum_l penalty_l [codes_il != codes_jl]``.

    Notes
    -----
    Every pair is visited (no sampling), in O(n^2 (q + L)) time and O(n) memory per
    thread, so 20 000 training samples need no 20 000 x 20 000 matrix (3.2 GB);
    about 2 s for 20 000 points in 10 dimensions on 2 idle cores. The result does
    not depend on the number of threads.
    """
    z = np.asarray(Z, dtype=np.float64)
    if z.ndim != 2 or z.shape[0] < 2:
        raise InsufficientDataError(
            f"points have shape {z.shape}; the mean pairwise distance needs at least two rows."
        )
    n = z.shape[0]
    if codes is None:
        ct = np.zeros((0, n), dtype=np.int64)
        pen = np.zeros(0)
    else:
        ct = np.ascontiguousarray(np.asarray(codes, dtype=np.int64).T)
        pen = np.asarray(penalty, dtype=np.float64)
        if ct.shape != (pen.size, n):
            raise InputError(
                f"codes have shape {ct.shape[::-1]} and penalty {pen.shape}; expected ({n}, L) and (L,)."
            )
    sums = _pairwise_distance_sums_kernel(np.ascontiguousarray(z.T), ct, pen)
    return float(np.sum(sums) / (n * (n - 1) / 2.0))


class ApplicabilityModel:
    """Dissimilarity index and area of applicability of a fitted learner.

    Parameters
    ----------
    n_jobs : int, default 1
        Threads for nearest-neighbour queries (``workers`` of
        :meth:`scipy.spatial.cKDTree.query`; -1 = all cores). Leave 1 when windows
        already run in parallel processes.
    chunk_size : int, default 65536
        Rows standardised and queried at a time; bounds the temporary memory.
        Results do not depend on it.

    Attributes
    ----------
    n_features_in_ : int
        Number of predictor columns.
    feature_names_in_ : ndarray of str or None
        Column names when fitted on a DataFrame with string column names.
    weights_ : ndarray of shape (n_features_in_,)
        Importance weight of each predictor as used: negatives set to 0, constant
        continuous layers set to 0 (with a warning).
    mean_, scale_ : ndarray of shape (n_features_in_,)
        Mean and standard deviation (n - 1 divisor) of each continuous predictor over
        the reference rows; NaN for categorical ones.
    categorical_ : ndarray of int
        Indices of categorical predictors.
    categories_ : dict of int to ndarray
        The categories of each categorical predictor seen in the reference rows.
    n_reference_ : int
        Training rows the index refers to (rows with positive ``sample_weight``).
    mean_distance_ : float
        d-bar: mean distance between all pairs of reference rows in the weighted,
        standardised space.
    training_dissimilarity_ : ndarray of shape (n_samples,)
        Cross-validated DI of each training row: distance to the nearest reference
        row outside its own test fold, over d-bar. NaN for rows never held out and
        for rows with zero weight.
    quartiles_ : (float, float)
        Q1 and Q3 of the finite training DI (numpy linear quantiles).
    fence_ : float
        Upper boxplot fence Q3 + 1.5 (Q3 - Q1).
    threshold_ : float
        The largest training DI not above the fence; cells with DI above it are
        outside the area of applicability.
    tree_ : object
        Nearest-reference search over the reference rows (KD-trees over the
        continuous coordinates, one per combination of categories).

    Notes
    -----
    Steps (Meyer & Pebesma 2021; METHODS.md section 8):

    1. Each continuous predictor j is standardised with the mean and sd of the
       reference rows and multiplied by its weight w_j >= 0.
    2. ``d_bar`` = mean Euclidean distance over all pairs of reference rows.
    3. For a new point k, ``DI_k = min_i ||z_k - z_i|| / d_bar``.
    4. For a training row i held out in some fold, ``DI_i`` is its distance to the
       nearest reference row *not in that test fold*, over ``d_bar``.
    5. ``threshold = max{DI_i : DI_i <= Q3 + 1.5 IQR}``; a point is inside the area
       of applicability when ``DI <= threshold``. (Some versions of the method used
       the fence itself or the 95 % quantile; this one is pinned by METHODS.md §8.)

    DI and threshold do not change when all weights are multiplied by one positive
    number, nor with the sd divisor (n or n - 1), because both scale d_bar too.

    **Which rows.** Pass every row the learner was fitted on: site cells *and*
    background cells. The learner's response is fitted wherever either lies; the
    background describes the environments it saw as "available", so a cell like
    the background is not an extrapolation even if no site looks like it. With
    site cells alone most of the landscape would look "outside" merely for being
    unlike the sites, which is what the potential itself measures. With background
    drawn only in surveyed areas, the area of applicability then shows where the
    environment differs from everything that was surveyed.

    ``sample_weight`` marks which rows count: rows with weight 0 are left out (they
    did not shape the model, as in :class:`mlsites.learners.LayerEncoder`), and every
    row with a positive weight counts once, as in the paper: the index measures
    which environments the training data cover, not how strongly the loss weighted
    them.

    **Categorical layers** (our choice) enter as one-hot columns, one per category
    seen in the reference rows plus one for any unseen category, each holding
    ``w_j / sqrt(2)``. Two different categories are then ``w_j`` apart, like a
    difference of one standard deviation in a continuous layer of the same weight,
    whatever the category frequencies; a category never seen in training is as far
    from every training row as a different known category. They are not
    standardised, which would give rare categories huge distances.

    A row with NaN in any predictor gets DI NaN (and is not applicable): the learner
    cannot score it either.

    **Speed** (``tests/benchmarks/applicability.py``): nearest neighbours are exact,
    and their cost grows steeply with the number of continuous predictors and about
    with the square root of the number of reference rows. With 20 000 training rows
    and 10 continuous layers, one idle core scores about 65 000 cells/s (16 million
    cells in about 2 minutes on 2 cores); two categorical layers (45 combinations)
    about halve that. Fitting takes about 2 s.

    References
    ----------
    Meyer, H. & Pebesma, E. (2021). Predicting into unknown space? Estimating the
    area of applicability of spatial prediction models. Methods in Ecology and
    Evolution 12:1620-1633. doi:10.1111/2041-210X.13650

    Examples
    --------
    >>> X = [[1, 10], [2, 12], [3, 11], [4, 15], [5, 14], [6, 18]]
    >>> aoa = ApplicabilityModel().fit(X, [0, 0, 1, 1, 2, 2], weights=[2, 1])
    >>> round(aoa.threshold_, 6)
    0.838744
    >>> aoa.applicable([[3.5, 13], [10, 30]]).tolist()
    [True, False]
    """

    def __init__(self, *, n_jobs=1, chunk_size=DEFAULT_CHUNK_SIZE):
        self.n_jobs = n_jobs
        self.chunk_size = chunk_size

    def __repr__(self):
        return f"ApplicabilityModel(n_jobs={self.n_jobs!r}, chunk_size={self.chunk_size!r})"

    # ----------------------------------------------------------------- fit

    def fit(self, X, folds, *, weights=None, sample_weight=None, categorical=()):
        """Learn the reference space, d-bar, the training DI and the threshold.

        Parameters
        ----------
        X : array-like or DataFrame of shape (n_samples, n_features)
            Predictors of the training rows (site and background cells), finite.
        folds : array-like of int of shape (n_samples,), or sequence of (train, test)
            Either the test fold of each row (a negative value: never held out,
            e.g. background under buffered leave-one-site-out), or the
            cross-validation splits as pairs of row-index arrays (as yielded by a
            splitter's ``split``), for splitters whose training sets are not
            simply "all other folds" (buffers). A row may be in at most one test set.
        weights : sequence of float or mapping of str to float, optional
            Importance of each predictor, e.g. held-out permutation importances;
            by name when ``X`` has column names. Default: equal weights.
            Negative values are set to 0.
        sample_weight : array-like of shape (n_samples,), optional
            Rows with weight 0 are left out; any positive weight counts the row once.
        categorical : sequence of int or str, default ()
            Categorical predictors (by index or name), encoded one-hot (see Notes).

        Returns
        -------
        self

        Raises
        ------
        InputError
            Non-finite training values (names the row and column), bad weights,
            folds of the wrong length or a row in two test sets.
        InsufficientDataError
            Fewer than two reference rows, all reference rows identical, a fold with
            no training rows outside it, or fewer than two held-out rows.
        """
        X, names = _as_matrix(X, "X")
        n, p = X.shape
        self.n_features_in_ = p
        self.feature_names_in_ = None if names is None else np.asarray(names, dtype=object)
        self.categorical_ = resolve_columns(categorical, p, names, what="categorical")
        w = _feature_weights(weights, names, p)
        keep = np.ones(n, dtype=bool) if sample_weight is None else _check_weights(sample_weight, n) > 0
        ref = X[keep]
        _check_finite_training(ref, np.flatnonzero(keep), names)
        if ref.shape[0] < 2:
            raise InsufficientDataError(
                f"{ref.shape[0]} training row(s) with positive weight; the dissimilarity index "
                "needs at least two."
            )

        is_cat = np.zeros(p, dtype=bool)
        is_cat[self.categorical_] = True
        self.mean_ = np.full(p, np.nan)
        self.scale_ = np.full(p, np.nan)
        cont = np.flatnonzero(~is_cat)
        self.mean_[cont] = ref[:, cont].mean(axis=0)
        self.scale_[cont] = ref[:, cont].std(axis=0, ddof=1)
        constant = cont[(self.scale_[cont] == 0) & (w[cont] > 0)]
        if constant.size:
            labels = ", ".join(_column_label(j, names) for j in constant)
            warnings.warn(
                f"predictor {labels} is constant in the training data and gets weight 0 in "
                "the dissimilarity index: cells that differ in it are not marked outside the "
                "area of applicability for that reason alone.",
                DataQualityWarning,
                stacklevel=2,
            )
            w[constant] = 0.0
        if not np.any(w > 0):
            raise InputError(
                "every predictor has weight 0 after removing negative and constant ones; give "
                "at least one positive weight to a layer that varies in the training data."
            )
        self.weights_ = w
        self.categories_ = {int(j): np.unique(ref[:, j]) for j in self.categorical_}
        self._continuous = cont[w[cont] > 0]
        self._categorical_used = np.array([j for j in self.categorical_ if w[j] > 0], dtype=int)

        self._penalty = self.weights_[self._categorical_used] ** 2
        zc, codes, _ = self._embed(ref)
        d_bar = mean_pairwise_distance(zc, codes, self._penalty)
        if not d_bar > 0:
            raise InsufficientDataError(
                f"all {ref.shape[0]} training rows are identical in the weighted predictors; "
                "the dissimilarity index is undefined."
            )
        self.n_reference_ = int(ref.shape[0])
        self.mean_distance_ = d_bar
        self.tree_ = _NearestReference(zc, codes, self._penalty)

        # Positions of reference rows among all rows (-1: left out), for fold lookups.
        position = np.full(n, -1, dtype=np.int64)
        position[keep] = np.arange(self.n_reference_)
        nearest = self._held_out_distances(zc, codes, _fold_splits(folds, n), position)
        tdi = np.full(n, np.nan)
        tdi[keep] = nearest / d_bar
        self.training_dissimilarity_ = tdi
        held = tdi[np.isfinite(tdi)]
        if held.size < 2:
            raise InsufficientDataError(
                f"{held.size} training row(s) are held out in the folds; the threshold needs the "
                "cross-validated dissimilarity of at least two rows."
            )
        q1, q3 = np.quantile(held, [0.25, 0.75])
        fence = q3 + _WHISKER * (q3 - q1)
        self.quartiles_ = (float(q1), float(q3))
        self.fence_ = float(fence)
        self.threshold_ = float(held[held <= fence].max())
        return self

    def _held_out_distances(self, zc, codes, splits, position):
        """Distance of each held-out reference row to the nearest row of its training set."""
        out = np.full(zc.shape[0], np.nan)
        seen = np.zeros(zc.shape[0], dtype=bool)
        for k, (train, test) in enumerate(splits):
            train = position[train]
            train = train[train >= 0]
            test = position[test]
            test = test[test >= 0]
            if test.size == 0:
                continue
            if seen[test].any():
                raise InputError(
                    f"fold {k} holds out a row that an earlier fold held out already; pass one "
                    "split per fold, each row in at most one test set (no repeated CV)."
                )
            seen[test] = True
            if train.size == 0:
                raise InsufficientDataError(
                    f"fold {k}: no training row outside its test set; the cross-validated "
                    "dissimilarity needs at least two folds."
                )
            search = _NearestReference(zc[train], codes[train], self._penalty)
            out[test] = search.distance(zc[test], codes[test], workers=self.n_jobs)
        return out

    # ----------------------------------------------------------------- predict

    def _embed(self, X):
        """Coordinates of float64 rows: weighted standardised continuous values, category
        indices (``K_j`` = unseen) and which rows are finite."""
        valid = np.isfinite(X).all(axis=1)
        cont = self._continuous
        if cont.size:
            zc = (X[:, cont] - self.mean_[cont]) / self.scale_[cont] * self.weights_[cont]
        else:
            zc = np.zeros((X.shape[0], 1))  # categories only: a constant axis for the trees
        codes = np.empty((X.shape[0], self._categorical_used.size), dtype=np.int64)
        for c, j in enumerate(self._categorical_used):
            cats = self.categories_[int(j)]
            v = X[:, j]
            pos = np.minimum(np.searchsorted(cats, v), cats.size - 1)
            codes[:, c] = np.where(cats[pos] == v, pos, cats.size)
        return zc, codes, valid

    def dissimilarity(self, X):
        """Dissimilarity index of each row.

        Parameters
        ----------
        X : array-like or DataFrame of shape (n, n_features_in_)
            Predictors in the columns (or with the column names) used in fit; any
            float dtype; NaN marks nodata.

        Returns
        -------
        ndarray of float64, shape (n,)
            Distance to the nearest training row over ``mean_distance_``; NaN where a
            predictor is NaN. 0 on a training row.

        Notes
        -----
        Exact nearest neighbours from a KD-tree, queried ``chunk_size`` rows at a
        time; each row's value depends only on that row, so any split into windows
        or chunks gives identical results.
        """
        self._check_fitted()
        X, _ = _as_matrix(X, "X", expect=self.feature_names_in_, n_features=self.n_features_in_, cast=False)
        chunk = _check_chunk_size(self.chunk_size)
        out = np.full(X.shape[0], np.nan)
        for start in range(0, X.shape[0], chunk):
            # cast chunk by chunk so a float32 window is not copied whole
            zc, codes, valid = self._embed(X[start : start + chunk].astype(np.float64, copy=False))
            if valid.any():
                dist = self.tree_.distance(zc[valid], codes[valid], workers=self.n_jobs)
                out[start : start + chunk][valid] = dist / self.mean_distance_
        return out

    def applicable(self, X):
        """True where a row lies inside the area of applicability.

        Parameters
        ----------
        X : array-like or DataFrame of shape (n, n_features_in_)

        Returns
        -------
        ndarray of bool, shape (n,)
            ``dissimilarity(X) <= threshold_``; False where a predictor is NaN. When
            the dissimilarity is needed as well, compute it once and compare it with
            ``threshold_``.
        """
        return self.dissimilarity(X) <= self.threshold_

    def _check_fitted(self):
        if not hasattr(self, "threshold_"):
            raise NotFittedError("This ApplicabilityModel is not fitted yet; call fit(X_train, folds) first.")


# --------------------------------------------------------------------- search


class _NearestReference:
    """Exact distance to the nearest reference row, with categories searched by group.

    In the one-hot embedding the squared distance of two rows is
    ``sum_cont (z_q - z_r)^2 + sum_j w_j^2 [c_j(q) != c_j(r)]``: the one-hot columns
    only add a penalty per categorical layer that differs. So the reference rows are
    split into groups of equal categories, with one KD-tree per group over the
    continuous coordinates alone. A query first searches its own group; a group whose
    penalty is not below the best squared distance found so far cannot hold a nearer
    row and is skipped, so most queries never leave their own group. This is exact,
    and much faster than one tree over all one-hot columns (a KD-tree slows down
    steeply with the number of dimensions).

    Parameters
    ----------
    zc : ndarray (n, q)
        Continuous coordinates (a zero column when there are none).
    codes : ndarray of int (n, L)
        Category index per categorical layer.
    penalty : ndarray (L,)
        ``w_j^2`` per categorical layer.
    """

    def __init__(self, zc, codes, penalty):
        self.penalty = np.asarray(penalty, dtype=np.float64)
        if codes.shape[1]:
            groups, inverse, counts = np.unique(codes, axis=0, return_inverse=True, return_counts=True)
            inverse = inverse.ravel()
        else:
            groups = np.zeros((1, 0), dtype=np.int64)
            inverse = np.zeros(zc.shape[0], dtype=np.int64)
            counts = np.array([zc.shape[0]])
        # Largest groups first: later groups are then mostly skipped by the penalty bound.
        order = np.argsort(-counts, kind="stable")
        self.groups = groups[order]
        self.trees = [cKDTree(zc[inverse == g]) for g in order]
        self.radix = codes.max(axis=0) + 2 if codes.shape[1] else np.zeros(0, dtype=np.int64)
        keys = self._keys(self.groups)
        self.key_order = np.argsort(keys)
        self.sorted_keys = keys[self.key_order]

    def _keys(self, codes):
        """One integer per category combination (mixed radix); unseen codes never match."""
        key = np.zeros(codes.shape[0], dtype=np.int64)
        for j in range(codes.shape[1]):
            key = key * self.radix[j] + np.minimum(codes[:, j], self.radix[j] - 1)
        return key

    def distance(self, zq, cq, *, workers=1):
        """Nearest-reference distance of each query row (continuous part, codes)."""
        m = zq.shape[0]
        best = np.full(m, np.inf)
        keys = self._keys(cq)
        pos = np.minimum(np.searchsorted(self.sorted_keys, keys), self.sorted_keys.size - 1)
        own = np.where(self.sorted_keys[pos] == keys, self.key_order[pos], -1)
        for g, tree in enumerate(self.trees):
            sel = np.flatnonzero(own == g)
            if sel.size:
                best[sel], _ = tree.query(zq[sel], k=1, workers=workers)
        if len(self.trees) == 1 and (own == 0).all():
            return best
        for g, tree in enumerate(self.trees):
            pen = (cq != self.groups[g]).astype(np.float64) @ self.penalty
            sel = np.flatnonzero((own != g) & (pen < best * best))
            if sel.size:
                d, _ = tree.query(zq[sel], k=1, workers=workers)
                best[sel] = np.minimum(best[sel], np.sqrt(d * d + pen[sel]))
        return best


# --------------------------------------------------------------------- helpers


def _column_label(j, names):
    return f"column {names[j]!r}" if names is not None else f"column {j}"


def _as_matrix(X, what, *, expect=None, n_features=None, cast=True):
    """Return (2-D array, column names or None), checking the columns.

    The array is float64, or with ``cast=False`` any floating dtype as given (the
    caller casts it in chunks).
    """
    names = None
    if isinstance(X, pd.DataFrame):
        if all(isinstance(c, str) for c in X.columns):
            names = [str(c) for c in X.columns]
        if expect is not None and names is not None:
            missing = [c for c in expect if c not in names]
            if missing:
                raise InputError(
                    f"{what} lacks the predictor column(s) {missing} used in fit; it has {names}."
                )
            X = X[list(expect)]
            names = list(expect)
        try:
            arr = X.to_numpy(dtype=np.float64 if cast or not _all_float(X) else None)
        except (TypeError, ValueError):
            bad = [c for c in X.columns if not pd.api.types.is_numeric_dtype(X[c])]
            raise InputError(
                f"{what} column(s) {bad} are not numeric; pass categories as numeric codes."
            ) from None
    else:
        try:
            arr = np.asarray(X)
            if cast or arr.dtype.kind != "f":
                arr = arr.astype(np.float64, copy=False)
        except (TypeError, ValueError):
            raise InputError(f"{what} is not a numeric array; pass a 2-D array of predictor values.") from None
    if arr.ndim != 2:
        raise InputError(
            f"{what} has shape {arr.shape}; expected a 2-D array (rows x predictors). For a "
            "raster window pass values.reshape(n_bands, -1).T."
        )
    if n_features is not None and arr.shape[1] != n_features:
        raise InputError(f"{what} has {arr.shape[1]} predictor column(s); the model was fitted on {n_features}.")
    return arr, names


def _all_float(df):
    return all(pd.api.types.is_float_dtype(t) for t in df.dtypes)


def _feature_weights(weights, names, p):
    """Importance weights as a float64 array, negatives set to 0."""
    if weights is None:
        return np.ones(p)
    if isinstance(weights, Mapping):
        if names is None:
            raise InputError(
                "weights name predictors by name but X has no column names; pass a DataFrame "
                "or a sequence of weights in column order."
            )
        unknown = [k for k in weights if k not in names]
        missing = [c for c in names if c not in weights]
        if unknown or missing:
            raise InputError(
                f"weights: unknown predictor(s) {unknown}, missing predictor(s) {missing}; "
                f"give one weight for each of {names}."
            )
        values = [weights[c] for c in names]
    else:
        values = list(np.atleast_1d(np.asarray(weights, dtype=object)))
    if len(values) != p or not all(isinstance(v, numbers.Real) and not isinstance(v, bool) for v in values):
        raise InputError(f"weights={weights!r}; expected {p} numbers, one per predictor.")
    w = np.asarray(values, dtype=np.float64)
    if not np.all(np.isfinite(w)):
        j = int(np.flatnonzero(~np.isfinite(w))[0])
        raise InputError(f"weight of {_column_label(j, names)} is {w[j]}; weights must be finite.")
    # A negative permutation importance means the layer did not help: it gets no say.
    return np.maximum(w, 0.0)


def _check_finite_training(ref, rows, names):
    bad = ~np.isfinite(ref)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError(
            f"X has {int(bad.any(axis=1).sum())} training row(s) with NaN or infinite values, "
            f"first at row {int(rows[i])}, {_column_label(j, names)}; training rows need a value "
            "in every predictor (drop them, or give them sample_weight 0)."
        )


def _fold_splits(folds, n):
    """(train, test) index pairs from fold labels or from given splits."""
    if not isinstance(folds, (np.ndarray, pd.Series, pd.Index)):
        items = list(folds)
        if items and all(isinstance(s, tuple | list) and len(s) == 2 and np.ndim(s[0]) == 1 for s in items):
            splits = []
            for k, (train, test) in enumerate(items):
                tr = np.asarray(train, dtype=np.int64).ravel()
                te = np.asarray(test, dtype=np.int64).ravel()
                for name, idx in (("train", tr), ("test", te)):
                    if idx.size and (idx.min() < 0 or idx.max() >= n):
                        raise InputError(
                            f"split {k}: {name} indices run from {idx.min()} to {idx.max()}; "
                            f"expected row positions 0..{n - 1}."
                        )
                splits.append((tr, te))
            return splits
        folds = items
    labels = np.asarray(folds)
    if labels.shape != (n,):
        raise InputError(
            f"folds has shape {labels.shape}; expected ({n},), the test fold of each training row, "
            "or a list of (train, test) index pairs."
        )
    if labels.dtype.kind not in "iu":
        as_float = labels.astype(np.float64) if labels.dtype.kind in "fb" else None
        if as_float is None or not np.all(np.isfinite(as_float) & (as_float == np.round(as_float))):
            raise InputError(
                f"folds holds {labels.dtype} values such as {labels[:3].tolist()}; expected integer "
                "fold numbers (negative = never held out)."
            )
        labels = as_float.astype(np.int64)
    rows = np.arange(n)
    return [(rows[labels != k], rows[labels == k]) for k in np.unique(labels[labels >= 0])]


def _check_chunk_size(value):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise InputError(f"chunk_size={value!r}; expected a positive integer number of rows, e.g. 65536.")
    return int(value)
