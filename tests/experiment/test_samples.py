"""The one sample table and fold assignment of an experiment (terrain -> sites -> samples -> folds)."""

import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.transform import from_origin
from scipy.ndimage import gaussian_filter

from mlsites.errors import InsufficientDataError, OutputExistsError
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
    # METHODS.md §7: each site's cell weights sum to one; balanced background weight.
    np.testing.assert_allclose(pres.groupby("site_id")["weight"].sum(), 1.0, rtol=1e-12)
    assert bg["weight"].sum() == pytest.approx(pres["weight"].sum(), rel=1e-12)
    assert (pres.groupby("site_id")["fold"].nunique() == 1).all()
    assert set(t["fold"]) == {0, 1, 2}
    assert not t[a.features].isna().any().any()
    assert a.features == ["slope", "northness", "tpi_50m", "tpi_50m_std", "landform"]
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
