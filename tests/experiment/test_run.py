"""run_experiment: reproducible runs, safe outputs, model cards, input checks.

Every run uses a tiny fictional study (120 x 120 cells of 10 m) built once per
module with the demo builder, and small learner settings so a run takes seconds.
"""

import hashlib
import json
import re
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.warp import Resampling, calculate_default_transform, reproject

from mlsites.errors import ConfigError, InputError, OutputExistsError
from mlsites.experiment import load_experiment, run_experiment
from mlsites.experiment._demo import write_demo_data
from mlsites.experiment._models import load_model, save_model
from mlsites.experiment._run import check_input_layers, sample_experiment
from mlsites.grid import read_grid
from mlsites.learners import balanced_draws_share, fit_learner, make_learner

METRIC_FILES = ("metrics_by_fold.csv", "metrics_summary.csv", "zones.csv", "curves.csv")
RUN_FILES = METRIC_FILES + ("capture_curves.png", "roc_curves.png", "manifest.json", "run.log",
                            "dropped_records.csv", "sampling.json", "samples/samples.parquet")
LEARNERS = ("random_forest", "logistic", "mlp", "gradient_boosting", "fuzzy")

EXPERIMENT = """
[study]
name = "tiny"
dem = "{data}/dem.tif"
seed = 3

[inputs]
soil = {{ path = "{soil}", kind = "{kind}" }}

[terrain]
layers = ["slope", "northness", "stream_distance"]
stream_lines = "{data}/streams.gpkg"

[sites]
path = "{sites}"

[sampling]
site_buffer_m = 10.0
background_count = 600

[folds]
method = "square_blocks"
n_splits = 3
block_size_m = 300.0

[learners]
use = {use}
[learners.random_forest]
n_estimators = 15
[learners.mlp]
hidden_layer_sizes = [4]
max_iter = 60
learning_rate_init = 0.01
tol = 0.01
[learners.gradient_boosting]
max_iter = 15
"""


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    folder = tmp_path_factory.mktemp("tiny_study")
    write_demo_data(folder, shape=(120, 120), cellsize=10.0, n_sites=160, random_state=5)
    return folder


def write_experiment(folder, data, *, soil="soil.tif", kind="categorical", sites="sites.gpkg",
                     use=LEARNERS, extra="", name="tiny.toml"):
    text = EXPERIMENT.format(data=data, soil=data / soil, kind=kind, sites=data / sites,
                             use=json.dumps(list(use))) + extra
    path = folder / name
    path.write_text(text)
    return path


def leftovers(folder):
    """Entries of runs/ or models/ other than the cache: must be none after a failure."""
    return sorted(p.name for p in folder.iterdir() if p.name != ".cache") if folder.exists() else []


def test_same_experiment_twice_gives_identical_metrics_files(tmp_path, data):
    exp = write_experiment(tmp_path, data)
    first = run_experiment(exp, name="first", quiet=True, n_jobs=1)
    # the second run also fits in two worker processes: results must not depend on it
    second = run_experiment(exp, name="second", quiet=True, n_jobs=2)
    for fname in RUN_FILES:
        assert (first.run_dir / fname).is_file(), fname
    for fname in METRIC_FILES:
        assert (first.run_dir / fname).read_bytes() == (second.run_dir / fname).read_bytes(), fname
    # the second run reused the cached sample table instead of rebuilding it
    assert first.manifest["samples"]["cached"] is False
    assert second.manifest["samples"]["cached"] is True
    assert sorted(first.summary["learner"]) == sorted(LEARNERS)
    assert set(first.manifest["seconds"]) >= {"samples", "cross-validation", "models"}
    log = (first.run_dir / "run.log").read_text()
    assert "cross-validation: done in" in log and "models: done in" in log
    # input hashes in the manifest: hashlib over the file bytes is the reference
    dem_digest = hashlib.sha256((data / "dem.tif").read_bytes()).hexdigest()
    assert first.manifest["input_files"]["study.dem"]["sha256"] == dem_digest


def test_model_cards_describe_the_refitted_models(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=["logistic", "random_forest"])
    result = run_experiment(exp, quiet=True, n_jobs=1)
    samples = pd.read_parquet(result.run_dir / "samples" / "samples.parquet")
    sampling = json.loads((result.run_dir / "sampling.json").read_text())
    parquet_digest = hashlib.sha256((result.run_dir / "samples" / "samples.parquet").read_bytes()).hexdigest()
    grid = read_grid(data / "dem.tif")
    summary = pd.read_csv(result.run_dir / "metrics_summary.csv")
    for learner in ("logistic", "random_forest"):
        saved = load_model(result.models_dir / f"{learner}.card.json")
        card = saved.card
        assert card["features"] == sampling["features"]
        assert card["categorical"] == ["soil"]
        assert card["training_data_sha256"] == parquet_digest
        assert card["grid"] == json.loads(json.dumps(grid.to_dict()))
        assert {"numpy", "scikit-learn", "skops", "mlsites"} <= set(card["versions"])
        row = summary.set_index("learner").loc[learner]
        assert card["cross_validated"]["auc_mean"] == pytest.approx(row["auc_mean"], rel=1e-9)  # csv uses %.10g
        # reference: the same preset fitted here through the public learner API
        n_sites = samples.loc[samples["label"] == 1, "site_id"].nunique()
        forest = {"n_estimators": 15, "max_samples": balanced_draws_share(samples["weight"], n_sites)}
        reference = fit_learner(
            make_learner(learner, random_state=3, categorical_features=["soil"],
                         **(forest if learner == "random_forest" else {})),
            samples[card["features"]], samples["label"], sample_weight=samples["weight"])
        X = samples[card["features"]]
        np.testing.assert_array_equal(saved.estimator.predict_proba(X), reference.predict_proba(X))


def test_run_forest_trees_draw_two_rows_per_site(tmp_path, data):
    # Valavi et al. (2021): each tree of a down-sampled forest sees about as many
    # presences as there are sites and as many background points. The sample table's
    # weights average 1, so the run must not leave max_samples at 1.0 (which would
    # draw as many rows as the table holds: the forest then memorises sites again).
    exp = write_experiment(tmp_path, data, use=["random_forest"])
    result = run_experiment(exp, quiet=True, n_jobs=1)
    samples = pd.read_parquet(result.run_dir / "samples" / "samples.parquet")
    n_sites = samples.loc[samples["label"] == 1, "site_id"].nunique()
    forest = load_model(result.models_dir / "random_forest.card.json").estimator.named_steps["model"]
    label = samples["label"].to_numpy()
    for drawn in forest.estimators_samples_:
        assert abs(drawn.size - 2 * n_sites) <= 1
        # site draws ~ Binomial(2 n_sites, 1/2): within 4 sd of n_sites
        assert abs(int(label[drawn].sum()) - n_sites) <= 4 * np.sqrt(n_sites / 2)


def test_run_maps_the_best_learner_and_the_baseline_with_complete_cards(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=["mlp", "logistic", "fuzzy"])
    result = run_experiment(exp, quiet=True, n_jobs=1)
    best = result.summary["learner"].iloc[0]
    expected = sorted({best, "fuzzy"})
    assert sorted(p.name for p in (result.run_dir / "maps").iterdir()) == expected
    assert result.manifest["maps"] == expected
    for learner in expected:
        folder = result.run_dir / "maps" / learner
        assert sorted(p.name for p in folder.iterdir()) == ["applicable.tif", "dissimilarity.tif", "map.json", "potential.tif",
                                                                   "spread.tif", "zones.tif"]
        summary = json.loads((folder / "map.json").read_text())
        # map.json names the card where it lives after the run, with its hash (hashlib reference)
        card_path = result.models_dir / f"{learner}.card.json"
        assert summary["model_card"]["path"] == str(card_path)
        assert summary["model_card"]["sha256"] == hashlib.sha256(card_path.read_bytes()).hexdigest()
    zones = pd.read_csv(result.run_dir / "zones.csv")
    for learner in ("mlp", "logistic", "fuzzy"):
        card = json.loads((result.models_dir / f"{learner}.card.json").read_text())
        # every feature has a layer entry whose hash is the file's (hashlib reference)
        assert [e["name"] for e in card["feature_layers"]] == card["features"]
        for e in card["feature_layers"]:
            assert hashlib.sha256(Path(e["path"]).read_bytes()).hexdigest() == e["sha256"], e["name"]
        assert card["terrain"]["dem"]["sha256"] == hashlib.sha256((data / "dem.tif").read_bytes()).hexdigest()
        assert card["terrain"]["settings"]["layers"] == ["slope", "northness", "stream_distance"]
        assert card["terrain"]["stream_lines"]["path"] == str(data / "streams.gpkg")
        # three folds, three fold model files, each vouched for by its hash
        assert [f["file"] for f in card["fold_models"]] == [f"{learner}.fold{k}.skops" for k in range(3)]
        for f in card["fold_models"]:
            assert hashlib.sha256((result.models_dir / f["file"]).read_bytes()).hexdigest() == f["sha256"]
        rows = zones[zones["learner"] == learner]
        assert [z["name"] for z in card["zones"]["zones"]] == ["high", "medium"]
        assert [z["area_share"] for z in card["zones"]["zones"]] == pytest.approx(rows["area_share"].iloc[:2].tolist())


def test_maps_option_is_checked(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=["logistic"], extra='[maps]\nlearners = "every"\n')
    with pytest.raises(ConfigError, match=r"\[maps.learners\] 'every' is not one of best_and_baseline"):
        load_experiment(exp)
    exp = write_experiment(tmp_path, data, use=["logistic"], extra='[maps]\nlearners = ["mlp"]\n', name="b.toml")
    with pytest.raises(ConfigError, match=r"\['mlp'\] not among the learners used"):
        load_experiment(exp)


def test_existing_run_is_not_clobbered_and_fresh_replaces_it(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=["logistic", "fuzzy"])
    result = run_experiment(exp, quiet=True, n_jobs=1)
    before = {p.name: p.read_bytes() for p in result.run_dir.iterdir() if p.is_file()}
    with pytest.raises(OutputExistsError, match="--fresh.*--name"):
        run_experiment(exp, quiet=True, n_jobs=1)
    assert {p.name: p.read_bytes() for p in result.run_dir.iterdir() if p.is_file()} == before
    (result.run_dir / "marker.txt").write_text("old run")
    again = run_experiment(exp, quiet=True, fresh=True, n_jobs=1)
    assert not (again.run_dir / "marker.txt").exists()
    assert again.manifest["samples"]["cached"] is False  # fresh ignores the cache
    assert (again.run_dir / "metrics_summary.csv").read_bytes() == before["metrics_summary.csv"]
    assert leftovers(tmp_path / "runs") == ["tiny"] and leftovers(tmp_path / "models") == ["tiny"]
    other = run_experiment(exp, quiet=True, name="tiny_b", n_jobs=1)
    assert other.run_dir.name == "tiny_b" and (tmp_path / "runs" / "tiny").exists()


def _few_sites(data, path, n):
    import geopandas as gpd

    gpd.read_file(data / "sites.gpkg").iloc[:n].to_file(path, driver="GPKG")
    return path.name


def _clustered_sites(data, path):
    """Sites squeezed into one corner block: some fold gets no site at all."""
    import geopandas as gpd

    sites = gpd.read_file(data / "sites.gpkg").iloc[:8].copy()
    left, _, _, top = read_grid(data / "dem.tif").bounds
    xs = left + 60.0 + 20.0 * np.arange(8) % 160.0
    ys = top - 60.0 - 20.0 * (np.arange(8) // 4)
    sites["geometry"] = gpd.points_from_xy(xs, ys, crs=sites.crs)
    sites.to_file(path, driver="GPKG")
    return path.name


@pytest.mark.parametrize("case", ["too_few_sites", "fold_without_sites", "bad_learner_setting"])
def test_failures_leave_nothing_behind(tmp_path, data, case):
    if case == "too_few_sites":
        exp = write_experiment(tmp_path, tmp_path, sites=_few_sites(data, tmp_path / "few.gpkg", 2))
        match = r"2 usable site\(s\) but 3 folds"
    elif case == "fold_without_sites":
        exp = write_experiment(tmp_path, tmp_path, sites=_clustered_sites(data, tmp_path / "corner.gpkg"))
        match = r"(?i)fold \d+ has no (presences|site)"
    else:
        exp = write_experiment(tmp_path, tmp_path, use=["logistic"], extra="[learners.logistic]\nn_trees = 5\n")
        match = r"\[learners.logistic\] unknown setting 'n_trees'; settings of logistic are .*\bpenalty_strength\b"
    for name in ("dem.tif", "soil.tif", "streams.gpkg", "sites.gpkg"):
        target = tmp_path / name
        if not target.exists():
            target.symlink_to(data / name)
    from mlsites.errors import MlsitesError

    with pytest.raises(MlsitesError, match=match):
        run_experiment(exp, quiet=True, n_jobs=1)
    assert leftovers(tmp_path / "runs") == [] and leftovers(tmp_path / "models") == []


def _reprojected(src_path, dst_path, crs="EPSG:32632"):
    with rasterio.open(src_path) as src:
        transform, width, height = calculate_default_transform(src.crs, crs, src.width, src.height, *src.bounds)
        profile = src.profile | {"crs": crs, "transform": transform, "width": width, "height": height}
        profile.pop("blockxsize", None), profile.pop("blockysize", None), profile.pop("tiled", None)
        with rasterio.open(dst_path, "w", **profile) as dst:
            reproject(rasterio.band(src, 1), rasterio.band(dst, 1), resampling=Resampling.nearest)
            dst.update_tags(**src.tags())
    return dst_path.name


def test_layer_in_another_crs_is_aligned_and_logged(tmp_path, data):
    soil = _reprojected(data / "soil.tif", data / "soil_32632.tif")
    exp = load_experiment(write_experiment(tmp_path, data, soil=soil))
    lines = []
    status = check_input_layers(exp, read_grid(data / "dem.tif"), lines.append)
    assert status == {"soil": "aligned"}
    assert len(lines) == 1 and lines[0].startswith("aligned soil from EPSG:32632") and "(nearest)" in lines[0]


def test_run_log_says_which_layer_was_aligned(tmp_path, data):
    soil = _reprojected(data / "soil.tif", tmp_path / "soil_32632.tif")
    exp = write_experiment(tmp_path, data, soil=str(tmp_path / soil), use=["fuzzy"])
    result = run_experiment(exp, quiet=True, n_jobs=1)
    log = (result.run_dir / "run.log").read_text()
    assert "aligned soil from EPSG:32632" in log


def test_categorical_layer_declared_continuous_is_refused(tmp_path, data):
    exp = load_experiment(write_experiment(tmp_path, data, kind="continuous"))
    with pytest.raises(ConfigError, match=r'\[inputs.soil\] kind = "continuous".*set kind = "categorical"'):
        check_input_layers(exp, read_grid(data / "dem.tif"))
    # the same codes without class names in the metadata: caught by the code count rule
    with rasterio.open(data / "soil.tif") as src:
        profile, codes = src.profile, src.read(1)
    with rasterio.open(tmp_path / "codes.tif", "w", **profile) as dst:
        dst.write(codes, 1)
    assert len(np.unique(codes[codes > 0])) > 2  # the rule needs 3 to 32 codes
    exp = load_experiment(write_experiment(tmp_path, data, soil=str(tmp_path / "codes.tif"), kind="continuous"))
    with pytest.raises(ConfigError, match="distinct integer codes"):
        check_input_layers(exp, read_grid(data / "dem.tif"))


def test_continuous_layer_declared_categorical_is_refused(tmp_path, data):
    with rasterio.open(data / "dem.tif") as src:
        profile, dem = src.profile, src.read(1)
    with rasterio.open(tmp_path / "height.tif", "w", **profile) as dst:
        dst.write(dem + np.float32(0.25), 1)
    exp = load_experiment(write_experiment(tmp_path, data, soil=str(tmp_path / "height.tif"), kind="categorical"))
    with pytest.raises(ConfigError, match="non-integer values"):
        check_input_layers(exp, read_grid(data / "dem.tif"))


def test_sample_experiment_writes_and_protects_its_folder(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=["fuzzy"])
    samples = sample_experiment(exp, quiet=True)
    assert samples.folder == tmp_path / "runs" / "tiny" / "samples"
    assert {"samples.parquet", "folds.csv", "dropped_records.csv", "sampling.json"} <= {
        p.name for p in samples.folder.iterdir()}
    # presence weights: every site sums to the same total (METHODS.md §7), weights
    # averaging 1 (issue 7)
    per_site = samples.table[samples.table["label"] == 1].groupby("site_id")["weight"].sum()
    np.testing.assert_allclose(per_site, len(samples.table) / (2 * len(per_site)), rtol=1e-7)
    with pytest.raises(OutputExistsError, match="--fresh"):
        sample_experiment(exp, quiet=True)


class _Opaque:
    """A type outside the trusted set (defined in this test module)."""

    def __init__(self):
        self.value = 1


def test_load_model_refuses_tampered_or_untrusted_files(tmp_path):
    rng = np.random.default_rng(0)
    X = pd.DataFrame({"a": rng.random(80), "b": rng.random(80)})
    y = (X["a"] > 0.5).astype(int)
    model = fit_learner(make_learner("logistic", random_state=0), X, y)
    saved = save_model(model, tmp_path, "logistic", features=["a", "b"])
    loaded = load_model(saved.model_path)
    np.testing.assert_array_equal(loaded.estimator.predict_proba(X), model.predict_proba(X))
    # a model file changed after its card was written
    with zipfile.ZipFile(saved.model_path, "a") as z:
        z.writestr("extra.txt", "changed")
    with pytest.raises(InputError, match="refusing to load"):
        load_model(saved.card_path)
    # a file its card vouches for but that holds an untrusted type
    odd = save_model(_Opaque(), tmp_path, "odd", features=[])
    with pytest.raises(InputError, match=r"outside the trusted set \(.*_Opaque"):
        load_model(odd.card_path)


def test_example_experiments_load_and_every_option_is_shown():
    from mlsites.experiment import SCHEMA

    folder = Path(__file__).resolve().parents[2] / "experiments"
    for name in ("demo", "demo_variant", "every_option"):
        exp = load_experiment(folder / f"{name}.toml")
        assert exp.name == name
    assert load_experiment(folder / "demo_variant.toml").sources[0].name == "demo.toml"
    text = (folder / "every_option.toml").read_text()
    # every key of every section appears as an active or commented-out example line
    keys = [k for section in SCHEMA.values() for k in section] + ["extends", "use", "kind", "band"]
    missing = [k for k in keys if not re.search(rf"^#? ?{k} =|[{{,] {k} =", text, flags=re.M)]
    assert missing == []


def test_buffered_leave_one_site_out_runs_end_to_end(tmp_path, data):
    # The fold column of this method holds sites, not folds: the run must build the
    # buffered splitter itself. One held-out site per fold (Le Rest et al. 2014, as in
    # METHODS.md §6), so the number of folds equals the number of sites.
    write_experiment(tmp_path, data, use=["logistic"])
    variant = tmp_path / "bloo.toml"
    variant.write_text('extends = "tiny.toml"\n[study]\nname = "bloo"\n'
                       '[folds]\nmethod = "buffered_leave_one_out"\nbuffer_m = 150.0\n')
    result = run_experiment(variant, quiet=True, n_jobs=1)
    by_fold = pd.read_csv(result.run_dir / "metrics_by_fold.csv")
    per_site = by_fold[by_fold["fold"] != "all"]
    samples = pd.read_parquet(result.run_dir / "samples" / "samples.parquet")
    assert len(per_site) == samples.loc[samples["label"] == 1, "site_id"].nunique()
    assert (per_site["n_test_sites"] == 1).all()
    # each site is scored against the background within its buffer (issue 7), and the
    # log says so with the number of cells
    assert (per_site["landscape"] == "within_buffer").all()
    assert "background within buffer_m = 150 m" in (result.run_dir / "run.log").read_text()


def test_editing_a_shapefile_dbf_invalidates_the_sample_cache(tmp_path, data):
    # issue 7: the .dbf holds the site ids; a cache keyed on the .shp alone reused a
    # stale table. Only the .dbf is replaced here (by one written elsewhere).
    import geopandas as gpd

    sites = gpd.read_file(data / "sites.gpkg")
    sites.to_file(tmp_path / "sites.shp")
    renamed = sites.assign(site_id=["R" + s[1:] for s in sites["site_id"]])
    (tmp_path / "other").mkdir()
    renamed.to_file(tmp_path / "other" / "sites.shp")
    exp = write_experiment(tmp_path, data, sites=str(tmp_path / "sites.shp"), use=["fuzzy"])
    first = sample_experiment(exp, out_dir=tmp_path / "a", quiet=True)
    (tmp_path / "sites.dbf").write_bytes((tmp_path / "other" / "sites.dbf").read_bytes())
    lines = []
    second = sample_experiment(exp, out_dir=tmp_path / "b", quiet=True, log=lines.append)
    assert not any(line.startswith("sample table: cached") for line in lines)
    ids = lambda s: set(s.table.loc[s.table["label"] == 1, "site_id"])  # noqa: E731
    assert ids(second) == {"R" + i[1:] for i in ids(first)}
    # unchanged inputs: the cache is used
    lines.clear()
    sample_experiment(exp, out_dir=tmp_path / "c", quiet=True, log=lines.append)
    assert any(line.startswith("sample table: cached") for line in lines)


def _two_band(data, path):
    """soil.tif's codes as band 1 and a continuous field (DEM heights / 7) as band 2."""
    with rasterio.open(data / "soil.tif") as src:
        profile, codes = src.profile, src.read(1)
    with rasterio.open(data / "dem.tif") as src:
        heights = src.read(1)
    profile.update(count=2, dtype="float32", nodata=-9999.0)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(codes.astype("float32"), 1)
        dst.write((heights / 7.0).astype("float32"), 2)
    return path


def test_band_asked_for_is_the_band_read(tmp_path, data):
    # issue 7: band = 2 was read from band 1. Reference: rasterio's own read of band 2.
    layers = _two_band(data, tmp_path / "two.tif")
    write_experiment(tmp_path, data, use=["fuzzy"])
    (tmp_path / "b2.toml").write_text(f'extends = "tiny.toml"\n[study]\nname = "b2"\n[inputs]\n'
                                      f'soil = {{ path = "{layers}", kind = "continuous", band = 2 }}\n')
    samples = sample_experiment(tmp_path / "b2.toml", quiet=True)
    with rasterio.open(layers) as src:
        band2 = src.read(2)
    t = samples.table
    np.testing.assert_array_equal(t["soil"].to_numpy(), band2[t["row"], t["col"]].astype(np.float64))


def test_band_that_does_not_exist_is_refused_before_any_work(tmp_path, data):
    from click.testing import CliRunner

    from mlsites.cli.main import cli

    write_experiment(tmp_path, data, use=["fuzzy"])
    (tmp_path / "b5.toml").write_text(f'extends = "tiny.toml"\n[study]\nname = "b5"\n[inputs]\n'
                                      f'soil = {{ path = "{data / "soil.tif"}", kind = "categorical", band = 5 }}\n')
    result = CliRunner().invoke(cli, ["run", str(tmp_path / "b5.toml"), "--quiet"])
    assert result.exit_code == 2, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in result.output
    assert f"b5.toml:5: [inputs.soil] band = 5, but {data / 'soil.tif'} has 1 band(s)" in lines[0]
    assert not (tmp_path / "runs").exists()  # before any work: not even the cache


@pytest.mark.parametrize("extra, fragment", [
    # the preset's own constraint, checked by scikit-learn's parameter validation
    ("[learners.logistic]\npenalty_strength = -1\n",
     "[learners.logistic] penalty_strength = -1 is not allowed: it must be a float in the range [0.0, inf)"),
    ("[learners.logistic]\nrandom_state = 1\n", "random_state is set by the run; use [study] seed"),
    ("[learners.logistic]\nsplines = 1\n", "[learners.logistic] these settings cannot be fitted: splines"),
])
def test_invalid_learner_settings_are_one_line_before_any_work(tmp_path, data, extra, fragment):
    from click.testing import CliRunner

    from mlsites.cli.main import cli

    exp = write_experiment(tmp_path, data, use=["logistic", "fuzzy"], extra=extra)
    key = extra.splitlines()[1].split(" =")[0]
    line = exp.read_text().splitlines().index(extra.splitlines()[1]) + 1
    result = CliRunner().invoke(cli, ["run", str(exp), "--quiet"])
    assert result.exit_code == 2, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in result.output, result.stderr
    where = f"{exp}:{line}" if key in ("penalty_strength", "random_state") else f"{exp}:"
    assert lines[0].startswith(f"mlsites: error: {where}") and fragment in lines[0], lines[0]
    assert not (tmp_path / "runs").exists()
