"""The explanation stage: files, warnings, bad input, nothing half-written."""

import itertools
import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from mlsites.errors import InputError, InsufficientDataError, OutputExistsError
from mlsites.explain import correlated_layers, explain_learners
from mlsites.explain._plots import LEARNER_COLOURS, LEARNER_MARKERS
from mlsites.learners import fit_learner, make_learner


@pytest.fixture(scope="module")
def study():
    """A fictional sample table: 'roads' drives the records strongly (as survey effort would),
    'slope' is weaker, 'wet' is a copy of 'slope' with a little noise, 'soil' categorical."""
    rng = np.random.default_rng(0)
    n = 900
    roads = rng.gamma(2.0, 200.0, n)
    slope = rng.gamma(2.0, 3.0, n)
    table = pd.DataFrame({
        "sample_id": np.arange(n), "x": rng.uniform(0, 1e4, n), "y": rng.uniform(0, 1e4, n),
        "roads": roads, "wet": slope + rng.normal(0, 0.5, n), "slope": slope,
        "soil": rng.integers(1, 4, n).astype(float),
    })
    logit = 1.5 - roads / 150.0 - 0.05 * table["slope"]
    table["label"] = (rng.random(n) < 1 / (1 + np.exp(-logit))).astype(int)
    table["weight"] = np.where(table["label"] == 1, 1.0, table["label"].sum() / (n - table["label"].sum()))
    table["fold"] = (table["x"] // 2500).astype(int) % 3
    return table


FEATURES = ["roads", "wet", "slope", "soil"]


def _models(table, names=("logistic", "gradient_boosting")):
    X, y, w = table[FEATURES], table["label"].to_numpy(), table["weight"].to_numpy()
    params = {"gradient_boosting": {"max_iter": 30}}
    models, folds = {}, {}
    for name in names:
        make = lambda: make_learner(name, random_state=0, categorical_features=["soil"], **params.get(name, {}))  # noqa: E731
        models[name] = fit_learner(make(), X, y, w)
        folds[name] = []
        for k in range(3):
            train, test = np.flatnonzero(table["fold"] != k), np.flatnonzero(table["fold"] == k)
            est = fit_learner(make(), X.iloc[train], y[train], w[train])
            sites = test[y[test] == 1]
            folds[name].append((est, sites, w[sites], test[y[test] == 0]))
    return models, folds


@pytest.fixture(scope="module")
def fitted(study):
    return _models(study)


def test_stage_writes_every_output(study, fitted, tmp_path):
    models, folds = fitted
    lines = []
    out = tmp_path / "explain"
    result = explain_learners(models, study, features=FEATURES, categorical=["soil"], fold_models=folds,
                              out_dir=out, n_explain=60, n_background=20, n_repeats=2, survey_layers=["roads"],
                              quiet=True, log=lines.append)
    names = {p.name for p in out.iterdir()}
    assert {"importance.csv", "importance.png", "shap_values.csv", "permutation_by_fold.csv",
            "response_curves.csv", "correlated_layers.csv", "explain.json"} <= names
    assert {f"response_{f}.png" for f in FEATURES} <= names
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no staging folder left
    table = pd.read_csv(out / "importance.csv")
    assert len(table) == 2 * len(FEATURES)
    assert set(table["output_space"]) == {"log-odds"}
    shares = table.groupby("learner")["shap_share"].sum()
    np.testing.assert_allclose(shares, 1.0, atol=1e-12)
    # the fictional truth: roads is the strongest driver; it was listed as a survey layer
    assert (table.loc[table["layer"] == "roads", "permutation_rank"] == 1).all()
    assert any("survey_layers" in w and "roads" in w for w in result.warnings)
    assert table.loc[table["layer"] == "roads", "notes"].str.contains("survey-effort layer ranked first").all()
    # slope and wet are near copies: flagged, with the Spearman value
    assert any("wet and slope are strongly correlated" in w for w in result.warnings)
    assert any(line.startswith("warning: ") for line in lines)
    # shared outputs carry no coordinates
    shap_values = pd.read_csv(out / "shap_values.csv")
    assert not {"x", "y", "row", "col"} & set(shap_values.columns)
    settings = json.loads((out / "explain.json").read_text())
    assert settings["per_learner"]["logistic"]["background"].startswith("20 landscape cells")
    assert settings["warnings"] == result.warnings
    assert result.top_layers("gradient_boosting", 2)[0] == "roads"
    with pytest.raises(OutputExistsError):
        explain_learners(models, study, features=FEATURES, out_dir=out, n_explain=10, quiet=True)


def test_without_fold_models_warns_and_leaves_permutation_empty(study, fitted):
    models, _ = fitted
    result = explain_learners({"logistic": models["logistic"]}, study, features=FEATURES, categorical=["soil"],
                              n_explain=30, n_background=10, quiet=True)
    assert result.importance["permutation_mean"].isna().all()
    assert any("no fold models" in w and "needs the models of a cross-validation run" in w
               for w in result.warnings)
    assert result.top_layers("logistic", 1) == [result.importance.sort_values("shap_rank")["layer"].iloc[0]]


def test_bad_input_is_refused_before_writing(study, fitted, tmp_path):
    models, _ = fitted
    n_land = int((study["label"] == 0).sum())
    out = tmp_path / "never"
    with pytest.raises(InsufficientDataError, match=f"holds only {n_land}"):
        explain_learners(models, study, features=FEATURES, out_dir=out, n_explain=n_land + 1, quiet=True)
    with pytest.raises(InputError, match="survey_layers names \\['roadz'\\]"):
        explain_learners(models, study, features=FEATURES, out_dir=out, survey_layers=["roadz"], quiet=True)
    with pytest.raises(InputError, match="not in the sample table"):
        explain_learners(models, study, features=FEATURES + ["rain"], out_dir=out, quiet=True)
    assert list(tmp_path.iterdir()) == []


def test_correlated_layers_match_scipy(study):
    X = study[FEATURES]
    pairs = correlated_layers(X, categorical=["soil"], threshold=0.5)
    for a, b, r in pairs.itertuples(index=False):
        assert r == pytest.approx(stats.spearmanr(X[a], X[b]).statistic, abs=1e-12)  # scipy reference
    assert [tuple(p) for p in pairs[["layer_a", "layer_b"]].to_numpy()] == [("wet", "slope")]
    with pytest.raises(InputError, match="correlation_threshold"):
        correlated_layers(X, threshold=1.2)


def _lab(hex_colour, matrix):
    """CIELAB of an sRGB colour after a linear-RGB colour-vision simulation (D65)."""
    c = np.array([int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])
    rgb = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    rgb = np.clip(np.asarray(matrix) @ rgb, 0, 1)
    xyz = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]]) @ rgb
    f = np.cbrt(xyz / [0.95047, 1.0, 1.08883])
    f = np.where(xyz / [0.95047, 1.0, 1.08883] > 0.008856, f, 7.787 * xyz / [0.95047, 1.0, 1.08883] + 16 / 116)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


@pytest.mark.parametrize("matrix", [
    np.eye(3),
    # Machado, Oliveira & Fernandes (2009) dichromacy matrices, severity 1 (from memory)
    [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216], [-0.003882, -0.048116, 1.051998]],
    [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413], [-0.011820, 0.042940, 0.968881]],
    [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602], [0.004733, 0.691367, 0.303900]],
])
def test_learner_colours_stay_apart_for_colour_blind_readers(matrix):
    # CIELAB distance >= 20 between every pair (common practice: clearly different marks)
    labs = [_lab(c, matrix) for c in LEARNER_COLOURS]
    assert min(np.linalg.norm(a - b) for a, b in itertools.combinations(labs, 2)) >= 20
    assert len(set(LEARNER_MARKERS)) == len(LEARNER_COLOURS)
