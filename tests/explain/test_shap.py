"""Per-layer SHAP values of the learner presets (METHODS.md §11; shap as reference)."""

import pickle

import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.ensemble import RandomForestClassifier
from sklearn.linear_model import LinearRegression

from mlsites.errors import InputError
from mlsites.explain import LayerExplainer, layer_contributions, raw_output
from mlsites.learners import fit_learner, make_learner

shap = pytest.importorskip("shap")


class Product(RegressorMixin, BaseEstimator):
    """f = x1 * x2, the METHODS.md §11 product example."""

    def fit(self, X, y=None):
        self.n_features_in_ = 2
        return self

    def predict(self, X):
        X = np.asarray(X, dtype=float)
        return X[:, 0] * X[:, 1]


def test_methods_product_function():
    # METHODS.md §11: f = x1 x2, x = (3, 2), single baseline (1, 0) -> phi = (2, 4), phi0 = 0
    ex = LayerExplainer(Product().fit(None), background=np.array([[1.0, 0.0]]))
    assert ex.method == "permutation_interventional" and ex.expected_value == 0.0
    np.testing.assert_allclose(ex.shap_values(np.array([[3.0, 2.0]])).to_numpy()[0], (2.0, 4.0), atol=1e-12)


def test_methods_linear_model():
    # METHODS.md §11: f = 1 + 2 x1 + 3 x2 - x3, background (0,1,2),(2,3,0),(4,2,1),(2,2,1),
    # x = (1,4,3) -> phi0 = 10, phi = (-2, 6, -2), f(x) = 12
    grid = np.array([[a, b, c] for a in range(3) for b in range(3) for c in range(3)], dtype=float)
    model = LinearRegression().fit(grid, 1 + grid @ [2.0, 3.0, -1.0])
    bg = np.array([[0, 1, 2], [2, 3, 0], [4, 2, 1], [2, 2, 1]], dtype=float)
    ex = LayerExplainer(model, background=bg)
    assert ex.method == "linear_interventional"
    assert ex.expected_value == pytest.approx(10.0, abs=1e-9)
    np.testing.assert_allclose(ex.shap_values(np.array([[1.0, 4.0, 3.0]])).to_numpy()[0], (-2, 6, -2), atol=1e-9)


@pytest.fixture(scope="module")
def layers():
    rng = np.random.default_rng(0)
    n = 500
    X = pd.DataFrame({
        "soil": rng.integers(1, 5, n).astype(float),
        "slope": rng.gamma(2.0, 3.0, n),
        "wet": rng.normal(size=n),
        "noise": rng.normal(size=n),
    })
    logit = 0.8 * (X["soil"] == 2) - 0.2 * X["slope"] + 1.2 * X["wet"]
    y = (rng.random(n) < 1 / (1 + np.exp(-logit))).to_numpy().astype(int)
    w = np.where(y == 1, 1.0 / max(y.sum(), 1), 1.0 / max((1 - y).sum(), 1))
    return X, y, w


def _fitted(name, layers, **params):
    X, y, w = layers
    return fit_learner(make_learner(name, random_state=0, categorical_features=["soil"], **params), X, y, w)


@pytest.mark.parametrize("name, params, method, space", [
    ("random_forest", {"n_estimators": 30}, "tree_path_dependent", "probability"),
    ("gradient_boosting", {"max_iter": 30}, "tree_path_dependent", "log-odds"),
    ("logistic", {"splines": 4}, "linear_interventional", "log-odds"),
    ("mlp", {"hidden_layer_sizes": (8,), "max_iter": 300}, "permutation_interventional", "probability"),
    ("fuzzy", {}, "permutation_interventional", "membership"),
])
def test_local_accuracy_every_preset(layers, name, params, method, space):
    # METHODS.md §11: |phi0 + sum(phi) - f(x)| <= 1e-6 max(1, |f(x)|) in the raw output space
    X, _, _ = layers
    est = _fitted(name, layers, **params)
    ex = LayerExplainer(est, background=X.iloc[:40], n_permutations=4)
    assert (ex.method, ex.output_space) == (method, space)
    phi = ex.shap_values(X.iloc[100:160])
    assert list(phi.columns) == list(X.columns)
    f = raw_output(est, X.iloc[100:160])
    np.testing.assert_allclose(phi.sum(axis=1) + ex.expected_value, f, atol=1e-6 * max(1.0, np.abs(f).max()))


def test_logistic_equals_shap_linear_explainer_summed(layers):
    # shap.LinearExplainer (interventional) on the encoded columns, summed per layer (one-hot
    # columns, spline terms) is the reference.
    X, _, _ = layers
    est = _fitted("logistic", layers, splines=4)
    bg = X.iloc[:60]
    ours = LayerExplainer(est, background=bg).shap_values(X.iloc[200:240]).to_numpy()
    enc, lr = est.named_steps["encode"], est.named_steps["model"]
    ref = shap.LinearExplainer(lr, enc.transform(bg)).shap_values(enc.transform(X.iloc[200:240]))
    names = enc.get_feature_names_out()
    summed = np.column_stack([ref[:, [n == c or n.startswith(c + "_") for n in names]].sum(axis=1)
                              for c in X.columns])
    np.testing.assert_allclose(ours, summed, atol=1e-10)


def test_onehot_sum_equals_layer_as_one_column(layers):
    # Stated invariant: for a model linear in its columns, the summed one-hot values of a layer
    # equal the interventional value of one column u = beta_class(x) standing for the whole layer:
    # u(x) - mean_b u(b) (closed form of METHODS.md §11, phi_i = beta_i (x_i - mean_b x_i), beta_u = 1).
    X, _, _ = layers
    est = _fitted("logistic", layers)
    enc, lr = est.named_steps["encode"], est.named_steps["model"]
    beta = dict(zip(enc.category_encoder_.categories_[0], lr.coef_[0][:4]))
    u = X["soil"].map(beta).to_numpy()
    bg = X.iloc[:60]
    ours = LayerExplainer(est, background=bg).shap_values(X)["soil"].to_numpy()
    np.testing.assert_allclose(ours, u - u[:60].mean(), atol=1e-12)


def test_permutation_explainer_matches_interventional_tree_shap():
    # Small forest, three layers: all 3! orderings are used, so the values are exact and must equal
    # shap's interventional TreeExplainer with the same background (reference; the two agree to
    # ~1e-8, rounding inside shap's tree code, so the tolerance is 1e-7).
    rng = np.random.default_rng(1)
    X = pd.DataFrame(rng.normal(size=(300, 3)), columns=["a", "b", "c"])
    y = ((X["a"] + X["b"] * X["c"]) > 0).astype(int)
    rf = RandomForestClassifier(n_estimators=10, max_depth=5, random_state=0).fit(X, y)
    bg = X.iloc[:30]
    ours = LayerExplainer(rf, background=bg, method="permutation_interventional").shap_values(X.iloc[50:70])
    ref = shap.TreeExplainer(rf, data=bg, feature_perturbation="interventional").shap_values(X.iloc[50:70])
    np.testing.assert_allclose(ours.to_numpy(), ref[:, :, 1], atol=1e-7)


def test_sampled_permutations_close_to_exact_tree_values():
    # Six layers, 10 antithetic pairs (sampled orderings): within 0.02 (probability) of shap's
    # interventional TreeExplainer on the same background; tolerance from the sampling error of
    # 20 orderings on this forest (mean absolute difference well below it).
    rng = np.random.default_rng(2)
    X = pd.DataFrame(rng.normal(size=(400, 6)), columns=list("abcdef"))
    y = ((X["a"] + X["b"] * X["c"] - 0.5 * X["d"]) > 0).astype(int)
    rf = RandomForestClassifier(n_estimators=10, max_depth=5, random_state=0).fit(X, y)
    bg = X.iloc[:25]
    ours = LayerExplainer(rf, background=bg, method="permutation_interventional").shap_values(X.iloc[50:80])
    ref = shap.TreeExplainer(rf, data=bg, feature_perturbation="interventional").shap_values(X.iloc[50:80])[:, :, 1]
    diff = np.abs(ours.to_numpy() - ref)
    assert diff.max() < 0.05 and diff.mean() < 0.02


def test_unused_layer_zero_in_permutation_explainer():
    # METHODS.md §11: a layer the model never uses gets phi = 0 (x3 is ignored by f = x1 x2)
    class ProductOfTwo(Product):
        def fit(self, X, y=None):
            self.n_features_in_ = 3
            return self

    rng = np.random.default_rng(4)
    ex = LayerExplainer(ProductOfTwo().fit(None), background=rng.normal(size=(20, 3)))
    phi = ex.shap_values(rng.normal(size=(10, 3))).to_numpy()
    # zero up to the rounding of averaging the same outputs in different orders
    np.testing.assert_allclose(phi[:, 2], 0.0, atol=1e-12)
    assert np.all(np.abs(phi[:, :2]) > 1e-6)


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
@pytest.mark.parametrize("name", ["random_forest", "mlp"])
def test_windows_pickling_and_selection(layers, name):
    # Contribution maps call the explainer per window in worker processes: a row's values must
    # not depend on the window it comes in, and a pickled explainer gives the same values.
    X, _, _ = layers
    est = _fitted(name, layers, **({"n_estimators": 10} if name == "random_forest" else {"max_iter": 100}))
    ex = LayerExplainer(est, background=X.iloc[:20], n_permutations=3, random_state=5)
    rows = X.iloc[300:330]
    whole = layer_contributions(ex, rows)
    parts = np.vstack([layer_contributions(ex, rows.iloc[:7]), layer_contributions(ex, rows.iloc[7:])])
    # equal up to the last bits BLAS may round differently for other batch sizes
    np.testing.assert_allclose(whole, parts, rtol=0, atol=1e-12)
    copy = pickle.loads(pickle.dumps(ex))
    np.testing.assert_array_equal(layer_contributions(copy, rows, ["wet", "soil"]), whole[:, [2, 0]])
    with pytest.raises(InputError, match="not features"):
        layer_contributions(ex, rows, ["roads"])


def test_bad_input(layers):
    X, _, _ = layers
    est = _fitted("logistic", layers)
    with pytest.raises(InputError, match="needs background rows"):
        LayerExplainer(est)
    ex = LayerExplainer(est, background=X.iloc[:10])
    with pytest.raises(InputError, match="lacks layer column"):
        ex.shap_values(X.drop(columns="wet"))
    with pytest.raises(InputError, match="n_permutations"):
        LayerExplainer(est, background=X.iloc[:10], n_permutations=0)
