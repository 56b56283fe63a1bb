"""Site probabilities of fitted learners, fast for tree ensembles.

:func:`fast_predictor` turns a fitted learner into an object whose
``predict_site(X)`` returns the probability of the site class, equal to
``estimator.predict_proba(X)[:, 1]``. Random forests (and extra-trees) and binary
histogram gradient boosting, bare or behind a :class:`LayerEncoder`, are flattened
into node arrays walked by the numba kernels of
:mod:`mlsites.learners._tree_kernels`; every other learner is called as it is.
"""

import numpy as np
import pandas as pd
from scipy.special import expit
from sklearn.ensemble import ExtraTreesClassifier, HistGradientBoostingClassifier, RandomForestClassifier
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder
from sklearn.utils.validation import check_is_fitted, validate_data

from mlsites.errors import InputError
from mlsites.learners._presets import LayerEncoder
from mlsites.learners._tree_kernels import _boosting_kernel, _forest_kernel

__all__ = ["fast_predictor", "SitePredictor"]


class SitePredictor:
    """Probability of the site class from a fitted learner (the generic path).

    Parameters
    ----------
    estimator : fitted classifier or Pipeline
        Anything with ``predict_proba`` whose second column is the site class.

    Notes
    -----
    Built by :func:`fast_predictor`; tree ensembles get a subclass that walks the
    trees in numba. Instances hold only the estimator and numpy arrays, so they
    pickle (joblib and dask workers) and can as well be rebuilt there from the
    estimator, which takes well under a second.
    """

    #: "estimator" here; "forest" or "boosting" for the compiled paths.
    kind = "estimator"

    def __init__(self, estimator):
        self.estimator = estimator

    def predict_site(self, X, *, n_threads=None):
        """Probability of the site class for each row.

        Parameters
        ----------
        X : DataFrame or array_like of shape (n_samples, n_features)
            What the estimator takes (the layer columns of the model card).
        n_threads : int, optional
            Threads of the compiled paths (default: numba's setting, all cores);
            the result does not depend on it. Ignored by the generic path.

        Returns
        -------
        ndarray of float64, shape (n_samples,)
        """
        return np.asarray(self.estimator.predict_proba(X)[:, 1], dtype=np.float64)

    def __repr__(self):
        return f"{type(self).__name__}(kind={self.kind!r}, estimator={type(self.estimator).__name__})"


class _TreePredictor(SitePredictor):
    """Shared input handling of the compiled paths: encoder, validation, threads."""

    def __init__(self, estimator, encoder, model, dtype):
        super().__init__(estimator)
        self.encoder = encoder
        self.model = model
        self.dtype = dtype
        self._fast_encoding = encoder is not None and _encodes_fast(encoder)

    def predict_site(self, X, *, n_threads=None):
        Z = self._encode(X)
        if Z.shape[0] == 0:
            return np.zeros(0)
        import numba

        out = np.empty(Z.shape[0])
        previous = numba.get_num_threads()
        if n_threads is not None:
            numba.set_num_threads(_check_threads(n_threads, numba.config.NUMBA_NUM_THREADS))
        # blocks handed out one at a time, so a thread slowed by other work on the
        # machine does not hold up the others (the result is the same either way)
        chunk = numba.set_parallel_chunksize(1)
        try:
            self._run(Z, out)
        finally:
            numba.set_parallel_chunksize(chunk)
            numba.set_num_threads(previous)
        return out

    def _encode(self, X):
        if self.encoder is None:
            Z = self._validate(X)
        elif self._fast_encoding:
            Z = _encode_layers(self.encoder, X, self.dtype)
            if Z is None:  # unusual input: the encoder itself checks it and says what is wrong
                Z = self.encoder.transform(X)
        else:
            Z = self.encoder.transform(X)
        return np.ascontiguousarray(Z, dtype=self.dtype)

    def _validate(self, X):
        return validate_data(self.model, X, reset=False, dtype=self.dtype, ensure_all_finite="allow-nan")


class _ForestPredictor(_TreePredictor):
    kind = "forest"

    def __init__(self, estimator, encoder, model):
        # scikit-learn trees compare float32 features with float64 thresholds
        super().__init__(estimator, encoder, model, np.float32)
        self.arrays = _flatten_forest(model)

    def _run(self, Z, out):
        if np.isnan(Z).any():
            # NaN routing differs per node; rare, so scikit-learn handles it (or refuses it)
            out[:] = self.model.predict_proba(Z)[:, 1]
            return
        _forest_kernel(Z, *self.arrays, out)


class _BoostingPredictor(_TreePredictor):
    kind = "boosting"

    def __init__(self, estimator, encoder, model):
        super().__init__(estimator, encoder, model, np.float64)
        self.arrays = _flatten_boosting(model)
        # scikit-learn >= 1.4 re-encodes categorical columns inside the model
        self.remap = _category_remap(getattr(model, "_preprocessor", None))

    def _encode(self, X):
        Z = super()._encode(X)
        if self.encoder is not None and self.remap is not None:
            Z = _apply_remap(self.remap, Z)
        return Z

    def _validate(self, X):
        if getattr(self.model, "_preprocessor", None) is not None:
            return self.model._preprocessor.transform(X)  # what the model's own predict runs
        return super()._validate(X)

    def _run(self, Z, out):
        _boosting_kernel(Z, *self.arrays, out)
        out[:] = expit(out)  # scipy's expit, as scikit-learn's binomial loss uses


def fast_predictor(estimator):
    """An object predicting the site probability of a fitted learner, fast for trees.

    Parameters
    ----------
    estimator : fitted estimator or Pipeline
        A preset of :func:`make_learner` after :func:`fit_learner`, or any fitted
        classifier with ``predict_proba`` (column 1 = sites).

    Returns
    -------
    SitePredictor
        ``predict_site(X, *, n_threads=None) -> ndarray of float64 (n,)``, equal to
        ``estimator.predict_proba(X)[:, 1]``; ``kind`` says which path it takes:
        "forest", "boosting" or "estimator".

    Raises
    ------
    InputError
        If ``estimator`` is not fitted.

    Notes
    -----
    *Compiled paths.* A :class:`~sklearn.ensemble.RandomForestClassifier` or
    :class:`~sklearn.ensemble.ExtraTreesClassifier`, and a binary
    :class:`~sklearn.ensemble.HistGradientBoostingClassifier`, alone or as the
    last step of a Pipeline whose other step is a :class:`LayerEncoder` (the
    presets "random_forest" and "gradient_boosting"). A boosting model's own
    category encoder (scikit-learn re-encodes categorical columns inside the
    model) is applied first: directly for numeric categories behind a
    LayerEncoder, else by its own ``transform``. Other learners, other pipelines,
    and forests or boosting with more than two classes or outputs take the
    generic path.

    *Exactness.* Forest features are cast to float32 as scikit-learn does, and
    each float64 threshold t is replaced by the largest float32 not above it, which
    gives the same decision ``x <= t`` for every float32 x; leaf values are the
    leaves' class-1 fractions, averaged over the trees as ``predict_proba`` does.
    Boosting follows scikit-learn's float64 decisions, missing-value sides and
    categorical bitsets, sums the leaves in tree order from the baseline and
    applies the logistic function, so probabilities agree to rounding (a few
    1e-16) on every row. A batch with NaN among a forest's encoded features
    goes to scikit-learn's own ``predict_proba`` (which routes NaN per node, or
    refuses it for a forest fitted without missing values). One documented
    difference: a boosting category code of 256 or more, which scikit-learn's
    encoders never produce and its prediction handles by an undefined C cast, is
    treated as unseen.

    *Encoding.* For a LayerEncoder with one-hot or ordinal numeric categories
    and no scaling or splines (the tree presets), the encoded matrix is built
    here directly in the dtype the trees use; otherwise, and for any input the
    encoder would refuse, the encoder's own ``transform`` runs (and raises its
    error).

    *Determinism.* Each row's sum runs over the trees in their fitted order, and
    rows are split into fixed blocks, so the output is the same for any number of
    threads and any batch of rows.

    Examples
    --------
    >>> import numpy as np
    >>> from mlsites.learners import fast_predictor, fit_learner, make_learner
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(200, 3)); y = (X[:, 0] > 0).astype(int)
    >>> model = fit_learner(make_learner("random_forest", random_state=0, n_estimators=20), X, y)
    >>> predictor = fast_predictor(model)
    >>> predictor.kind
    'forest'
    >>> bool(np.array_equal(predictor.predict_site(X), model.predict_proba(X)[:, 1]))
    True
    """
    encoder, model = _split_pipeline(estimator)
    try:
        check_is_fitted(model)
    except Exception as exc:  # NotFittedError, or an object that is no estimator
        raise InputError(
            f"fast_predictor needs a fitted learner; {type(model).__name__} is not fitted "
            f"({exc}). Fit it with fit_learner first, or load a saved model."
        ) from None
    if encoder is not None and not isinstance(encoder, LayerEncoder):
        return SitePredictor(estimator)
    if isinstance(model, (RandomForestClassifier, ExtraTreesClassifier)) and _binary(model) \
            and model.n_outputs_ == 1:
        return _ForestPredictor(estimator, encoder, model)
    if isinstance(model, HistGradientBoostingClassifier) and _binary(model) and model.n_trees_per_iteration_ == 1:
        predictor = _BoostingPredictor(estimator, encoder, model)
        if encoder is None or predictor.remap is not None or getattr(model, "_preprocessor", None) is None:
            return predictor
    return SitePredictor(estimator)


def _split_pipeline(estimator):
    if isinstance(estimator, Pipeline):
        steps = [s for _, s in estimator.steps if s not in (None, "passthrough")]
        if len(steps) == 1:
            return None, steps[0]
        if len(steps) == 2:
            return steps[0], steps[1]
        return object(), steps[-1]  # not a LayerEncoder: the generic path
    return None, estimator


def _binary(model):
    classes = getattr(model, "classes_", None)
    return classes is not None and np.ndim(classes) == 1 and len(classes) == 2


def _check_threads(n_threads, most):
    if isinstance(n_threads, bool) or not isinstance(n_threads, (int, np.integer)) or not 1 <= n_threads <= most:
        raise InputError(f"n_threads={n_threads!r}; expected an integer from 1 to {most} (numba's thread count).")
    return int(n_threads)


# ---------------------------------------------------------------- flattening


def _float32_at_most(threshold):
    """Largest float32 not above each float64 threshold (x32 <= t iff x32 <= this)."""
    t32 = threshold.astype(np.float32)
    above = t32.astype(np.float64) > threshold
    t32[above] = np.nextafter(t32[above], np.float32(-np.inf))
    return t32


def _flatten_forest(model):
    """Concatenated node arrays of a forest: feature, threshold, children, value, roots."""
    features, thresholds, children, values, roots = [], [], [], [], []
    offset = 0
    for tree in model.estimators_:
        t = tree.tree_
        leaf = t.children_left < 0
        node = np.arange(t.node_count, dtype=np.int64) + offset
        v = t.value[:, 0, :]
        total = v.sum(axis=1)
        total[total == 0.0] = 1.0  # as DecisionTreeClassifier.predict_proba
        threshold = _float32_at_most(t.threshold)
        threshold[leaf] = np.inf  # x > inf is false even for NaN: a leaf maps to itself
        pair = np.empty((t.node_count, 2), np.int64)
        pair[:, 0] = np.where(leaf, node, t.children_left + offset)
        pair[:, 1] = np.where(leaf, node, t.children_right + offset)
        features.append(np.where(leaf, 0, t.feature))
        thresholds.append(threshold)
        children.append(pair.ravel())
        values.append(np.where(leaf, v[:, 1] / total, 0.0))
        roots.append(offset)
        offset += t.node_count
    index = np.int32 if 2 * offset < np.iinfo(np.int32).max else np.int64
    return (np.concatenate(features).astype(np.int32), np.concatenate(thresholds),
            np.concatenate(children).astype(index), np.concatenate(values), np.asarray(roots, np.int64))


def _flatten_boosting(model):
    """Concatenated node arrays of a binary HistGradientBoostingClassifier."""
    known_bits, known_row = model._bin_mapper.make_known_categories_bitsets()
    parts, bitsets, roots = [], [], []
    offset = n_bitsets = 0
    for (predictor,) in model._predictors:
        nodes = predictor.nodes
        parts.append((nodes, offset, n_bitsets))
        bits = np.asarray(predictor.raw_left_cat_bitsets, dtype=np.uint32).reshape(-1, 8)
        bitsets.append(bits)
        roots.append(offset)
        offset += nodes.shape[0]
        n_bitsets += bits.shape[0]
    nodes = np.concatenate([p[0] for p in parts])
    shift = np.concatenate([np.full(p[0].shape[0], p[1], np.int64) for p in parts])
    bit_shift = np.concatenate([np.full(p[0].shape[0], p[2], np.int64) for p in parts])
    leaf = nodes["is_leaf"].astype(bool)
    categorical = nodes["is_categorical"].astype(bool)
    category_bits = np.concatenate(bitsets) if n_bitsets else np.zeros((1, 8), np.uint32)
    known_bits = np.asarray(known_bits, dtype=np.uint32).reshape(-1, 8)
    if known_bits.shape[0] == 0:
        known_bits = np.zeros((1, 8), np.uint32)
    return (
        nodes["feature_idx"].astype(np.int64),
        nodes["num_threshold"].astype(np.float64),
        np.where(leaf, -1, nodes["left"].astype(np.int64) + shift),
        np.where(leaf, -1, nodes["right"].astype(np.int64) + shift),
        leaf,
        nodes["missing_go_to_left"].astype(bool),
        categorical,
        np.where(categorical, nodes["bitset_idx"].astype(np.int64) + bit_shift, 0),
        category_bits,
        np.asarray(known_row, dtype=np.int64),
        known_bits,
        nodes["value"].astype(np.float64),
        np.asarray(roots, np.int64),
        float(model._baseline_prediction.ravel()[0]),
    )


# ---------------------------------------------------------------- encoding


def _encodes_fast(encoder):
    """True if :func:`_encode_layers` reproduces ``encoder.transform`` for this encoder."""
    if encoder.scaler_ is not None or encoder.spline_ is not None:
        return False
    enc = encoder.category_encoder_
    if enc is None:
        return True
    if isinstance(enc, OneHotEncoder):
        plain = (enc.drop is None and enc.min_frequency is None and enc.max_categories is None
                 and enc.handle_unknown == "ignore")
    elif isinstance(enc, OrdinalEncoder):
        plain = (enc.handle_unknown == "use_encoded_value" and np.isnan(enc.unknown_value)
                 and enc.min_frequency is None and enc.max_categories is None)
    else:
        return False
    return plain and all(np.asarray(c).dtype.kind in "fiu" for c in enc.categories_)


def _encode_layers(encoder, X, dtype):
    """The encoder's output built column by column, or None to let the encoder decide.

    None comes back for anything but a 2-D numeric table with the fitted columns in
    order and only finite values (the encoder then raises its own error, or copes).
    """
    names = getattr(encoder, "feature_names_in_", None)
    if isinstance(X, pd.DataFrame):
        if names is None or list(X.columns) != list(names):
            return None
        if not all(pd.api.types.is_numeric_dtype(t) and not pd.api.types.is_bool_dtype(t) for t in X.dtypes):
            return None

        def column(j):
            return X.iloc[:, j].to_numpy(dtype=np.float64)
    else:
        if names is not None or not isinstance(X, np.ndarray) or X.ndim != 2 \
                or X.shape[1] != encoder.n_features_in_ or X.dtype.kind not in "fiu":
            return None

        def column(j):
            return X[:, j].astype(np.float64)

    n = X.shape[0]
    enc = encoder.category_encoder_
    categories = [] if enc is None else [np.asarray(c, dtype=np.float64) for c in enc.categories_]
    onehot = isinstance(enc, OneHotEncoder)
    width = (sum(c.size for c in categories) if onehot else len(categories)) + len(encoder.numeric_indices_)
    Z = np.empty((n, width), dtype=dtype)
    pos = 0
    for j, cats in zip(encoder.categorical_indices_, categories):
        x = column(j)
        if not np.isfinite(x).all():
            return None
        if onehot:
            Z[:, pos:pos + cats.size] = x[:, None] == cats[None, :]
            pos += cats.size
        else:
            Z[:, pos] = _ordinal_codes(x, cats)
            pos += 1
    for j in encoder.numeric_indices_:
        x = column(j)
        if not np.isfinite(x).all():
            return None
        Z[:, pos] = x
        pos += 1
    return Z


def _category_remap(preprocessor):
    """Output slices and numeric categories of a boosting model's own category encoder.

    None when there is none, or when it is not the two-part column transformer
    (categories then numbers) with numeric categories that it is when fitted by
    scikit-learn on encoded layers.
    """
    if preprocessor is None:
        return None
    try:
        encoder = preprocessor.named_transformers_["encoder"]
        cat_columns = np.flatnonzero(preprocessor.transformers_[0][2])
        num_columns = np.flatnonzero(preprocessor.transformers_[1][2])
        out = preprocessor.output_indices_
    except (AttributeError, KeyError, IndexError, TypeError):
        return None
    if not isinstance(encoder, OrdinalEncoder) or not all(np.asarray(c).dtype.kind in "fiu"
                                                          for c in encoder.categories_):
        return None
    return (cat_columns, out["encoder"], [np.asarray(c, np.float64) for c in encoder.categories_],
            num_columns, out["numerical"])


def _ordinal_codes(x, categories):
    """Index of each value in sorted ``categories``; NaN where absent (unseen or NaN)."""
    if categories.size == 0:
        return np.full(x.shape, np.nan)
    k = np.minimum(np.searchsorted(categories, x), categories.size - 1)
    return np.where(categories[k] == x, k, np.nan)


def _apply_remap(remap, Z):
    cat_columns, cat_out, categories, num_columns, num_out = remap
    out = np.empty_like(Z)
    for j, k, cats in zip(cat_columns, range(cat_out.start, cat_out.stop), categories):
        out[:, k] = _ordinal_codes(Z[:, j], cats)
    out[:, num_out] = Z[:, num_columns]
    return out
