"""Response curves equal scikit-learn's partial dependence on the same grid."""

import numpy as np
import pandas as pd
import pytest
from sklearn.inspection import partial_dependence

from mlsites.explain import response_curves, response_grid
from mlsites.learners import fit_learner, make_learner


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(0)
    n = 400
    X = pd.DataFrame({"soil": rng.integers(1, 5, n).astype(float), "slope": rng.gamma(2.0, 3.0, n),
                      "wet": rng.normal(size=n)})
    y = (rng.random(n) < 1 / (1 + np.exp(-(X["wet"] - 0.1 * X["slope"] + (X["soil"] == 3))))).astype(int)
    return X, y.to_numpy()


@pytest.mark.parametrize("name, params", [
    ("random_forest", {"n_estimators": 20}),
    ("gradient_boosting", {"max_iter": 20}),
    ("logistic", {"splines": 3}),
    ("fuzzy", {}),
])
def test_equals_sklearn_partial_dependence(data, name, params):
    X, y = data
    est = fit_learner(make_learner(name, random_state=0, categorical_features=["soil"], **params), X, y)
    rows = X.iloc[:120]
    curves = response_curves({name: est}, rows, categorical=["soil"], n_grid=7, n_ice=120)
    for layer in X.columns:
        grid = response_grid(rows[layer], categorical=layer == "soil", n_grid=7)
        # reference: scikit-learn's brute-force partial dependence on the same grid
        ref = partial_dependence(est, rows, [layer], custom_values={layer: grid}, kind="both", method="brute",
                                 response_method="predict_proba")
        got = curves[curves["layer"] == layer]
        avg = got[got["curve"] == "average"]
        np.testing.assert_allclose(avg["x"], grid)
        np.testing.assert_allclose(avg["score"], ref["average"][0], atol=1e-12)
        ice = got[got["curve"] == "individual"].pivot(index="row", columns="x", values="score").to_numpy()
        np.testing.assert_allclose(ice, ref["individual"][0], atol=1e-12)


def test_grid_in_layer_units():
    values = np.arange(1000, dtype=float)
    grid = response_grid(values, n_grid=5)
    # numpy percentiles 2.5 and 97.5 of 0..999 ("linear" method) are 24.975 and 974.025
    np.testing.assert_allclose(grid, np.linspace(24.975, 974.025, 5))
    np.testing.assert_array_equal(response_grid([3.0, 1.0, 3.0, 2.0], categorical=True), [1.0, 2.0, 3.0])
    np.testing.assert_array_equal(response_grid([0.5, 0.25, 0.5], n_grid=5), [0.25, 0.5])
