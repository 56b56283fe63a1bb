"""The explanation stage inside a run: explain/ files, card weights, maps, contribution rasters.

One small run of the fictional mapping study (tests/mapping/study.py data: 120 x
120 cells of 10 m, invented sites) with two learners and small [explain] sizes,
shared by the tests of this module.
"""

import json

import numpy as np
import pandas as pd
import pytest
import rasterio
from sklearn.metrics import roc_auc_score

from mlsites.errors import ConfigError
from mlsites.experiment import load_experiment, run_experiment
from tests.mapping.study import write_study_experiment

EXPLAIN = """
[explain]
n_explain = 40
n_background = 20
n_repeats = 2
n_grid = 6
n_ice = 5
contribution_max_cells = {cells}
survey_layers = {survey}
"""
FEATURES = ["slope", "northness", "tpi_50m", "stream_distance", "soil"]
#: 120 x 120 map cells capped at 3600: 2 x 2 map cells per contribution cell, 60 x 60.
MAX_CELLS = 3600


def _experiment(folder, data, *, cells=MAX_CELLS, survey=FEATURES, use=("logistic", "random_forest"), extra=""):
    path = write_study_experiment(folder, data, maps="best", use=use)
    path.write_text(path.read_text() + EXPLAIN.format(cells=cells, survey=json.dumps(list(survey))) + extra)
    return path


@pytest.fixture(scope="module")
def explained_run(tmp_path_factory, study_data):
    folder = tmp_path_factory.mktemp("explain_run")
    return run_experiment(_experiment(folder, study_data), quiet=True, n_jobs=2)


def _card(run, learner):
    return json.loads((run.models_dir / f"{learner}.card.json").read_text())


def test_the_run_writes_the_explain_files(explained_run):
    run_dir = explained_run.run_dir
    for name in ["importance.csv", "importance.png", "correlated_layers.csv", "explain.json",
                 "contributions/contributions.json"] + [f"response_{f}.png" for f in FEATURES]:
        assert (run_dir / "explain" / name).is_file(), name
    table = pd.read_csv(run_dir / "explain" / "importance.csv")
    assert set(table["learner"]) == {"logistic", "random_forest"}
    assert set(table["layer"]) == set(FEATURES)
    stages = explained_run.manifest["stages"]
    assert set(stages["explain"]["learners"]) == {"logistic", "random_forest"}
    assert stages["contributions"]["learner"] == explained_run.summary["learner"].iloc[0]


def test_a_survey_layer_ranked_first_is_warned_about_in_the_log(explained_run):
    # every feature is named a survey layer, so whichever ranks first must be warned about
    log = (explained_run.run_dir / "run.log").read_text()
    explain = json.loads((explained_run.run_dir / "explain" / "explain.json").read_text())
    assert any("survey_layers" in w for w in explain["warnings"])
    assert "warning: logistic: the top layer by" in log
    assert explained_run.manifest["stages"]["explain"]["n_warnings"] == len(explain["warnings"])


def test_fold_rows_are_the_rows_the_crossvalidation_scored(explained_run):
    """Each saved fold model scores our held-out rows to the AUC the run reported
    (checked with scikit-learn's roc_auc_score, site cells weighted)."""
    from mlsites.experiment._models import load_fold_models, load_model
    from mlsites.explain._in_run import heldout_fold_rows

    table = pd.read_parquet(explained_run.run_dir / "samples" / "samples.parquet")
    by_fold = pd.read_csv(explained_run.run_dir / "metrics_by_fold.csv")
    rows = heldout_fold_rows(table)
    saved = load_model(explained_run.models_dir / "logistic.card.json")
    features = saved.card["features"]
    for k, (est, (sites, w, land)) in enumerate(zip(load_fold_models(saved), rows)):
        held = np.concatenate((sites, land))
        scores = est.predict_proba(table[features].iloc[held])[:, 1]
        y = np.r_[np.ones(sites.size), np.zeros(land.size)]
        auc = roc_auc_score(y, scores, sample_weight=np.r_[w, np.ones(land.size)])
        row = by_fold[(by_fold["learner"] == "logistic") & (by_fold["fold"] == str(k))].iloc[0]
        assert auc == pytest.approx(row["auc"], abs=1e-9)
        assert land.size == row["n_test_background"]


def test_cards_carry_the_heldout_importance_and_the_maps_use_it(explained_run):
    run_dir = explained_run.run_dir
    table = pd.read_csv(run_dir / "explain" / "importance.csv")
    for learner in ("logistic", "random_forest"):
        pi = table[table["learner"] == learner].set_index("layer")["permutation_mean"]
        # METHODS.md section 8: negative importances count as 0; the index ignores a common scale
        expected = pi.clip(lower=0) / pi.clip(lower=0).sum()
        card = _card(explained_run, learner)
        got = pd.Series(card["applicability_weights"])
        np.testing.assert_allclose(got[expected.index], expected, rtol=1e-8)
        assert "permutation importance" in card["applicability_weights_source"]
    best = explained_run.summary["learner"].iloc[0]
    summary = json.loads((run_dir / "maps" / best / "map.json").read_text())["applicability"]
    assert summary["weights"] == "held-out permutation importance"
    layer_w = pd.Series(summary["layer_weights"])
    card_w = pd.Series(_card(explained_run, best)["applicability_weights"])
    np.testing.assert_allclose(layer_w[card_w.index] / layer_w.sum(), card_w, rtol=1e-9)


def test_the_model_file_still_matches_its_card(explained_run):
    from mlsites.experiment._models import load_fold_models, load_model

    for learner in ("logistic", "random_forest"):
        saved = load_model(explained_run.models_dir / f"{learner}.card.json")
        assert len(load_fold_models(saved)) == 4


def _rasters(folder, layers):
    out = {}
    for layer in layers:
        with rasterio.open(folder / f"{layer}.tif") as src:
            assert src.profile["tiled"] and src.compression is not None
            assert np.isnan(src.nodata)
            # the project's writer (it builds overviews only for grids above about 256 cells a side)
            assert src.tags()["software"].startswith("mlsites")
            out[layer] = src.read(1)
            transform, crs = src.transform, src.crs
    return out, transform, crs


def _one_array(card, grid):
    """Every feature of every cell of ``grid``, read in one go (no windows)."""
    from mlsites.grid import read_array

    layers = {f["name"]: f for f in card["feature_layers"]}
    stack = np.stack([read_array(layers[f]["path"], grid, kind=layers[f].get("kind", "continuous"),
                                 dtype=np.float64) for f in card["features"]], axis=-1).reshape(-1, len(card["features"]))
    return stack, np.isfinite(stack).all(axis=1)


def test_contribution_rasters_equal_contributions_computed_in_one_array(explained_run, study_data):
    from mlsites.experiment._models import load_model
    from mlsites.explain import explain_learners, layer_contributions
    from mlsites.grid import GridSpec

    run_dir = explained_run.run_dir
    folder = run_dir / "explain" / "contributions"
    info = json.loads((folder / "contributions.json").read_text())
    best = info["learner"]
    assert info["factor"] == 2 and info["grid"] == [60, 60] and "2 x 2 map cells" in info["resolution"]
    assert info["cells"]["grid"] <= MAX_CELLS
    arrays, transform, crs = _rasters(folder, info["layers"])
    card = _card(explained_run, best)
    grid = GridSpec(crs, transform, 60, 60)
    stack, ok = _one_array(card, grid)
    assert info["cells"]["explained"] == int(ok.sum())
    # the same explainer again: same models, table, settings and seed
    exp = load_experiment(explained_run.manifest["experiment_file"])
    table = pd.read_parquet(run_dir / "samples" / "samples.parquet")
    models = {n: load_model(explained_run.models_dir / f"{n}.card.json").estimator
              for n in explained_run.summary["learner"]}
    ex = exp["explain"]
    again = explain_learners(models, table, features=card["features"], categorical=card["categorical"],
                             n_explain=ex["n_explain"], n_background=ex["n_background"], n_grid=ex["n_grid"],
                             n_ice=ex["n_ice"], random_state=exp["study"]["seed"], quiet=True)
    values = layer_contributions(again.explainers[best], pd.DataFrame(stack[ok], columns=card["features"]),
                                 info["layers"])
    for k, layer in enumerate(info["layers"]):
        flat = arrays[layer].ravel()
        assert np.isnan(flat[~ok]).all()
        np.testing.assert_array_max_ulp(flat[ok], values[:, k].astype(np.float32), maxulp=1)


def test_linear_contributions_of_all_layers_add_up_to_the_raw_output(explained_run, tmp_path):
    """Local accuracy (Lundberg & Lee 2017): expected value plus the contributions of
    every layer equal the logistic model's log-odds in each contribution cell."""
    from mlsites.experiment._models import load_model
    from mlsites.explain import LayerExplainer, raw_output
    from mlsites.explain._in_run import write_contribution_maps
    from mlsites.grid import GridSpec
    from mlsites.mapping._features import resolve_features

    saved = load_model(explained_run.models_dir / "logistic.card.json")
    card = saved.card
    table = pd.read_parquet(explained_run.run_dir / "samples" / "samples.parquet")
    background = table.loc[table["label"] == 0, card["features"]].iloc[:30]
    explainer = LayerExplainer(saved.estimator, background=background)
    assert explainer.method == "linear_interventional"
    source = resolve_features(card, saved.card_path)
    info = write_contribution_maps(explainer, card["features"], source, tmp_path / "c", features=card["features"],
                                   max_cells=1000, learner="logistic", block_rows=7, block_cols=9)
    assert info["units"] == "log-odds"
    arrays, transform, crs = _rasters(tmp_path / "c", card["features"])
    h, w = info["grid"]
    assert h * w <= 1000
    stack, ok = _one_array(card, GridSpec(crs, transform, w, h))
    f = raw_output(saved.estimator, pd.DataFrame(stack[ok], columns=card["features"]))
    total = info["expected_value"] + sum(arrays[layer].ravel()[ok].astype(np.float64) for layer in card["features"])
    # the rasters are float32 (about 7 significant digits), five layers summed
    np.testing.assert_allclose(total, f, rtol=0, atol=1e-5 * max(1.0, float(np.abs(f).max())))


def test_contribution_grid_is_the_least_coarsening_within_the_cap(metric_grid):
    from mlsites.explain._in_run import contribution_grid

    # metric_grid: 50 rows x 60 columns = 3000 cells
    assert contribution_grid(metric_grid, 3000) == (metric_grid, 1)
    coarse, f = contribution_grid(metric_grid, 2999)
    assert (f, coarse.shape) == (2, (25, 30))
    # by hand: f = 3 gives round(50 / 3) x 20 = 17 x 20 = 340 cells, too many; f = 4 gives 12 x 15
    coarse, f = contribution_grid(metric_grid, 300)
    assert (f, coarse.shape) == (4, (12, 15))
    assert coarse.bounds == pytest.approx(metric_grid.bounds)


def test_a_survey_layer_that_is_no_feature_is_refused_at_load(tmp_path, study_data):
    path = _experiment(tmp_path, study_data, survey=["slope", "distance_roads"])
    with pytest.raises(ConfigError, match=r"explain\.survey_layers.*'distance_roads'.*features are slope, "
                                          r"northness, tpi_50m, stream_distance, soil"):
        load_experiment(path)


def test_an_explanation_sample_larger_than_the_landscape_is_refused_at_load(tmp_path, study_data):
    path = _experiment(tmp_path, study_data)
    text = path.read_text().replace("n_explain = 40", "n_explain = 701")
    path.write_text(text)
    with pytest.raises(ConfigError, match=r"explain\.n_explain.*701 landscape cells.*background_count = 700"):
        load_experiment(path)
    assert not (tmp_path / "runs").exists()


def test_buffered_leave_one_out_fold_rows_are_the_background_within_the_buffer():
    """For buffered leave-one-site-out the landscape of a fold is the background
    within the buffer of its site (cross_validate's n_test_background counts it),
    and the site rows are that site's cells; checked by hand on a line of cells."""
    from mlsites.evaluation import cross_validate
    from mlsites.explain._in_run import heldout_fold_rows
    from mlsites.folds import BufferedLeaveOneSiteOut
    from mlsites.learners import make_learner

    rng = np.random.default_rng(0)
    x = np.arange(60, dtype=float) * 10.0  # cells 10 m apart along a line
    label = np.zeros(60, dtype=int)
    label[[5, 6, 30, 50]] = 1
    site = np.where(label == 1, np.array(["A"] * 60, dtype=object), None)
    site[[30]], site[[50]] = "B", "C"
    table = pd.DataFrame({"sample_id": np.arange(60), "label": label, "weight": np.where(label == 1, 0.5, 1.0),
                          "site_id": site, "fold": -1, "v": rng.normal(size=60)})
    table.loc[[30, 50], "weight"] = 1.0
    splitter = BufferedLeaveOneSiteOut(x, np.zeros(60), table["site_id"].to_numpy(), buffer=25.0)
    rows = heldout_fold_rows(table, splitter)
    # site A: cells 5 and 6; background within 25 m of them: cells 3, 4, 7, 8 (common sense on a line)
    sites, w, land = rows[0]
    assert sites.tolist() == [5, 6] and w.tolist() == [0.5, 0.5] and land.tolist() == [3, 4, 7, 8]
    assert rows[1][2].tolist() == [28, 29, 31, 32]
    res = cross_validate(table, features=["v"], learners={"logistic": lambda: make_learner("logistic")},
                         splitter=splitter)
    counts = res.by_fold[res.by_fold["fold"] != "all"]["n_test_background"].tolist()
    assert counts == [r[2].size for r in rows]
