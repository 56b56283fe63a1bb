"""The one sample table and fold assignment of an experiment (terrain -> sites -> samples -> folds)."""

import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.transform import from_origin
from scipy.ndimage import gaussian_filter

from mlsites.errors import InputError, InsufficientDataError, OutputExistsError
from mlsites.experiment import load_experiment
from mlsites.experiment._samples import prepare_samples
from mlsites.grid import GridSpec, write_array
from mlsites.synthetic import make_virtual_sites

GRID = GridSpec(rasterio.crs.CRS.from_epsg(32631), from_origin(600000.0, 5500000.0, 10.0, 10.0), 100, 110)


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """A small invented study: smooth relief (Gaussian-filtered noise) and virtual sites."""
    d = tmp_path_factory.mktemp("study")
    rng = np.random.default_rng(4)
    dem = (gaussian_filter(rng.normal(size=GRID.shape), 10) * 2000 + 200).astype(np.float32)
    dem[50:53, 40:45] = np.nan
    write_array(d / "dem.tif", dem, GRID, nodata=-9999.0)
    gy, gx = np.gradient(dem.astype(float), 10.0)
    layers = {"slope": np.degrees(np.arctan(np.hypot(gx, gy)))}
    vs = make_virtual_sites(layers, GRID, n_sites=90, preference={"slope": ("linear", {"coefficient": -0.4})},
                            n_survey_strips=0, detect_outside=1.0, random_state=2)
    vs.sites.to_file(d / "sites.gpkg", driver="GPKG")
    (d / "exp.toml").write_text(
        '[study]\ndem = "dem.tif"\nseed = 7\n'
        '[terrain]\nlayers = ["slope", "northness", "tpi", "landform"]\ntpi_radii_m = [50]\n'
        'landform_lookup_cells = 5\n'
        '[sites]\npath = "sites.gpkg"\n'
        '[sampling]\nsite_buffer_m = 15\nbackground_count = 600\n'
        '[folds]\nmethod = "square_blocks"\nn_splits = 3\nblock_size_m = 300\n'
    )
    return d


def test_table_weights_folds_and_reproducibility(study, tmp_path):
    exp = load_experiment(study / "exp.toml")
    a = prepare_samples(exp, tmp_path / "a", cache_dir=tmp_path / "cache", quiet=True)
    prepare_samples(exp, tmp_path / "b", cache_dir=tmp_path / "cache2", quiet=True)
    # Brief: same seed gives byte-identical tables.
    assert (tmp_path / "a" / "samples.parquet").read_bytes() == (tmp_path / "b" / "samples.parquet").read_bytes()
    # The table passed on in memory is exactly what a cached run reads back (values,
    # dtypes, index), so fresh and cached runs feed the learners the same data.
    pd.testing.assert_frame_equal(a.table, pd.read_parquet(tmp_path / "a" / "samples.parquet"), check_exact=True)
    t = a.table
    pres, bg = t[t["label"] == 1], t[t["label"] == 0]
    # METHODS.md §7: every site's cells sum to the same total (each site counts once);
    # balanced background weight; issue 7: weights average 1 whatever the study size.
    per_site = pres.groupby("site_id")["weight"].sum()
    np.testing.assert_allclose(per_site, len(t) / (2 * len(per_site)), rtol=1e-12)
    assert bg["weight"].sum() == pytest.approx(pres["weight"].sum(), rel=1e-12)
    assert t["weight"].mean() == pytest.approx(1.0, rel=1e-12)
    assert (pres.groupby("site_id")["fold"].nunique() == 1).all()
    assert set(t["fold"]) == {0, 1, 2}
    assert not t[a.features].isna().any().any()
    # tpi_50m_std is an affine copy of tpi_50m (README layer table): written, not a feature
    assert a.features == ["slope", "northness", "tpi_50m", "landform"]
    assert list((tmp_path / "cache").glob("terrain-*/tpi_50m_std.tif"))
    assert a.categorical == ["landform"]
    folds = pd.read_csv(tmp_path / "a" / "folds.csv")
    np.testing.assert_array_equal(folds["fold"], t["fold"])
    assert (tmp_path / "a" / "blocks.gpkg").exists()
    # Every site read is either used or listed with a reason (nothing dropped silently).
    dropped = pd.read_csv(tmp_path / "a" / "dropped_records.csv")
    assert a.summary["n_sites_used"] + len(dropped) >= a.summary["n_sites_read"]


def test_terrain_cache_reused_and_outputs_protected(study, tmp_path):
    exp = load_experiment(study / "exp.toml")
    prepare_samples(exp, tmp_path / "a", cache_dir=tmp_path / "cache", quiet=True)
    lines = []
    with pytest.raises(OutputExistsError, match="--fresh"):
        prepare_samples(exp, tmp_path / "a", cache_dir=tmp_path / "cache", quiet=True)
    prepare_samples(exp, tmp_path / "b", cache_dir=tmp_path / "cache", quiet=True, log=lines.append)
    assert any("cached" in ln for ln in lines)


def test_block_size_from_variograms(study, tmp_path):
    text = (study / "exp.toml").read_text().replace("block_size_m = 300\n", "")
    (study / "auto.toml").write_text(text)
    lines = []
    s = prepare_samples(load_experiment(study / "auto.toml"), tmp_path / "s", cache_dir=tmp_path / "c", quiet=True,
                        log=lines.append)
    # The suggestion is printed with the fitted range of each layer.
    assert any(ln.strip().startswith("slope:") and "practical range" in ln for ln in lines)
    assert s.summary["folds"]["block_size_m"] > 0
    assert {row["layer"] for row in s.summary["folds"]["variogram"]} >= {"slope"}


def test_more_folds_than_sites(study, tmp_path):
    text = (study / "exp.toml").read_text().replace("n_splits = 3", "n_splits = 500")
    (study / "many.toml").write_text(text)
    with pytest.raises(InsufficientDataError, match="500 folds"):
        prepare_samples(load_experiment(study / "many.toml"), tmp_path / "m", cache_dir=tmp_path / "c", quiet=True)
    assert not (tmp_path / "m").exists() or not any((tmp_path / "m").iterdir())


def test_exclusion_distance_is_explained_in_the_log(study, tmp_path):
    # Issue 7: a run with an exclusion distance says what it changes (METHODS.md §7:
    # background kept away from sites is a pseudo-absence design, a different model).
    text = (study / "exp.toml").read_text().replace("background_count = 600", "background_count = 600\nexclusion_m = 30")
    (study / "excl.toml").write_text(text)
    lines = []
    prepare_samples(load_experiment(study / "excl.toml"), tmp_path / "e", cache_dir=tmp_path / "c", quiet=True,
                    log=lines.append)
    said = [ln for ln in lines if ln.startswith("exclusion_m = 30 m")]
    assert len(said) == 1 and "pseudo-absences" in said[0] and "held-out landscape" in said[0]
    lines.clear()
    prepare_samples(load_experiment(study / "exp.toml"), tmp_path / "n", cache_dir=tmp_path / "c", quiet=True,
                    log=lines.append)
    assert not any("pseudo-absences" in ln for ln in lines)


def test_demo_draws_background_as_available_landscape():
    # Issue 7: the demo follows the README's advice (exclusion_m = 0, presence-background).
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "experiments"
    for name in ("demo", "demo_variant", "every_option"):
        assert load_experiment(root / f"{name}.toml")["sampling"]["exclusion_m"] == 0


def test_sites_outside_the_surveyed_areas_are_counted_and_can_be_dropped(study, tmp_path):
    # Issue 7: with survey_mode = "inside" a site none of whose cells is surveyed cannot be
    # matched by background. Reference count: shapely's point-in-polygon on the site cells.
    import geopandas as gpd
    import shapely

    from mlsites.errors import DataQualityWarning

    left, bottom, right, top = GRID.bounds
    survey = shapely.box(left, bottom, (left + right) / 2, top)
    gpd.GeoDataFrame({"effort": [1.0]}, geometry=[survey], crs=GRID.crs).to_file(study / "survey.gpkg")
    base = (study / "exp.toml").read_text().replace(
        "background_count = 600", 'background_count = 300\nsurvey_areas = "survey.gpkg"')
    (study / "surv.toml").write_text(base)
    lines = []
    with pytest.warns(DataQualityWarning, match="lie outside the survey areas"):
        kept = prepare_samples(load_experiment(study / "surv.toml"), tmp_path / "k", cache_dir=tmp_path / "c",
                               quiet=True, log=lines.append)
    # reference: the site cells (presence_cells, METHODS.md §7) tested with shapely
    from mlsites.sampling import presence_cells, read_sites

    cells = presence_cells(read_sites(study / "sites.gpkg", GRID), GRID, buffer_m=15, valid_mask=study / "dem.tif")
    inside = pd.Series(shapely.contains_xy(survey, cells["x"], cells["y"])).groupby(cells["site_id"].to_numpy()).any()
    n_out = int((~inside).sum())
    assert 0 < n_out < len(inside)
    assert any(ln.startswith(f"{n_out} of {len(inside)} sites lie outside") and "kept" in ln for ln in lines)
    assert set(kept.table["site_id"]) & set(inside.index[~inside.to_numpy()])
    (study / "drop.toml").write_text(base.replace('survey_areas = "survey.gpkg"',
                                                  'survey_areas = "survey.gpkg"\ndrop_unsurveyed_sites = true'))
    with pytest.warns(DataQualityWarning, match="dropped"):
        dropped = prepare_samples(load_experiment(study / "drop.toml"), tmp_path / "d", cache_dir=tmp_path / "c",
                                  quiet=True)
    listed = pd.read_csv(tmp_path / "d" / "dropped_records.csv")
    listed = listed[listed["reason"].str.startswith("outside the survey areas")]
    assert sorted(listed["site_id"]) == sorted(inside.index[~inside.to_numpy()])
    assert listed["source_row"].notna().all()
    assert not set(listed["site_id"]) & set(dropped.table["site_id"])
    assert dropped.summary["n_sites_used"] == len(inside) - n_out
    # the key makes sense only with survey areas drawn "inside"
    from mlsites.errors import ConfigError

    (study / "nosurvey.toml").write_text(base.replace('survey_areas = "survey.gpkg"', "drop_unsurveyed_sites = true"))
    with pytest.raises(ConfigError, match=r"\[sampling.drop_unsurveyed_sites\] applies only with survey_areas"):
        load_experiment(study / "nosurvey.toml")


def test_features_that_copy_each_other_are_refused(study, tmp_path):
    # Issue 7: two input layers that are monotone transforms of each other over the study
    # area (here the DEM and its logarithm: Spearman rho = 1 by definition) are refused
    # with a line naming both.
    with rasterio.open(study / "dem.tif") as src:
        dem = src.read(1, masked=True).filled(np.nan)
    write_array(study / "log_dem.tif", np.log(dem).astype(np.float32), GRID, nodata=-9999.0)
    text = (study / "exp.toml").read_text().replace(
        "[terrain]", '[inputs]\nheight = { path = "dem.tif" }\nlog_height = { path = "log_dem.tif" }\n[terrain]')
    (study / "copies.toml").write_text(text)
    with pytest.raises(InputError, match=r"height and log_height \(Spearman rho = 1\.0000\).*Remove one layer"):
        prepare_samples(load_experiment(study / "copies.toml"), tmp_path / "x", cache_dir=tmp_path / "c", quiet=True)
    assert not (tmp_path / "x" / "samples.parquet").exists()
