"""A tiny fictional run for the report tests, and the files later stages add to a run.

The study is the demo builder's invented landscape with virtual sites (120 x 120
cells of 10 m, tests/mapping/study.py's data) run with three small learners and
maps. :func:`add_stage_files` then writes what the explanation, contribution,
periods and check stages write into a run folder (wave-2 file names), using the
libraries that exist, so every section of the report can be drawn.
"""

import json
import shutil

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio

from mlsites.experiment import run_experiment

LEARNERS = ("logistic", "random_forest", "fuzzy")

EXPERIMENT = """
[study]
name = "reportstudy"
dem = "{data}/dem.tif"
seed = 11
description = "Fictional test landscape with invented site records."

[inputs]
soil = {{ path = "{data}/soil.tif", kind = "categorical" }}

[terrain]
layers = ["slope", "northness", "tpi", "stream_distance"]
tpi_radii_m = [50.0]
stream_lines = "{data}/streams.gpkg"

[sites]
path = "{data}/sites.gpkg"
start_field = "start_year"
end_field = "end_year"

[sampling]
site_buffer_m = 0.0
background_count = 700
survey_areas = "{data}/survey.gpkg"

[folds]
method = "square_blocks"
n_splits = 3
block_size_m = 400.0

[learners]
use = {use}
[learners.random_forest]
n_estimators = 20
min_samples_leaf = 3

[maps]
learners = "all"

[periods]
block_width_years = 400.0
n_simulations = 100

[report]
reference_surface = "{data}/dem.tif"
reference_label = "elevation"
site_cell_m = 400.0
"""


def write_report_experiment(folder, data, *, use=LEARNERS):
    path = folder / "reportstudy.toml"
    path.write_text(EXPERIMENT.format(data=data, use=json.dumps(list(use))))
    return path


def run_report_study(folder, data):
    return run_experiment(write_report_experiment(folder, data), quiet=True, n_jobs=2)


def later_sites(run_dir, n=15, seed=0):
    """Invented later-found sites: points in random mapped cells (seeded), as a GeoDataFrame."""
    with rasterio.open(run_dir / "maps" / "logistic" / "potential.tif") as src:
        pot = src.read(1)
        transform, crs = src.transform, src.crs
    rows, cols = np.nonzero(np.isfinite(pot))
    rng = np.random.default_rng(seed)
    pick = rng.choice(rows.size, size=n, replace=False)
    x, y = rasterio.transform.xy(transform, rows[pick], cols[pick])
    # inside the cell but off its centre, as a surveyor's point would be
    x = np.asarray(x) + rng.uniform(-3.0, 3.0, n)
    y = np.asarray(y) + rng.uniform(-3.0, 3.0, n)
    return gpd.GeoDataFrame({"site_id": [f"LF{i:03d}" for i in range(n)]}, geometry=gpd.points_from_xy(x, y),
                             crs=crs)


def _explain(run_dir, models_dir, table, features, categorical):
    from mlsites.experiment._models import load_fold_models, load_model
    from mlsites.explain import explain_learners

    # the run's own explanation stage wrote explain/ already; these tests draw it from their own files
    shutil.rmtree(run_dir / "explain", ignore_errors=True)
    models, folds = {}, {}
    fold_ids = np.sort(table["fold"].unique())
    label, weight, fold = table["label"].to_numpy(), table["weight"].to_numpy(), table["fold"].to_numpy()
    for name in LEARNERS:
        saved = load_model(models_dir / f"{name}.card.json")
        models[name] = saved.estimator
        folds[name] = [(est, np.flatnonzero((fold == k) & (label == 1)), weight[(fold == k) & (label == 1)],
                        np.flatnonzero((fold == k) & (label == 0)))
                       for est, k in zip(load_fold_models(saved), fold_ids)]
    return explain_learners(models, table, features=features, categorical=categorical, fold_models=folds,
                            out_dir=run_dir / "explain", n_explain=30, n_background=15, n_repeats=2, n_grid=8,
                            quiet=True)


def _contributions(run_dir, models_dir, result, learner="logistic"):
    from mlsites.explain import layer_contributions
    from mlsites.grid import read_array, read_grid, write_array

    card = json.loads((models_dir / f"{learner}.card.json").read_text())
    grid = read_grid(run_dir / "maps" / learner / "potential.tif")
    arrays = {f["name"]: read_array(f["path"], grid, kind=f.get("kind", "continuous"), dtype=np.float64)
              for f in card["feature_layers"]}
    features = card["features"]
    stack = np.stack([arrays[f] for f in features], axis=-1).reshape(-1, len(features))
    ok = np.isfinite(stack).all(axis=1)
    layers = result.top_layers(learner, 2)
    values = layer_contributions(result.explainers[learner], pd.DataFrame(stack[ok], columns=features), layers)
    folder = run_dir / "explain" / "contributions"
    folder.mkdir(parents=True)
    for k, layer in enumerate(layers):
        out = np.full(grid.n_cells, np.nan, dtype=np.float32)
        out[ok] = values[:, k]
        write_array(folder / f"{layer}.tif", out.reshape(grid.shape), grid)
    (folder / "contributions.json").write_text(json.dumps(
        {"learner": learner, "layers": layers, "units": result.explainers[learner].output_space,
         "settings": {"resolution": "every cell"}}))


def _check(run_dir, sites, learner="logistic"):
    from mlsites.evaluation import new_site_check

    with rasterio.open(run_dir / "maps" / learner / "potential.tif") as src:
        pot = src.read(1)
        rows, cols = rasterio.transform.rowcol(src.transform, sites.geometry.x, sites.geometry.y)
    with rasterio.open(run_dir / "maps" / learner / "zones.tif") as src:
        zones = src.read(1)
    info = json.loads((run_dir / "maps" / learner / "map.json").read_text())
    shares = {z["name"]: z["area_share"] for z in info["zones"]}
    codes = {z["name"]: z["code"] for z in info["zones"]}
    rows, cols = np.asarray(rows), np.asarray(cols)
    z = zones[rows, cols].astype(int)
    frame = new_site_check(pot[rows, cols], np.where(z == 255, 1, z), pot[np.isfinite(pot)], shares,
                           zone_codes=codes)
    folder = run_dir / "check" / learner
    folder.mkdir(parents=True)
    frame.to_csv(folder / "check.csv", index=False)
    (folder / "check.json").write_text(json.dumps({"n_sites": int(len(sites))}))


def add_stage_files(run_dir, models_dir, experiment, data):
    """Write explain/, explain/contributions/, periods/ and check/ into ``run_dir``; name the check sites."""
    from mlsites.periods import run_periods

    table = pd.read_parquet(run_dir / "samples" / "samples.parquet")
    manifest = json.loads((run_dir / "manifest.json").read_text())
    features, categorical = manifest["samples"]["features"], manifest["samples"]["categorical"]
    result = _explain(run_dir, models_dir, table, features, categorical)
    _contributions(run_dir, models_dir, result)
    run_periods(experiment, out_dir=run_dir / "periods", fresh=True, quiet=True)
    sites = later_sites(run_dir)
    sites.to_file(data / "later_sites.gpkg", layer="later", driver="GPKG")
    _check(run_dir, sites)
    # the [check] section (another stage's) as the run's manifest would hold it
    manifest["settings"]["check"] = {"sites": str(data / "later_sites.gpkg"), "id_field": "site_id"}
    (run_dir / "manifest.json").write_text(json.dumps(manifest, indent=2))
    return sites


def copy_run(run_dir, target):
    shutil.copytree(run_dir, target)
    (target / "report.html").unlink(missing_ok=True)
    return target
