"""``mlsites sample`` from flags: the sample table, and bad input as one line with exit 2."""

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from click.testing import CliRunner
from rasterio.transform import from_origin
from scipy.ndimage import gaussian_filter
from shapely.geometry import box

from mlsites.cli.main import cli
from mlsites.grid import GridSpec, write_array

GRID = GridSpec(rasterio.crs.CRS.from_epsg(32631), from_origin(700000.0, 5200000.0, 10.0, 10.0), 80, 70)


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """An invented study: smooth relief and 30 random point sites (CSV and GeoPackage)."""
    d = tmp_path_factory.mktemp("flags")
    rng = np.random.default_rng(9)
    write_array(d / "dem.tif", (gaussian_filter(rng.normal(size=GRID.shape), 6) * 900).astype(np.float32), GRID)
    flat = rng.choice(64 * 74, 30, replace=False)
    rows, cols = 3 + flat // 74, 3 + flat % 74
    x, y = GRID.xy(rows, cols)
    table = pd.DataFrame({"site_id": [f"S{i}" for i in range(30)], "easting": x, "northing": y})
    table.to_csv(d / "sites.csv", index=False)
    gpd.GeoDataFrame(table, geometry=gpd.points_from_xy(x, y), crs=GRID.crs).to_file(d / "sites.gpkg")
    with pytest.warns(UserWarning, match="crs"):  # pyogrio warns about the missing CRS on purpose
        gpd.GeoDataFrame(table, geometry=gpd.points_from_xy(x, y)).to_file(d / "nocrs.geojson")
    table.assign(easting=x + 1e6).to_csv(d / "far.csv", index=False)
    table.drop(columns=["easting", "northing"]).to_csv(d / "nocoords.csv", index=False)
    gpd.GeoDataFrame({"effort": [1.0]}, geometry=[box(0, 0, 1000, 1000)], crs=GRID.crs).to_file(d / "away.gpkg")
    return d


BASE = ["--terrain-layers", "slope,northness", "--background", "300", "--folds", "3", "--block-size", "200",
        "--seed", "3", "--quiet"]


def invoke(*args):
    return CliRunner().invoke(cli, ["sample", *map(str, args)])


def test_flags_build_the_sample_table(study, tmp_path):
    res = invoke("--dem", study / "dem.tif", "--sites", study / "sites.csv", "--crs", "EPSG:32631",
                 "--out", tmp_path / "s", *BASE)
    assert res.exit_code == 0, res.output
    t = pd.read_parquet(tmp_path / "s" / "samples.parquet")
    assert {"sample_id", "label", "weight", "site_id", "fold", "x", "y", "slope", "northness"} <= set(t.columns)
    # Every site read is used (sites were placed away from the edges), one fold per site.
    assert t.loc[t["label"] == 1, "site_id"].nunique() == 30
    assert (t[t["label"] == 1].groupby("site_id")["fold"].nunique() == 1).all()


@pytest.mark.parametrize("case, fragment", [
    ("csv_without_coordinates", "nocoords.csv"),
    ("sites_without_crs", "nocrs.geojson"),
    ("all_sites_outside", "far.csv"),
    ("survey_not_overlapping", "away.gpkg"),
    ("more_folds_than_sites", "30 usable site(s) but 40 folds"),
])
def test_bad_input_one_line_exit_2_nothing_written(study, tmp_path, case, fragment):
    out = tmp_path / "out"
    args = {
        "csv_without_coordinates": ["--sites", study / "nocoords.csv", "--crs", "EPSG:32631"],
        "sites_without_crs": ["--sites", study / "nocrs.geojson"],
        "all_sites_outside": ["--sites", study / "far.csv", "--crs", "EPSG:32631"],
        "survey_not_overlapping": ["--sites", study / "sites.gpkg", "--survey", study / "away.gpkg"],
        "more_folds_than_sites": ["--sites", study / "sites.gpkg"],
    }[case]
    extra = ["--folds", "40"] if case == "more_folds_than_sites" else []
    res = invoke("--dem", study / "dem.tif", *args, "--out", out, *BASE, *extra)
    assert res.exit_code == 2, res.output
    # One error line (warnings about dropped records may come before it), no traceback.
    errors = [ln for ln in res.stderr.strip().splitlines() if not ln.startswith("mlsites: warning: ")]
    assert len(errors) == 1 and errors[0].startswith("mlsites: error: ") and fragment in errors[0], res.stderr
    assert "Traceback" not in res.output
    assert not (out / "samples.parquet").exists()
    assert not [p for p in out.rglob("*") if "partial" in p.name] if out.exists() else True
