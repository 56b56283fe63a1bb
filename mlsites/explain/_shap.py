"""SHAP values per layer for every learner preset (Lundberg & Lee 2017).

:class:`LayerExplainer` wraps one fitted learner and picks the explainer by its
final estimator:

- tree models (forest, boosting): exact path-dependent TreeSHAP (Lundberg et al.
  2020) on the encoded columns, with every column of one layer acting as one player;
- linear models (logistic regression): the interventional linear solution
  ``phi_j = beta_j (z_j - mean_b z_j)`` on the encoded columns, summed per layer;
- anything else (MLP, fuzzy suitability): interventional Shapley values in layer
  space, estimated from antithetic permutations against a background sample.

Every method satisfies local accuracy: ``expected_value + phi.sum(axis=1)`` is the
learner's raw output (``output_space``) at each row.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd

from mlsites.errors import InputError, InsufficientDataError
from mlsites.explain._trees import flatten_trees, is_tree_model, tree_shap

__all__ = ["LayerExplainer", "layer_contributions", "encoded_layers", "raw_output", "output_space",
           "predicted_score"]

METHODS = ("tree_path_dependent", "linear_interventional", "permutation_interventional")
#: Default antithetic permutation pairs of the model-agnostic explainer.
DEFAULT_N_PERMUTATIONS = 10
# rows x coalitions x background rows evaluated in one predict call (memory bound)
_BATCH_ROWS = 200_000


def _split_pipeline(estimator):
    """(transformers, final estimator) of a Pipeline; ([], estimator) otherwise."""
    steps = getattr(estimator, "steps", None)
    if steps is None:
        return [], estimator
    live = [s for _, s in steps if s not in (None, "passthrough")]
    return live[:-1], live[-1]


def _layer_names(estimator, X=None):
    names = getattr(estimator, "feature_names_in_", None)
    if names is not None:
        return [str(n) for n in names]
    n = getattr(estimator, "n_features_in_", None)
    if n is None and X is not None:
        n = np.shape(X)[1]
    if n is None:
        raise InputError(f"{type(estimator).__name__} is not fitted (no n_features_in_); fit it before explaining.")
    return [f"x{i}" for i in range(int(n))]


def encoded_layers(transformers, n_layers):
    """Layer index of every column the final estimator sees.

    Parameters
    ----------
    transformers : list of fitted transformers
        The steps before the final estimator (empty: columns are the layers).
    n_layers : int

    Returns
    -------
    ndarray of int or None
        None when the columns cannot be traced back to layers (an unknown step).

    Notes
    -----
    :class:`mlsites.learners.LayerEncoder` writes the categorical layers first (one
    column per category seen in fit when one-hot, one ordinal column otherwise),
    then the numeric layers in their order, each as one column or as its block of
    spline terms.
    """
    from mlsites.learners import LayerEncoder

    if not transformers:
        return np.arange(n_layers)
    if len(transformers) != 1 or not isinstance(transformers[0], LayerEncoder):
        return None
    enc = transformers[0]
    out = []
    cat_enc = enc.category_encoder_
    for k, layer in enumerate(enc.categorical_indices_):
        width = len(cat_enc.categories_[k]) if enc.encoding == "onehot" else 1
        out += [int(layer)] * width
    nums = enc.numeric_indices_
    per = enc.spline_.n_features_out_ // len(nums) if enc.spline_ is not None and len(nums) else 1
    for layer in nums:
        out += [int(layer)] * per
    return np.asarray(out, dtype=np.int64)


def output_space(estimator):
    """Name of the raw output a learner is explained in.

    "log-odds" for boosted and logistic classifiers (their decision function),
    "membership" for the fuzzy baseline, "probability" for other classifiers (the
    class-1 probability), "prediction" for regressors.
    """
    _, final = _split_pipeline(estimator)
    name = type(final).__name__
    if name == "FuzzySuitability":
        return "membership"
    if not hasattr(final, "classes_"):
        return "prediction"
    if name.startswith("HistGradientBoosting") or _is_linear(final):
        return "log-odds"
    return "probability"


def _as_input(estimator, X):
    """``X`` as the estimator was fitted: a DataFrame keeps its names only for a model fitted on names."""
    if isinstance(X, pd.DataFrame) and getattr(estimator, "feature_names_in_", None) is None:
        return X.to_numpy()
    return X


def raw_output(estimator, X):
    """The learner's raw output (see :func:`output_space`) at rows ``X``, float64."""
    X = _as_input(estimator, X)
    space = output_space(estimator)
    if space == "log-odds":
        out = estimator.decision_function(X)
    else:
        out = predicted_score(estimator, X)
    return np.asarray(out, dtype=np.float64).ravel()


def predicted_score(estimator, X):
    """The score a map shows: class-1 probability (or membership); ``predict`` for regressors."""
    X = _as_input(estimator, X)
    if hasattr(estimator, "predict_proba"):
        return np.asarray(_class1(estimator, estimator.predict_proba(X)), dtype=np.float64)
    return np.asarray(estimator.predict(X), dtype=np.float64).ravel()


def _class1(estimator, proba):
    proba = np.asarray(proba)
    if proba.ndim != 2 or proba.shape[1] != 2:
        raise InputError(f"{type(estimator).__name__}.predict_proba returned shape {proba.shape}; "
                         "explanations need two classes (site and background).")
    return proba[:, 1]


def _is_linear(final):
    from mlsites.learners import MeanLossLogisticRegression

    coef = getattr(final, "coef_", None)
    linear = isinstance(final, MeanLossLogisticRegression) or type(final).__module__.startswith("sklearn.linear_model")
    return coef is not None and linear and np.asarray(coef).size == np.shape(np.atleast_2d(coef))[1]


def _permutation_pairs(n_layers, n_permutations, rng):
    """Antithetic permutation pairs (forward orders; each also runs backwards).

    All orders (hence exact Shapley values) when ``n_layers!/2 <= n_permutations``.
    """
    if n_layers < 2:
        return np.zeros((1, n_layers), dtype=np.int64)
    if math.factorial(n_layers) // 2 <= n_permutations:
        # each pair {p, reversed(p)} once: the member whose first entry is smaller
        return np.array([p for p in itertools.permutations(range(n_layers)) if p[0] < p[-1]], dtype=np.int64)
    return np.array([rng.permutation(n_layers) for _ in range(n_permutations)], dtype=np.int64)


class LayerExplainer:
    """Per-layer SHAP values of one fitted learner; picklable, cheap to send to workers.

    Parameters
    ----------
    estimator : fitted estimator or Pipeline
        A learner preset (``encode`` then ``model``) or any fitted scikit-learn
        estimator taking the layer columns.
    background : DataFrame or array of shape (n_background, n_layers), optional
        Rows that stand for "the layer is unknown": the background of the
        interventional explainers (linear and permutation); required by them,
        ignored by the tree explainer (which uses the training cover).
    method : {"auto", "tree_path_dependent", "linear_interventional", "permutation_interventional"}
        "auto" picks by the final estimator (see the module docstring). A tree or
        linear method is refused when the encoder's columns cannot be traced to layers.
    n_permutations : int, default 10
        Antithetic permutation pairs of the permutation explainer (each ordering is
        also run backwards); all orderings, hence exact values, when the number of
        layers is small enough (``n_layers! / 2 <= n_permutations``).
    random_state : int, default 0
        Seed of the permutations. The same orderings serve every row, so a row's
        values do not depend on which other rows are explained with it (windows,
        worker processes).

    Attributes
    ----------
    estimator : estimator or None
        The learner, kept by the permutation method only; the tree and linear
        explainers keep their arrays and the encoder, so they pickle small.
    layers : list of str
    method : str
    output_space : str
        "probability", "log-odds", "membership" or "prediction".
    expected_value : float
        phi_0: the tree's cover-weighted mean output, or the mean output over the
        background.
    n_background : int
        Background rows used (0 for the tree explainer).

    Notes
    -----
    Tree: columns of one layer (its one-hot columns) are one player, so a layer's
    value is its Shapley value in the path-dependent game of layers, not a sum of
    per-column values; for trees that split on one column per layer the two are the
    same. Linear: per-column values ``beta_j (z_j - mean_b z_j)`` summed over the
    layer's columns (one-hot, spline terms); for a model linear in its columns this
    equals the Shapley value of the layer as one player. Permutation: v(S) is the
    mean over background rows b of f(x_S, b_rest); each ordering and its reverse add
    the marginal changes of each layer as it joins, so every ordering sums to
    f(x) - mean_b f(b) and local accuracy is exact whatever the number of orderings.
    Cost per row: ``2 * n_permutations * (n_layers - 1) * n_background`` predictions.

    References
    ----------
    Lundberg, S.M. & Lee, S.-I. (2017). A unified approach to interpreting model
    predictions. NeurIPS 30.
    Lundberg, S.M. et al. (2020). From local explanations to global understanding
    with explainable AI for trees. Nature Machine Intelligence 2, 56-67.
    doi:10.1038/s42256-019-0138-9
    Strumbelj, E. & Kononenko, I. (2014). Explaining prediction models and
    individual predictions with feature contributions. Knowledge and Information
    Systems 41, 647-665. doi:10.1007/s10115-013-0679-x
    """

    def __init__(self, estimator, *, background=None, method="auto", n_permutations=DEFAULT_N_PERMUTATIONS,
                 random_state=0):
        if method != "auto" and method not in METHODS:
            raise InputError(f"method={method!r}; choose 'auto' or one of {METHODS}.")
        if isinstance(n_permutations, bool) or not isinstance(n_permutations, (int, np.integer)) \
                or n_permutations < 1:
            raise InputError(f"n_permutations={n_permutations!r}; expected a whole number >= 1.")
        self.estimator = estimator
        self.layers = _layer_names(estimator, background)
        self.output_space = output_space(estimator)
        transformers, final = _split_pipeline(estimator)
        self._transformers = transformers
        columns = encoded_layers(transformers, len(self.layers))
        if method == "auto":
            if columns is not None and is_tree_model(final):
                method = "tree_path_dependent"
            elif columns is not None and _is_linear(final):
                method = "linear_interventional"
            else:
                method = "permutation_interventional"
        elif method != "permutation_interventional" and columns is None:
            raise InputError(f"method={method!r} needs columns traceable to layers; the steps "
                             f"{[type(t).__name__ for t in transformers]} are not. Use "
                             "'permutation_interventional'.")
        self.method = method
        self._columns = columns
        self.n_background = 0
        if method == "tree_path_dependent":
            self._trees = flatten_trees(final)
            self.expected_value = self._trees.expected_value()
            # the flat arrays and the encoder are all it needs: workers get no copy of the model
            self.estimator = None
            return
        if background is None:
            raise InputError(f"the {method} explainer needs background rows (for example landscape cells "
                             "drawn at random from the study area); pass background=...")
        bg = self._frame(background, "background")
        if len(bg) == 0:
            raise InsufficientDataError("background has no rows; pass at least one background row.")
        self.n_background = len(bg)
        if method == "linear_interventional":
            self._coef = np.asarray(final.coef_, dtype=np.float64).ravel()
            self._intercept = float(np.ravel(getattr(final, "intercept_", 0.0))[0])
            z_mean = self._transform(bg).mean(axis=0)
            self._z_mean = z_mean
            self.expected_value = float(self._coef @ z_mean + self._intercept)
            self.estimator = None
            return
        self._background = bg.to_numpy(dtype=np.float64)
        self._pairs = _permutation_pairs(len(self.layers), int(n_permutations),
                                         np.random.default_rng(random_state))
        self.expected_value = float(raw_output(estimator, bg).mean())

    # ------------------------------------------------------------ helpers

    def _frame(self, X, what="X"):
        if isinstance(X, pd.DataFrame):
            missing = [c for c in self.layers if c not in X.columns]
            if missing:
                raise InputError(f"{what} lacks layer column(s) {missing}; the learner was fitted on "
                                 f"{self.layers}.")
            return X[self.layers]
        arr = np.asarray(X, dtype=np.float64)
        if arr.ndim != 2 or arr.shape[1] != len(self.layers):
            raise InputError(f"{what} has shape {arr.shape}; expected (n_rows, {len(self.layers)}) "
                             f"columns {self.layers}.")
        return pd.DataFrame(arr, columns=self.layers)

    def _transform(self, frame):
        Z = frame
        for t in self._transformers:
            Z = t.transform(Z)
        return np.asarray(Z, dtype=np.float64)

    # ------------------------------------------------------------ public

    def shap_values(self, X):
        """SHAP values per layer at rows ``X``.

        Parameters
        ----------
        X : DataFrame with the layer columns, or array of shape (n_rows, n_layers)
            Complete rows (no NaN): drop nodata cells first.

        Returns
        -------
        DataFrame of shape (n_rows, n_layers)
            Index of ``X`` (when a DataFrame), columns :attr:`layers`, values in
            :attr:`output_space`.
        """
        frame = self._frame(X)
        index = frame.index
        if len(frame) == 0:
            return pd.DataFrame(np.zeros((0, len(self.layers))), columns=self.layers, index=index)
        if self.method == "tree_path_dependent":
            phi = tree_shap(self._trees, self._transform(frame), self._columns, len(self.layers))
        elif self.method == "linear_interventional":
            per_column = (self._transform(frame) - self._z_mean) * self._coef
            # sum each layer's columns: one-hot columns, spline terms
            phi = per_column @ (self._columns[:, None] == np.arange(len(self.layers))[None, :])
        else:
            phi = self._permutation_values(frame.to_numpy(dtype=np.float64))
        return pd.DataFrame(phi, columns=self.layers, index=index)

    def _permutation_values(self, x_rows):
        n, m = x_rows.shape
        bg = self._background
        nb = bg.shape[0]
        orders = np.concatenate([self._pairs, self._pairs[:, ::-1]])
        phi = np.zeros((n, m))
        if m == 0:
            return phi
        f_x = raw_output(self.estimator, pd.DataFrame(x_rows, columns=self.layers))
        # coalition k of an ordering takes its first k layers from x, the rest from b;
        # k = 0 is the background mean and k = m is f(x), known without predicting
        inner = max(m - 1, 0)
        per_row = len(orders) * inner * nb
        chunk = max(1, _BATCH_ROWS // max(per_row, 1))
        ranks = np.argsort(orders, axis=1)  # position of each layer in each ordering
        for start in range(0, n, chunk):
            xs = x_rows[start:start + chunk]
            r = xs.shape[0]
            v = np.empty((r, len(orders), m + 1))
            v[:, :, 0] = self.expected_value
            v[:, :, m] = f_x[start:start + r, None]
            if inner:
                ks = np.arange(1, m)
                # take x where the layer's rank in the ordering is < k
                from_x = ranks[:, None, :] < ks[None, :, None]  # (orders, inner, m)
                Z = np.where(from_x[None, :, :, None, :], xs[:, None, None, None, :], bg[None, None, None, :, :])
                out = raw_output(self.estimator, pd.DataFrame(Z.reshape(-1, m), columns=self.layers))
                v[:, :, 1:m] = out.reshape(r, len(orders), inner, nb).mean(axis=3)
            gains = np.diff(v, axis=2)  # (r, orders, m): gain of the layer at each position
            for o, order in enumerate(orders):
                phi[start:start + r, order] += gains[:, o, :]
        return phi / len(orders)


def layer_contributions(explainer, X, layers=None):
    """SHAP values of chosen layers at rows ``X``, as a float64 array (for map windows).

    Parameters
    ----------
    explainer : LayerExplainer
        Built once (for example from the best learner) and sent to the workers.
    X : DataFrame or array of shape (n_rows, n_layers)
        Complete rows of one window, in the layer columns.
    layers : sequence of str, optional
        Layers to return, in this order (default all, in :attr:`LayerExplainer.layers`).

    Returns
    -------
    ndarray of shape (n_rows, len(layers))
        In the explainer's output space; with all layers, each row plus
        ``explainer.expected_value`` is the learner's raw output.

    Raises
    ------
    InputError
        A layer that is not one of the explainer's.
    """
    phi = explainer.shap_values(X)
    if layers is None:
        return phi.to_numpy(dtype=np.float64)
    layers = [layers] if isinstance(layers, str) else list(layers)
    unknown = [c for c in layers if c not in explainer.layers]
    if unknown:
        raise InputError(f"layer(s) {unknown} are not features of the learner; choose from {explainer.layers}.")
    return phi[layers].to_numpy(dtype=np.float64)
