"""Tree ensembles of scikit-learn as flat arrays for the TreeSHAP kernel.

:func:`flatten_trees` reads a fitted decision tree, random forest, extra-trees
ensemble or histogram gradient boosting model (classifier or regressor, binary)
into one :class:`FlatTrees` whose leaf values are already scaled so that their
sum over trees plus ``offset`` is the model's raw output: the class-1 probability
of a forest, the log-odds of a boosted classifier, the prediction of a regressor.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mlsites.errors import InputError
from mlsites.explain._kernels import (
    CATEGORICAL_SPLIT,
    NUMERIC_SPLIT,
    _predict_kernel,
    _tree_shap_kernel,
)

__all__ = ["FlatTrees", "flatten_trees", "is_tree_model", "tree_shap"]

_SKLEARN_TREES = ("DecisionTreeClassifier", "DecisionTreeRegressor", "RandomForestClassifier",
                  "RandomForestRegressor", "ExtraTreesClassifier", "ExtraTreesRegressor",
                  "ExtraTreeClassifier", "ExtraTreeRegressor")
_HIST_TREES = ("HistGradientBoostingClassifier", "HistGradientBoostingRegressor")


@dataclass(frozen=True)
class FlatTrees:
    """A tree ensemble as concatenated node arrays (absolute node indices).

    ``left``/``right`` are -1 at leaves; ``column`` is the input column a split
    tests; ``cover`` the training cover of each node; ``value`` the leaf values,
    scaled (1/n_trees for a forest); ``offset`` the constant added (the boosting
    baseline); ``float32`` whether inputs are compared as float32 (scikit-learn
    trees); ``output`` "probability", "log-odds" or "prediction".
    """

    roots: np.ndarray
    left: np.ndarray
    right: np.ndarray
    column: np.ndarray
    threshold: np.ndarray
    kind: np.ndarray
    missing_left: np.ndarray
    bitset_row: np.ndarray
    known_row: np.ndarray
    cover: np.ndarray
    value: np.ndarray
    bitsets: np.ndarray
    known: np.ndarray
    offset: float
    float32: bool
    output: str
    max_depth: int
    n_columns: int

    def _inputs(self, X):
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.n_columns:
            raise InputError(f"rows to explain have shape {X.shape}; the trees expect {self.n_columns} columns.")
        if self.float32:
            X = X.astype(np.float32).astype(np.float64)
        return np.ascontiguousarray(X)

    def predict_raw(self, X):
        """Raw output of the ensemble from the flat arrays (equals the model's)."""
        X = self._inputs(X)
        return self.offset + _predict_kernel(X, self.roots, self.left, self.right, self.column, self.threshold,
                                             self.kind, self.missing_left, self.bitset_row, self.known_row,
                                             self.value, self.bitsets, self.known)

    def expected_value(self):
        """Cover-weighted mean leaf value summed over trees, plus the offset (phi_0)."""
        total = self.offset
        ends = np.append(self.roots[1:], self.left.size)
        for start, end in zip(self.roots, ends):
            leaves = np.flatnonzero(self.left[start:end] < 0) + start
            total += float(np.dot(self.cover[leaves], self.value[leaves]) / self.cover[start])
        return total


def is_tree_model(model) -> bool:
    """True for the tree ensembles :func:`flatten_trees` reads."""
    return type(model).__name__ in _SKLEARN_TREES + _HIST_TREES


def _positive_class(model):
    classes = np.asarray(model.classes_)
    if classes.size != 2:
        raise InputError(f"{type(model).__name__} has {classes.size} classes; explanations need two "
                         "(site and background).")
    return 1


def _sklearn_trees(model):
    is_clf = hasattr(model, "classes_")
    k = _positive_class(model) if is_clf else 0
    trees = [model] if not hasattr(model, "estimators_") else list(model.estimators_)
    parts = []
    for est in trees:
        t = est.tree_
        val = t.value[:, 0, :]
        if is_clf:
            # scikit-learn >= 1.4 stores class fractions, older versions weighted counts
            val = val[:, k] / np.maximum(val.sum(axis=1), np.finfo(float).tiny)
        else:
            val = val[:, 0]
        n = t.node_count
        miss = getattr(t, "missing_go_to_left", np.zeros(n, dtype=np.uint8))
        parts.append(dict(left=t.children_left, right=t.children_right, column=t.feature,
                          threshold=t.threshold, kind=np.full(n, NUMERIC_SPLIT), missing_left=miss,
                          bitset_row=np.zeros(n), known_row=np.zeros(n), cover=t.weighted_n_node_samples,
                          value=val / len(trees), depth=t.max_depth))
    empty = np.zeros((1, 8), dtype=np.uint32)
    return parts, empty, empty, 0.0, True, ("probability" if is_clf else "prediction")


def _hist_trees(model):
    is_clf = hasattr(model, "classes_")
    if is_clf:
        _positive_class(model)
    if model.n_trees_per_iteration_ != 1:
        raise InputError(f"{type(model).__name__} has {model.n_trees_per_iteration_} trees per iteration; "
                         "only binary classifiers and regressors can be explained.")
    # private but stable since scikit-learn 1.0: the predictors, their left-category
    # bitsets and the known categories per feature (what predict itself reads)
    known, f_idx_map = model._bin_mapper.make_known_categories_bitsets()
    parts, bitsets, n_bitsets = [], [], 0
    for (pred,) in model._predictors:
        nodes = pred.nodes
        leaf = nodes["is_leaf"].astype(bool)
        is_cat = nodes["is_categorical"].astype(bool) & ~leaf
        feat = np.where(leaf, -1, nodes["feature_idx"]).astype(np.int64)
        known_row = np.where(is_cat, f_idx_map[np.maximum(feat, 0)], 0)
        parts.append(dict(left=np.where(leaf, -1, nodes["left"].astype(np.int64)),
                          right=np.where(leaf, -1, nodes["right"].astype(np.int64)),
                          column=feat, threshold=nodes["num_threshold"],
                          kind=np.where(is_cat, CATEGORICAL_SPLIT, NUMERIC_SPLIT),
                          missing_left=nodes["missing_go_to_left"],
                          bitset_row=np.where(is_cat, nodes["bitset_idx"].astype(np.int64) + n_bitsets, 0),
                          known_row=known_row, cover=nodes["count"].astype(np.float64),
                          value=np.where(leaf, nodes["value"], 0.0), depth=int(nodes["depth"].max())))
        cat_bits = np.asarray(pred.raw_left_cat_bitsets, dtype=np.uint32).reshape(-1, 8)
        bitsets.append(cat_bits)
        n_bitsets += cat_bits.shape[0]
    bitsets = np.concatenate(bitsets) if n_bitsets else np.zeros((1, 8), dtype=np.uint32)
    known = np.asarray(known, dtype=np.uint32).reshape(-1, 8) if np.size(known) else np.zeros((1, 8), np.uint32)
    offset = float(np.ravel(model._baseline_prediction)[0])
    return parts, bitsets, known, offset, False, ("log-odds" if is_clf else "prediction")


def flatten_trees(model) -> FlatTrees:
    """Read a fitted scikit-learn tree model into :class:`FlatTrees`.

    Parameters
    ----------
    model : fitted estimator
        DecisionTree*, RandomForest*, ExtraTrees* or HistGradientBoosting*
        (binary classifier or regressor).

    Returns
    -------
    FlatTrees

    Raises
    ------
    InputError
        Another model type, or a multi-class model.

    Notes
    -----
    Covers are what the model stores: ``weighted_n_node_samples`` for scikit-learn
    trees (bootstrap counts times sample weights), the unweighted ``count`` of the
    training rows for histogram boosting (the only cover it keeps).
    """
    name = type(model).__name__
    if name in _SKLEARN_TREES:
        parts, bitsets, known, offset, f32, output = _sklearn_trees(model)
    elif name in _HIST_TREES:
        parts, bitsets, known, offset, f32, output = _hist_trees(model)
    else:
        raise InputError(f"{name} is not a tree model the tree explainer reads; use one of "
                         f"{sorted(_SKLEARN_TREES + _HIST_TREES)}.")
    sizes = np.array([p["left"].size for p in parts])
    roots = np.concatenate(([0], np.cumsum(sizes)[:-1])).astype(np.int64)

    def cat(key, dtype):
        return np.ascontiguousarray(np.concatenate([np.asarray(p[key]) for p in parts]).astype(dtype))

    shift = np.repeat(roots, sizes)
    left, right = cat("left", np.int64), cat("right", np.int64)
    left = np.where(left >= 0, left + shift, -1)
    right = np.where(right >= 0, right + shift, -1)
    column = cat("column", np.int64)
    n_columns = int(getattr(model, "n_features_in_", column.max() + 1))
    return FlatTrees(roots=roots, left=left, right=right, column=np.where(left >= 0, column, -1),
                     threshold=cat("threshold", np.float64), kind=cat("kind", np.int64),
                     missing_left=cat("missing_left", np.bool_), bitset_row=cat("bitset_row", np.int64),
                     known_row=cat("known_row", np.int64), cover=cat("cover", np.float64),
                     value=cat("value", np.float64), bitsets=np.ascontiguousarray(bitsets),
                     known=np.ascontiguousarray(known), offset=offset, float32=f32, output=output,
                     max_depth=int(max(p["depth"] for p in parts)), n_columns=n_columns)


def tree_shap(trees: FlatTrees, X, players=None, n_players=None):
    """Path-dependent SHAP values of rows ``X`` for players that group input columns.

    Parameters
    ----------
    trees : FlatTrees
    X : array_like of shape (n_rows, n_columns)
        Rows in the columns the trees test.
    players : array_like of int, shape (n_columns,), optional
        Player (layer) of each column; default one player per column.
    n_players : int, optional
        Default ``max(players) + 1``.

    Returns
    -------
    ndarray of shape (n_rows, n_players)
        ``phi`` with ``phi.sum(1) + trees.expected_value() == trees.predict_raw(X)``.
    """
    X = trees._inputs(X)
    players = np.arange(trees.n_columns) if players is None else np.asarray(players, dtype=np.int64)
    n_players = int(players.max()) + 1 if n_players is None else int(n_players)
    node_players = np.where(trees.column >= 0, players[np.maximum(trees.column, 0)], -1).astype(np.int64)
    return _tree_shap_kernel(X, trees.roots, trees.left, trees.right, trees.column, node_players,
                             trees.threshold, trees.kind, trees.missing_left, trees.bitset_row,
                             trees.known_row, trees.cover, trees.value, trees.bitsets, trees.known,
                             n_players, trees.max_depth)
