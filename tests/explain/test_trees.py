"""Path-dependent TreeSHAP kernel: METHODS.md §11 tree, shap as reference, grouped players."""

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from sklearn.ensemble import HistGradientBoostingClassifier, RandomForestClassifier
from sklearn.tree import DecisionTreeRegressor

from mlsites.explain import LayerExplainer, flatten_trees, tree_shap
from mlsites.learners import LayerEncoder

shap = pytest.importorskip("shap")


def methods_tree():
    """METHODS.md §11 check values: root x1 <= 0.5 (n 50); left x2 -> 0.0 (22) / 2.0 (12);
    right x2 -> 3.0 (8) / 9.0 (8), built as a real scikit-learn tree from its 50 training rows."""
    X = np.array([[0, 0]] * 22 + [[0, 1]] * 12 + [[1, 0]] * 8 + [[1, 1]] * 8, dtype=float)
    y = np.array([0.0] * 22 + [2.0] * 12 + [3.0] * 8 + [9.0] * 8)
    tree = DecisionTreeRegressor(max_depth=2, random_state=0).fit(X, y)
    # the greedy split picks x1 at the root (variance reduction 305 against 192 for x2)
    assert tree.tree_.feature[0] == 0 and tree.tree_.threshold[0] == 0.5
    return tree, X


@pytest.mark.parametrize("x, phi", [
    ((1, 1), (4.18, 2.42)),           # METHODS.md §11 check values, path-dependent
    ((0, 1), (-1.967059, 1.567059)),
    ((1, 0), (2.82, -2.22)),
])
def test_methods_tree_path_dependent(x, phi):
    tree, _ = methods_tree()
    flat = flatten_trees(tree)
    assert flat.expected_value() == pytest.approx(2.4, abs=1e-12)  # METHODS.md §11: phi0 = 2.4
    got = tree_shap(flat, np.array([x], dtype=float))[0]
    np.testing.assert_allclose(got, phi, atol=1e-6)


def test_methods_tree_interventional_by_permutation_explainer():
    # METHODS.md §11: same tree, background = the 50 training rows, x = (1,1): phi0 2.4, phi (3.88, 2.72).
    # With two layers one antithetic pair covers both orderings, so the values are exact.
    tree, X = methods_tree()
    ex = LayerExplainer(tree, background=X, method="permutation_interventional")
    assert ex.expected_value == pytest.approx(2.4, abs=1e-12)
    np.testing.assert_allclose(ex.shap_values(np.array([[1.0, 1.0]])).to_numpy()[0], (3.88, 2.72), atol=1e-6)


@pytest.fixture(scope="module")
def mixed_data():
    rng = np.random.default_rng(0)
    n = 600
    cat = rng.integers(0, 6, n).astype(float)
    X = np.c_[cat, rng.normal(size=n), rng.normal(size=n)]
    logit = 1.5 * np.isin(cat, [1, 4]) + X[:, 1] * X[:, 2] - 0.5
    y = (rng.random(n) < 1 / (1 + np.exp(-logit))).astype(int)
    return X, y, rng.random(n) + 0.5


def test_forest_matches_shap_tree_explainer(mixed_data):
    X, y, w = mixed_data
    rf = RandomForestClassifier(n_estimators=20, min_samples_leaf=3, random_state=0).fit(X, y, sample_weight=w)
    flat = flatten_trees(rf)
    ours = tree_shap(flat, X[:80])
    ref = shap.TreeExplainer(rf)  # reference: shap's C++ TreeSHAP, path-dependent
    np.testing.assert_allclose(ours, ref.shap_values(X[:80])[:, :, 1], atol=1e-10)
    assert flat.expected_value() == pytest.approx(float(ref.expected_value[1]), abs=1e-10)
    # local accuracy in probability (METHODS.md §11: 1e-6 * max(1, |f|))
    np.testing.assert_allclose(ours.sum(1) + flat.expected_value(), rf.predict_proba(X[:80])[:, 1], atol=1e-6)


def test_boosting_numeric_matches_shap(mixed_data):
    X, y, _ = mixed_data
    m = HistGradientBoostingClassifier(max_iter=30, random_state=0).fit(X[:, 1:], y)
    flat = flatten_trees(m)
    ref = shap.TreeExplainer(m)
    np.testing.assert_allclose(tree_shap(flat, X[:50, 1:]), ref.shap_values(X[:50, 1:]), atol=1e-10)


def test_boosting_categorical_splits_local_accuracy(mixed_data):
    # shap 0.51 reads only the numeric threshold of histogram-boosting nodes, so its values
    # miss categorical splits; ours read the category bitsets and must add up to the log-odds.
    X, y, _ = mixed_data
    m = HistGradientBoostingClassifier(categorical_features=[0], max_iter=30, random_state=0).fit(X, y)
    assert any(p.nodes["is_categorical"].any() for (p,) in m._predictors)
    flat = flatten_trees(m)
    Xt = np.vstack([X[:60], [[np.nan, 0.1, 0.2], [5.0, 0.0, 0.0]]])  # a missing category as well
    raw = m.decision_function(Xt)
    np.testing.assert_allclose(flat.predict_raw(Xt), raw, atol=1e-12)
    phi = tree_shap(flat, Xt)
    np.testing.assert_allclose(phi.sum(1) + flat.expected_value(), raw, atol=1e-6 * max(1, np.abs(raw).max()))


def _brute_path_dependent(flat, x, players, n_players):
    """Slow reference: exact Shapley values of the path-dependent game of players (layers),
    v(S) = tree output following x at splits on players in S, cover-weighted otherwise."""

    def v(node, S):
        if flat.left[node] < 0:
            return flat.value[node]
        col = flat.column[node]
        if players[col] in S:
            go_left = x[col] <= flat.threshold[node]
            return v(flat.left[node] if go_left else flat.right[node], S)
        lc, rc = flat.left[node], flat.right[node]
        return (flat.cover[lc] * v(lc, S) + flat.cover[rc] * v(rc, S)) / flat.cover[node]

    def value(S):
        return sum(v(root, S) for root in flat.roots)

    phi = np.zeros(n_players)
    everyone = range(n_players)
    for i in everyone:
        others = [j for j in everyone if j != i]
        for size in range(len(others) + 1):
            for S in itertools.combinations(others, size):
                weight = math.factorial(size) * math.factorial(n_players - size - 1) / math.factorial(n_players)
                phi[i] += weight * (value(set(S) | {i}) - value(set(S)))
    return phi


def test_onehot_columns_form_one_player(mixed_data):
    # The one-hot columns of a categorical layer are one player: the layer's value equals the
    # brute-force Shapley value of the path-dependent game over layers (an independent algorithm).
    X, y, w = mixed_data
    frame = pd.DataFrame(X, columns=["soil", "a", "b"])
    enc = LayerEncoder(["soil"], encoding="onehot").fit(frame)
    Z = enc.transform(frame)
    rf = RandomForestClassifier(n_estimators=4, max_depth=4, random_state=1).fit(Z, y, sample_weight=w)
    flat = flatten_trees(rf)
    players = np.array([0] * 6 + [1, 2])
    assert set(flat.column[flat.column >= 0]) & set(range(6)), "the forest should split on soil columns"
    ours = tree_shap(flat, Z[:8], players, 3)
    for r in range(8):
        Zr = Z[r].astype(np.float32).astype(np.float64)
        np.testing.assert_allclose(ours[r], _brute_path_dependent(flat, Zr, players, 3), atol=1e-12)


def test_unused_layer_gets_zero():
    # METHODS.md §11: a feature the model never uses gets phi = 0
    rng = np.random.default_rng(3)
    X = rng.normal(size=(300, 3))
    y = (X[:, 0] > 0).astype(float) + 0.1 * rng.normal(size=300)
    tree = DecisionTreeRegressor(max_depth=1).fit(X, y)
    assert tree.tree_.feature[0] == 0
    phi = tree_shap(flatten_trees(tree), X[:50])
    assert np.all(phi[:, 1:] == 0.0) and np.any(phi[:, 0] != 0.0)
