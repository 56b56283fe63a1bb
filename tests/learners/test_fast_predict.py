"""Tests of fast_predictor: site probabilities equal to scikit-learn's predict_proba.

The reference throughout is scikit-learn's own ``predict_proba`` on the same fitted
estimator (the brief's requirement: equal within 1e-6 on every row). The compiled
paths differ from it only in the order in which float64 leaf values are added, so
the tolerance used is 1e-12 (rounding of a sum of at most a few hundred terms),
well inside the requirement. Data are random (invented) feature tables.
"""

import pickle

import numpy as np
import pandas as pd
import pytest
from sklearn.ensemble import ExtraTreesClassifier, HistGradientBoostingClassifier, RandomForestClassifier
from sklearn.neighbors import KNeighborsClassifier

from mlsites.errors import InputError
from mlsites.learners import LayerEncoder, fast_predictor, fit_learner, make_learner
from mlsites.learners._fast_predict import _encode_layers

ATOL = 1e-12  # sum-order rounding only (see module docstring)


def _table(n, seed, *, n_num=4, categories=(4, 3)):
    """Random numeric layers and integer-coded categorical layers, plus a label."""
    rng = np.random.default_rng(seed)
    data = {f"num{j}": rng.normal(size=n) * (j + 1) for j in range(n_num)}
    for k, n_cat in enumerate(categories):
        data[f"cat{k}"] = rng.integers(1, n_cat + 1, size=n).astype(float)
    X = pd.DataFrame(data)
    logit = X["num0"] - 0.5 * X["num1"] + (X.get("cat0", 0) == 2) * 1.5
    y = (logit + rng.logistic(size=n) > 0).astype(int).to_numpy()
    return X, y


def _fitted(name, X, y, categorical, **params):
    model = make_learner(name, random_state=0, categorical_features=categorical, **params)
    # the sampling stage's scale: each site 1, background together as much as the sites
    w = np.where(y == 1, 1.0, y.sum() / max((1 - y).sum(), 1))
    return fit_learner(model, X, y, w)


def _check_equal(model, X, **kw):
    predictor = fast_predictor(model)
    expected = model.predict_proba(X)[:, 1]
    got = predictor.predict_site(X, **kw)
    assert got.dtype == np.float64 and got.shape == (len(X),)
    np.testing.assert_allclose(got, expected, rtol=0, atol=ATOL)
    return predictor, got


@pytest.mark.parametrize("categorical", [(), ("cat0", "cat1")])
@pytest.mark.parametrize("params", [dict(n_estimators=25), dict(n_estimators=20, max_samples=100, min_samples_leaf=3)])
def test_random_forest_preset_equals_predict_proba(categorical, params):
    X, y = _table(600, 1)
    model = _fitted("random_forest", X, y, categorical, **params)
    X_new, _ = _table(3000, 2, categories=(6, 3))  # categories 5 and 6 of cat0 unseen in fit
    predictor, _ = _check_equal(model, X_new)
    assert predictor.kind == "forest"


@pytest.mark.parametrize("categorical", [(), ("cat0", "cat1")])
def test_gradient_boosting_preset_equals_predict_proba(categorical):
    X, y = _table(800, 3)
    model = _fitted("gradient_boosting", X, y, categorical, max_iter=40)
    X_new, _ = _table(3000, 4, categories=(6, 5))  # unseen categories become NaN, the missing side
    predictor, _ = _check_equal(model, X_new)
    assert predictor.kind == "boosting"


def test_forest_values_at_and_beside_every_threshold():
    # scikit-learn casts features to float32 and compares x <= t with t in float64:
    # values at the float32 neighbours of each threshold, and at t itself (rounded
    # by the cast), exercise the float32 threshold of the compiled path.
    X, y = _table(400, 5, categories=())
    model = _fitted("random_forest", X, y, (), n_estimators=15)
    rows = []
    for tree in model[-1].estimators_:
        t = tree.tree_
        for f, thr in zip(t.feature[t.feature >= 0], t.threshold[t.feature >= 0]):
            t32 = np.float32(thr)
            for v in (thr, t32, np.nextafter(t32, np.float32(-np.inf)), np.nextafter(t32, np.float32(np.inf))):
                row = X.iloc[len(rows) % len(X)].to_numpy().copy()
                row[f] = v
                rows.append(row)
    edge = pd.DataFrame(np.array(rows), columns=X.columns)
    _check_equal(model, edge)


def test_boosting_values_at_thresholds_nan_and_odd_categories():
    # A bare HistGradientBoostingClassifier trained with missing values (so nodes
    # send NaN either way) and a native categorical column; inputs at the float64
    # thresholds, NaN, unseen, negative and non-integer category codes.
    rng = np.random.default_rng(6)
    n = 1500
    X = np.column_stack([rng.integers(0, 5, n).astype(float), rng.normal(size=n), rng.normal(size=n)])
    X[rng.random(n) < 0.1, 1] = np.nan
    X[rng.random(n) < 0.05, 0] = np.nan
    y = ((X[:, 0] == 2) | (np.nan_to_num(X[:, 1], nan=1.0) > 0.5)).astype(int)
    model = HistGradientBoostingClassifier(max_iter=30, categorical_features=[0], random_state=0).fit(X, y)
    thresholds = np.concatenate([p[0].nodes["num_threshold"][~p[0].nodes["is_leaf"].astype(bool)]
                                 for p in model._predictors])
    m = thresholds.size
    edge = np.column_stack([rng.integers(0, 5, m).astype(float), thresholds, rng.normal(size=m)])
    odd = np.array([[np.nan, 0.1, 0.2], [7.0, np.nan, 0.0], [-1.0, 0.3, np.nan], [2.5, 0.0, 0.0],
                    [-0.0, 1.0, 1.0], [4.0, np.nan, np.nan], [255.0, 0.2, 0.1]])
    X_new = np.vstack([X, edge, odd])
    predictor, _ = _check_equal(model, X_new)
    assert predictor.kind == "boosting"


@pytest.mark.parametrize("cls", [RandomForestClassifier, ExtraTreesClassifier])
def test_bare_forests_on_arrays(cls):
    X, y = _table(500, 7, categories=())
    model = cls(n_estimators=12, random_state=0).fit(X.to_numpy(), y)
    predictor, _ = _check_equal(model, _table(2000, 8, categories=())[0].to_numpy())
    assert predictor.kind == "forest"


def test_forest_with_missing_values_goes_to_scikit_learn():
    # Forests fitted with NaN route them per node; those rows take scikit-learn's path.
    X, y = _table(500, 9, categories=())
    X = X.to_numpy().copy()
    X[::7, 1] = np.nan
    model = RandomForestClassifier(n_estimators=10, random_state=0).fit(X, y)
    _check_equal(model, X)


@pytest.mark.parametrize("name", ["random_forest", "gradient_boosting"])
def test_any_batch_size_and_thread_count_give_identical_results(name):
    X, y = _table(700, 10)
    model = _fitted(name, X, y, ("cat0", "cat1"), **({"n_estimators": 20} if name == "random_forest"
                                                      else {"max_iter": 30}))
    X_new, _ = _table(4500, 11)
    predictor = fast_predictor(model)
    whole = predictor.predict_site(X_new, n_threads=1)
    assert np.array_equal(predictor.predict_site(X_new, n_threads=2), whole)
    for size in (1, 7, 2049, 4096):
        parts = [predictor.predict_site(X_new.iloc[i:i + size]) for i in range(0, 9000 if size > 1 else 50, size)
                 if i < len(X_new)]
        n = sum(len(p) for p in parts)
        assert np.array_equal(np.concatenate(parts), whole[:n])


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
@pytest.mark.parametrize("name", ["logistic", "fuzzy", "mlp"])
def test_other_learners_use_predict_proba(name):
    X, y = _table(300, 12)
    params = {"max_iter": 50} if name == "mlp" else {}
    model = _fitted(name, X, y, ("cat0", "cat1"), **params)
    predictor = fast_predictor(model)
    assert predictor.kind == "estimator"
    np.testing.assert_array_equal(predictor.predict_site(X), model.predict_proba(X)[:, 1])


def test_plain_estimator_fallback():
    X, y = _table(200, 13, categories=())
    model = KNeighborsClassifier().fit(X, y)
    predictor = fast_predictor(model)
    assert predictor.kind == "estimator"
    np.testing.assert_array_equal(predictor.predict_site(X), model.predict_proba(X)[:, 1])


@pytest.mark.parametrize("name", ["random_forest", "gradient_boosting", "logistic"])
def test_pickle_round_trip(name):
    X, y = _table(300, 14)
    params = {"random_forest": {"n_estimators": 10}, "gradient_boosting": {"max_iter": 20}}.get(name, {})
    model = _fitted(name, X, y, ("cat0",), **params)
    predictor = fast_predictor(model)
    again = pickle.loads(pickle.dumps(predictor))
    assert again.kind == predictor.kind
    np.testing.assert_array_equal(again.predict_site(X), predictor.predict_site(X))


@pytest.mark.parametrize("encoding", ["onehot", "ordinal"])
def test_direct_encoding_equals_layer_encoder(encoding):
    X, y = _table(300, 15)
    encoder = LayerEncoder(["cat1", "cat0"], encoding=encoding).fit(X)
    X_new, _ = _table(500, 16, categories=(7, 2))
    expected = encoder.transform(X_new)
    np.testing.assert_array_equal(_encode_layers(encoder, X_new, np.float64), expected)
    arr = LayerEncoder([4, 5], encoding=encoding).fit(X.to_numpy())
    np.testing.assert_array_equal(_encode_layers(arr, X_new.to_numpy(), np.float64), arr.transform(X_new.to_numpy()))


def test_bad_input_raises_as_the_pipeline_does():
    X, y = _table(300, 17)
    model = _fitted("random_forest", X, y, ("cat0",), n_estimators=5)
    predictor = fast_predictor(model)
    bad = X.copy()
    bad.loc[3, "num2"] = np.nan
    with pytest.raises(InputError, match="'num2' has 1 NaN"):
        model.predict_proba(bad)
    with pytest.raises(InputError, match="'num2' has 1 NaN"):
        predictor.predict_site(bad)
    with pytest.raises(ValueError, match="feature names"):
        predictor.predict_site(X[X.columns[::-1]])
    with pytest.raises(InputError, match="n_threads=0"):
        predictor.predict_site(X, n_threads=0)


def test_unfitted_learner_is_refused():
    with pytest.raises(InputError, match="not fitted"):
        fast_predictor(make_learner("random_forest"))


def test_empty_input():
    X, y = _table(200, 18)
    model = _fitted("gradient_boosting", X, y, ("cat0",), max_iter=5)
    assert fast_predictor(model).predict_site(X.iloc[:0]).shape == (0,)
