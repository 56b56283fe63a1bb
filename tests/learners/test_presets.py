"""Tests of the learner presets, LayerEncoder and fit_learner.

References are scikit-learn estimators assembled by hand in this module (encoders,
scalers and the final estimator fitted step by step), so each preset is checked
against the library it builds on. Exact equality is required where the same
float64 operations run in the same order; 1e-6 (absolute, on probabilities) where an
iterative solver stops at its own tolerance.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
import sklearn
from sklearn.ensemble import HistGradientBoostingClassifier, RandomForestClassifier
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LogisticRegression
from sklearn.neighbors import KNeighborsClassifier
from sklearn.neural_network import MLPClassifier
from sklearn.preprocessing import (
    OneHotEncoder,
    OrdinalEncoder,
    SplineTransformer,
    StandardScaler,
)
from sklearn.utils.estimator_checks import parametrize_with_checks

from mlsites.errors import InputError
from mlsites.learners import (
    LEARNERS,
    FuzzySuitability,
    LayerEncoder,
    MeanLossLogisticRegression,
    fit_learner,
    make_learner,
)
from mlsites.learners._presets import DEFAULT_PENALTY_STRENGTH
from mlsites.sampling import sample_weights

# small settings so the whole module runs in seconds
FAST = {
    "random_forest": {"n_estimators": 15},
    "logistic": {},
    "mlp": {"max_iter": 60},
    "gradient_boosting": {"max_iter": 15},
    "fuzzy": {},
}

pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


@pytest.fixture
def global_random_seed():
    return 20240611


@pytest.fixture
def table(global_random_seed):
    """Invented presence-background table: two numeric layers and one categorical."""
    rng = np.random.default_rng(global_random_seed)
    n = 150
    frame = pd.DataFrame(
        {
            "elevation": rng.normal(250.0, 40.0, n),
            "landform": rng.choice(["ridge", "slope", "valley", "plain"], n),
            "water_distance": rng.gamma(2.0, 150.0, n),
        }
    )
    score = (frame["elevation"] - 250) / 40 - frame["water_distance"] / 300
    score += np.where(frame["landform"] == "ridge", 1.0, 0.0)
    y = (rng.random(n) < 1 / (1 + np.exp(-2 * score.to_numpy()))).astype(int)
    # balanced weighting, METHODS.md §7: total background weight = total site weight
    w = np.where(y == 1, 1.0, y.sum() / (n - y.sum()))
    probe = frame.iloc[:20].copy()
    return frame, y, w, probe


def _make(name, seed=0, **extra):
    return make_learner(
        name, random_state=seed, categorical_features=["landform"], **{**FAST[name], **extra}
    )


def _split_reference(frame, rows, encoder):
    """Hand-built layout of the encoder: categorical block first, then numeric."""
    cat = frame[["landform"]].to_numpy(dtype=object)
    num = frame[["elevation", "water_distance"]].to_numpy(dtype=float)
    encoder.fit(cat[rows])
    return lambda f: np.hstack(
        [encoder.transform(f[["landform"]].to_numpy(dtype=object)),
         f[["elevation", "water_distance"]].to_numpy(dtype=float)]
    ), num


# -- every preset ------------------------------------------------------------------


def test_registry_names():
    assert sorted(LEARNERS) == sorted(FAST)


@pytest.mark.parametrize("name", sorted(FAST))
def test_fit_predict_shape_range_and_seed(name, table):
    frame, y, w, probe = table
    first = fit_learner(_make(name), frame, y, w)
    second = fit_learner(_make(name), frame, y, w)
    proba = first.predict_proba(probe)
    assert proba.shape == (len(probe), 2)
    assert np.all((proba >= 0) & (proba <= 1))
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(first[-1].classes_, [0, 1])
    # same seed -> identical output
    np.testing.assert_array_equal(proba, second.predict_proba(probe))
    assert first.steps[-1][0] == "model"


@pytest.mark.parametrize("name", ["random_forest", "mlp"])
def test_different_seeds_differ(name, table):
    # guards the seed test above against learners that ignore random_state
    frame, y, w, probe = table
    a = fit_learner(_make(name, seed=0), frame, y, w).predict_proba(probe)
    b = fit_learner(_make(name, seed=1), frame, y, w).predict_proba(probe)
    assert not np.array_equal(a, b)


@pytest.mark.parametrize("name", sorted(FAST))
def test_unknown_category_at_predict(name, table):
    frame, y, w, probe = table
    model = fit_learner(_make(name), frame, y, w)
    unseen = probe.copy()
    unseen["landform"] = "moraine"
    proba = model.predict_proba(unseen)
    assert np.all(np.isfinite(proba)) and np.all((proba >= 0) & (proba <= 1))
    if name == "fuzzy":
        # no site lies in an unseen category: its membership is the floor
        mu = model[-1].predict_memberships(unseen)
        np.testing.assert_array_equal(mu[:, 1], model[-1].membership_floor)


@pytest.mark.parametrize("name", sorted(FAST))
def test_dataframe_and_array_give_same_predictions(name, table):
    frame, y, w, probe = table
    by_name = fit_learner(_make(name), frame, y, w)
    by_index = make_learner(name, random_state=0, categorical_features=[1], **FAST[name])
    fit_learner(by_index, frame.to_numpy(dtype=object), y, w)
    np.testing.assert_array_equal(
        by_name.predict_proba(probe), by_index.predict_proba(probe.to_numpy(dtype=object))
    )


@pytest.mark.parametrize("name", sorted(FAST))
def test_numeric_only_input(name, table):
    frame, y, w, probe = table
    X = frame[["elevation", "water_distance"]].to_numpy()
    model = make_learner(name, random_state=0, **FAST[name])
    proba = fit_learner(model, X, y, w).predict_proba(X[:5])
    assert proba.shape == (5, 2)


# -- sample weights reach the model --------------------------------------------------


def test_logistic_zero_weights_equal_dropping_rows(table):
    # reference: scikit-learn's OneHotEncoder + StandardScaler + LogisticRegression on
    # the rows with positive weight
    frame, y, _, probe = table
    w = np.ones(len(y))
    w[:40] = 0.0
    keep = w > 0
    model = _make("logistic", tol=1e-10, max_iter=10_000)
    fit_learner(model, frame, y, w)
    layout, num = _split_reference(
        frame, keep, OneHotEncoder(handle_unknown="ignore", sparse_output=False)
    )
    scaler = StandardScaler().fit(num[keep])
    n_cat = 4

    def design(f):
        Z = layout(f)
        Z[:, n_cat:] = scaler.transform(Z[:, n_cat:])
        return Z

    # the preset's penalty is lambda on the mean loss: C = 1 / (lambda * sum of weights)
    C = 1.0 / (DEFAULT_PENALTY_STRENGTH * keep.sum())
    ref = LogisticRegression(C=C, tol=1e-10, max_iter=10_000).fit(design(frame)[keep], y[keep])
    np.testing.assert_allclose(
        model.predict_proba(probe), ref.predict_proba(design(probe)), rtol=0, atol=1e-6
    )
    # the weights matter: an unweighted fit differs
    plain = fit_learner(_make("logistic", tol=1e-10, max_iter=10_000), frame, y)
    assert not np.allclose(plain.predict_proba(probe), model.predict_proba(probe), atol=1e-3)


def test_logistic_splines_match_reference(table):
    # reference: StandardScaler -> SplineTransformer (5 knots, cubic, no bias column)
    # -> LogisticRegression, each fitted on the positive-weight rows
    frame, y, _, probe = table
    X = frame[["elevation", "water_distance"]].to_numpy()
    w = np.ones(len(y))
    w[::3] = 0.0
    keep = w > 0
    model = make_learner("logistic", splines=5, tol=1e-10, max_iter=10_000)
    fit_learner(model, X, y, w)
    scaler = StandardScaler().fit(X[keep])
    spline = SplineTransformer(n_knots=5, degree=3, include_bias=False).fit(
        scaler.transform(X[keep])
    )
    ref = LogisticRegression(C=1.0 / (DEFAULT_PENALTY_STRENGTH * keep.sum()), tol=1e-10,
                             max_iter=10_000).fit(spline.transform(scaler.transform(X[keep])), y[keep])
    Xp = probe[["elevation", "water_distance"]].to_numpy()
    np.testing.assert_allclose(
        model.predict_proba(Xp),
        ref.predict_proba(spline.transform(scaler.transform(Xp))),
        rtol=0,
        atol=1e-6,
    )
    # scikit-learn SplineTransformer docs: n_knots + degree - 1 basis functions per
    # layer, one fewer without the bias column
    assert model[0].get_feature_names_out().size == 2 * (5 + 3 - 1 - 1)


@pytest.mark.parametrize("name", ["random_forest", "gradient_boosting", "mlp"])
def test_weights_reach_the_final_estimator(name, table):
    # reference: the same scikit-learn estimator fitted by hand on the same design
    # matrix with the same weights and seed must give identical probabilities
    frame, y, w, probe = table
    rng = np.random.default_rng(3)
    w = w * rng.uniform(0.5, 2.0, len(w))
    model = fit_learner(_make(name), frame, y, w)
    if name == "gradient_boosting":
        layout, _ = _split_reference(
            frame,
            slice(None),
            OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=np.nan),
        )
        ref = HistGradientBoostingClassifier(
            max_iter=15, max_leaf_nodes=15, early_stopping=False, categorical_features=[0],
            random_state=0,
        )
        design = layout
    else:
        layout, num = _split_reference(
            frame, slice(None), OneHotEncoder(handle_unknown="ignore", sparse_output=False)
        )
        if name == "random_forest":
            ref = RandomForestClassifier(n_estimators=15, max_samples=1.0, random_state=0)  # the preset
            design = layout
        else:
            scaler = StandardScaler().fit(num, sample_weight=w)

            def design(f):
                Z = layout(f)
                Z[:, 4:] = scaler.transform(Z[:, 4:])
                return Z

            ref = MLPClassifier(
                hidden_layer_sizes=(32, 16), alpha=1e-3, max_iter=60, random_state=0
            )
    ref.fit(design(frame), y, sample_weight=w)
    expected = ref.predict_proba(design(probe))
    np.testing.assert_allclose(model.predict_proba(probe), expected, rtol=1e-12, atol=1e-12)
    # and an unweighted fit differs, so the comparison above can fail
    plain = fit_learner(_make(name), frame, y)
    assert not np.allclose(plain.predict_proba(probe), expected)


def test_fuzzy_preset_weights_match_estimator(table):
    frame, y, w, probe = table
    w = w * np.linspace(0.1, 2.0, len(w))
    model = fit_learner(_make("fuzzy"), frame, y, w)
    ref = FuzzySuitability(categorical_features=["landform"])
    ref.fit(frame, y, sample_weight=w)
    np.testing.assert_array_equal(model.predict_proba(probe), ref.predict_proba(probe))


def test_random_forest_n_jobs_does_not_change_output(table):
    frame, y, w, probe = table
    one = fit_learner(_make("random_forest"), frame, y, w).predict_proba(probe)
    two = make_learner(
        "random_forest", random_state=0, categorical_features=["landform"], n_jobs=2,
        n_estimators=15,
    )
    np.testing.assert_array_equal(one, fit_learner(two, frame, y, w).predict_proba(probe))


def test_gradient_boosting_marks_categorical_columns(table):
    frame, y, w, _ = table
    model = fit_learner(_make("gradient_boosting"), frame, y, w)
    np.testing.assert_array_equal(model[-1].is_categorical_, [True, False, False])


def test_metadata_routing_gives_same_fit(table):
    frame, y, w, probe = table
    w = w * np.linspace(0.5, 1.5, len(w))
    expected = fit_learner(_make("logistic"), frame, y, w).predict_proba(probe)
    with sklearn.config_context(enable_metadata_routing=True):
        routed = fit_learner(_make("logistic"), frame, y, w).predict_proba(probe)
    np.testing.assert_array_equal(routed, expected)


def test_fit_learner_on_plain_estimators(table):
    frame, y, w, _ = table
    X = frame[["elevation", "water_distance"]].to_numpy()
    fitted = fit_learner(LogisticRegression(), X, y, w)
    ref = LogisticRegression().fit(X, y, sample_weight=w)
    np.testing.assert_array_equal(fitted.coef_, ref.coef_)
    with pytest.raises(InputError, match="KNeighborsClassifier does not accept sample_weight"):
        fit_learner(KNeighborsClassifier(), X, y, w)
    fit_learner(KNeighborsClassifier(), X, y)  # no weights: fine


@pytest.mark.parametrize(
    "weights, match",
    [
        (np.ones(5), r"shape \(5,\); expected \(150,\)"),
        (-np.ones(150), "negative or non-finite"),
        (np.zeros(150), "All sample weights are zero"),
    ],
)
def test_fit_learner_rejects_bad_weights(weights, match, table):
    frame, y, _, _ = table
    with pytest.raises(InputError, match=match):
        fit_learner(_make("logistic"), frame, y, weights)


# -- the logistic penalty does not depend on the study size ------------------------


def _glmnet_reference(Z, y, w, lam):
    """Minimise (1/sum w) sum w logloss + lam/2 ||beta||^2 (intercept unpenalised) with scipy."""
    from scipy.optimize import minimize
    from scipy.special import expit, log_expit

    def objective(theta):
        eta = theta[0] + Z @ theta[1:]
        loss = -(y * log_expit(eta) + (1 - y) * log_expit(-eta))
        grad_eta = (expit(eta) - y) * w / w.sum()
        value = (w * loss).sum() / w.sum() + 0.5 * lam * theta[1:] @ theta[1:]
        grad = np.concatenate(([grad_eta.sum()], Z.T @ grad_eta + lam * theta[1:]))
        return value, grad

    res = minimize(objective, np.zeros(Z.shape[1] + 1), jac=True, method="BFGS",
                   options={"gtol": 1e-12, "maxiter": 10_000})
    return res.x


@pytest.mark.parametrize("lam", [1e-3, 0.05])
def test_mean_loss_logistic_matches_glmnet_objective(lam, table):
    # reference: the penalised objective of Friedman, Hastie & Tibshirani (2010,
    # J. Stat. Softw. 33(1), eq. 1 with alpha = 0), minimised directly by scipy BFGS
    frame, y, w, _ = table
    Z = StandardScaler().fit_transform(frame[["elevation", "water_distance"]].to_numpy())
    w = w * np.linspace(0.5, 1.5, len(w))
    model = MeanLossLogisticRegression(penalty_strength=lam, tol=1e-12, max_iter=10_000).fit(Z, y, w)
    theta = _glmnet_reference(Z, y.astype(float), w, lam)
    np.testing.assert_allclose(model.intercept_, theta[:1], rtol=0, atol=1e-6)
    np.testing.assert_allclose(model.coef_[0], theta[1:], rtol=0, atol=1e-6)
    assert model.C_ == pytest.approx(1.0 / (lam * w.sum()), rel=1e-12)


def _study(rng, prefix):
    """Invented presence-background table with multi-cell sites and one categorical layer."""
    n_sites = 25
    cells = rng.integers(1, 6, n_sites)
    site_id = np.repeat([f"{prefix}{i}" for i in range(n_sites)], cells)
    n_bg = 240
    n = site_id.size + n_bg
    label = np.r_[np.ones(site_id.size, int), np.zeros(n_bg, int)]
    frame = pd.DataFrame({
        "elevation": rng.normal(250.0, 40.0, n) + 30.0 * label,
        "landform": rng.choice(["ridge", "slope", "valley"], n),
        "water_distance": rng.gamma(2.0, 150.0, n) * np.where(label == 1, 0.6, 1.0),
    })
    return frame, label, np.r_[site_id, np.full(n_bg, "", dtype=object)]


def test_logistic_fit_unchanged_when_the_study_is_duplicated(global_random_seed):
    # Issue 7: the same sites twice (ids renamed) and the background twice must give the
    # same fit; the reference is the fit on the single study (tol 1e-6: two lbfgs runs
    # on different data, each converged to 1e-12).
    rng = np.random.default_rng(global_random_seed)
    frame, label, site_id = _study(rng, "s")
    double = pd.concat([frame, frame], ignore_index=True)
    label2 = np.r_[label, label]
    site_id2 = np.r_[site_id, np.where(label == 1, np.char.add("copy_", site_id.astype(str)), "")]
    w1, w2 = sample_weights(label, site_id), sample_weights(label2, site_id2)
    settings = dict(random_state=0, categorical_features=["landform"], tol=1e-12, max_iter=10_000)
    one = fit_learner(make_learner("logistic", **settings), frame, label, w1)
    two = fit_learner(make_learner("logistic", **settings), double, label2, w2)
    np.testing.assert_allclose(two[-1].coef_, one[-1].coef_, rtol=0, atol=1e-6)
    np.testing.assert_allclose(two[-1].intercept_, one[-1].intercept_, rtol=0, atol=1e-6)
    probe = frame.iloc[::7]
    np.testing.assert_allclose(two.predict_proba(probe), one.predict_proba(probe), rtol=0, atol=1e-6)
    # the comparison can fail: a penalty on the summed loss (scikit-learn's C = 1 on
    # the same weights) shrinks the single study more than the double one
    fixed = dict(C=1.0, tol=1e-12, max_iter=10_000)
    enc = LayerEncoder(["landform"], scale=True)
    a = LogisticRegression(**fixed).fit(enc.fit_transform(frame, sample_weight=w1), label, sample_weight=w1)
    b = LogisticRegression(**fixed).fit(enc.fit_transform(double, sample_weight=w2), label2, sample_weight=w2)
    assert np.abs(a.coef_ - b.coef_).max() > 1e-4


# -- make_learner options and errors -------------------------------------------------


@pytest.mark.parametrize(
    "name, kwargs, match",
    [
        ("boosted_forest", {}, "Unknown learner 'boosted_forest'; choose one of"),
        ("random_forest", {"n_trees": 3}, "unknown parameter"),
        ("mlp", {"splines": 4}, "unknown parameter"),
        ("logistic", {"splines": 1}, "splines must be 0"),
        ("logistic", {"categorical_features": [-1]}, "negative column index"),
        ("logistic", {"C": 1.0}, "takes penalty_strength, not C"),
        ("logistic", {"penalty_strength": -1.0, "categorical_features": ["landform"]},
         "penalty_strength must be a number >= 0"),
    ],
)
def test_make_learner_errors(name, kwargs, match, table):
    frame, y, w, _ = table
    with pytest.raises(InputError, match=match):
        fit_learner(make_learner(name, **kwargs), frame, y, w)


def test_missing_values_are_reported_by_column(table):
    frame, y, w, _ = table
    broken = frame.copy()
    broken.loc[[3, 8], "water_distance"] = np.nan
    with pytest.raises(InputError, match="'water_distance' has 2 NaN or infinite"):
        fit_learner(_make("random_forest"), broken, y, w)
    broken = frame.copy()
    broken.loc[5, "landform"] = None
    with pytest.raises(InputError, match="'landform' has 1 missing"):
        fit_learner(_make("gradient_boosting"), broken, y, w)


def test_categorical_names_need_a_dataframe(table):
    frame, y, w, _ = table
    with pytest.raises(InputError, match="no column names"):
        fit_learner(_make("logistic"), frame.to_numpy(dtype=object), y, w)


# -- LayerEncoder --------------------------------------------------------------------


def test_encoder_layout_and_zero_weights(table):
    # reference: OneHotEncoder and a StandardScaler fitted on the positive-weight rows
    frame, _, _, probe = table
    w = np.ones(len(frame))
    w[:50] = 0.0
    enc = LayerEncoder(["landform"], scale=True).fit(frame, sample_weight=w)
    layout, num = _split_reference(
        frame, w > 0, OneHotEncoder(handle_unknown="ignore", sparse_output=False)
    )
    scaler = StandardScaler().fit(num[w > 0])
    expected = layout(probe)
    expected[:, 4:] = scaler.transform(expected[:, 4:])
    np.testing.assert_allclose(enc.transform(probe), expected, rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(
        enc.get_feature_names_out(),
        ["landform_plain", "landform_ridge", "landform_slope", "landform_valley",
         "elevation", "water_distance"],
    )


@parametrize_with_checks(
    [
        LayerEncoder(),
        LayerEncoder(scale=True, splines=4),
        LayerEncoder([0], encoding="ordinal"),
    ]
)
def test_encoder_sklearn_compatible(estimator, check):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        check(estimator)


@parametrize_with_checks([MeanLossLogisticRegression()])
def test_mean_loss_logistic_sklearn_compatible(estimator, check):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        check(estimator)
