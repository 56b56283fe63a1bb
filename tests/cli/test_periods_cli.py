"""``mlsites periods``: outputs, the METHODS.md §9 check values end to end, and bad input."""

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from click.testing import CliRunner
from rasterio.transform import from_origin
from scipy.ndimage import gaussian_filter

from mlsites.cli.main import cli
from mlsites.grid import GridSpec, write_array

GRID = GridSpec(rasterio.crs.CRS.from_epsg(32631), from_origin(700000.0, 5200000.0, 10.0, 10.0), 80, 70)
# METHODS.md §9: [-3450, -3150) and [-3350, -3250); a third site dated by category only
SITES = pd.DataFrame({"site_id": ["A", "B", "C"], "start": [-3450.0, -3350.0, np.nan],
                      "end": [-3150.0, -3250.0, np.nan], "phase": [None, None, "second"]})
CATEGORIES = '[periods.categories]\n"second" = [-3350, -3250]\n'


def _study(folder, sites=SITES, periods="", categories=CATEGORIES, width=100, span="span = [-3500, -3100]\n"):
    rng = np.random.default_rng(2)
    write_array(folder / "dem.tif", (gaussian_filter(rng.normal(size=GRID.shape), 5) * 500).astype(np.float32),
                GRID)
    x, y = GRID.xy(np.array([20, 40, 55])[: len(sites)], np.array([15, 35, 50])[: len(sites)])
    gpd.GeoDataFrame(sites, geometry=gpd.points_from_xy(x, y), crs=GRID.crs).to_file(folder / "sites.gpkg")
    (folder / "exp.toml").write_text(
        '[study]\nname = "t"\ndem = "dem.tif"\nseed = 4\n'
        '[sites]\npath = "sites.gpkg"\nstart_field = "start"\nend_field = "end"\n'
        '[periods]\n' f"block_width_years = {width}\n" + span + 'n_simulations = 400\nbandwidth_m = 80\n'
        'site_squares_m = 200\ncategory_field = "phase"\n' + periods + categories)
    return folder / "exp.toml"


def invoke(*args):
    return CliRunner().invoke(cli, ["periods", *map(str, args)])


def test_outputs_and_check_values(tmp_path):
    exp = _study(tmp_path, periods='min_probability = 0.4\n[periods.windows]\nmiddle = [-3400, -3200]\n')
    res = invoke(exp, "--out", tmp_path / "out", "--quiet")
    assert res.exit_code == 0, res.output
    out = tmp_path / "out"
    table = pd.read_csv(out / "blocks.csv")
    # METHODS.md §9 check values: the two sites give 1/6, 0.833333, 0.833333, 1/6; site C (= B) adds 0.5, 0.5
    np.testing.assert_allclose(table["aoristic_sum"], [1 / 6, 0.833333 + 0.5, 0.833333 + 0.5, 1 / 6],
                               rtol=0, atol=1e-6)
    assert "aoristic_sum" in res.stdout and "-3500.00" in res.stdout  # the table is printed
    summary = json.loads((out / "periods.json").read_text())
    assert summary["n_simulations"] == 400 and summary["seed"] == 4 and "uniform through time" in summary["null_model"]
    dates = pd.read_csv(out / "site_dates.csv")
    assert dates["source"].tolist() == ["years", "years", "category"]
    weights = pd.read_csv(out / "site_blocks.csv")
    np.testing.assert_allclose(weights.groupby("site_id")["weight"].sum(), 1.0, rtol=1e-12)
    w = pd.read_csv(out / "window_weights.csv")
    # A has 200 of its 300 years in [-3400, -3200); B and C all of theirs
    assert dict(zip(w["site_id"], w["probability"])) == pytest.approx({"A": 2 / 3, "B": 1.0, "C": 1.0})
    maps = sorted((out / "density").glob("*.tif"))
    assert len(maps) == 4 and (out / "site_counts.png").stat().st_size and (out / "density_maps.png").exists()
    with rasterio.open(maps[1]) as src:
        assert src.crs == GRID.crs and src.shape == GRID.shape and src.tags()["block_start"] == "-3400.0"
    # no table carries coordinates
    for csv in out.glob("*.csv"):
        assert not {"x", "y", "geometry"} & set(pd.read_csv(csv).columns), csv.name


def test_existing_folder_is_refused_unless_fresh(tmp_path):
    exp = _study(tmp_path)
    assert invoke(exp, "--out", tmp_path / "out", "-q").exit_code == 0
    res = invoke(exp, "--out", tmp_path / "out", "-q")
    assert res.exit_code == 2 and "exists already; use --fresh" in res.stderr
    assert invoke(exp, "--out", tmp_path / "out", "-q", "--fresh", "--show-sites").exit_code == 0
    assert json.loads((tmp_path / "out" / "periods.json").read_text())["show_sites"] is True


def test_default_folder_is_beside_the_runs(tmp_path):
    exp = _study(tmp_path)
    assert invoke(exp, "-q").exit_code == 0
    assert (tmp_path / "runs" / "t_periods" / "blocks.csv").exists()


def _bad_study(tmp_path, case):
    """The study with one kind of bad date input (see the cases below)."""
    sites, periods, kw = SITES.copy(), "", {}
    if case == "end_before_start":
        sites.loc[0, ["start", "end"]] = [-3150.0, -3450.0]
    elif case == "category_missing":
        sites.loc[2, "phase"] = "third"
    elif case == "window_outside":
        periods = "[periods.windows]\nfar = [500, 600]\n"
    elif case == "narrow_blocks":
        kw = {"width": 0.5}
    else:  # one-year blocks over the sites' own span, which reaches back to -20000
        sites.loc[0, "start"] = -20000.0
        kw = {"width": 1, "span": ""}
    return _study(tmp_path, sites=sites, periods=periods, **kw)


@pytest.mark.parametrize("case, fragment", [
    ("end_before_start", "have an end year before their start year"),
    ("category_missing", "'third' (1 record)"),
    ("window_outside", "time window 'far' [500, 600) overlaps no site's date range"),
    ("narrow_blocks", "[periods.block_width_years] 0.5 years; blocks must be at least a year wide"),
    ("too_many_blocks", "at most 10000 are allowed"),
])
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, case, fragment):
    exp = _bad_study(tmp_path, case)
    res = invoke(exp, "--out", tmp_path / "out", "-q")
    assert res.exit_code == 2, res.output
    assert fragment in res.stderr and "Traceback" not in res.stderr
    errors = [ln for ln in res.stderr.splitlines() if not ln.startswith("mlsites: warning")]
    # one problem, one line (an experiment-file problem too)
    assert len(errors) == 1 and errors[0].startswith("mlsites: error: "), res.stderr
    assert not (tmp_path / "out").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize("case, fragment", [
    ("end_before_start", "have an end year before their start year"),
    ("category_missing", "'third' (1 record)"),
    ("window_outside", "time window 'far' [500, 600) overlaps no site's date range"),
    ("too_many_blocks", "at most 10000 are allowed"),
])
def test_a_run_with_bad_dates_stops_at_its_checks(tmp_path, case, fragment):
    # the same bad input through `mlsites run`: caught with the run's other checks, before any
    # sampling, so no run folder and no cache is made
    exp = _bad_study(tmp_path, case)
    before = set(tmp_path.iterdir())
    res = CliRunner().invoke(cli, ["run", str(exp), "--quiet"])
    assert res.exit_code == 2, res.output
    errors = [ln for ln in res.stderr.splitlines() if not ln.startswith("mlsites: warning")]
    assert len(errors) == 1 and errors[0].startswith("mlsites: error: ") and fragment in errors[0], res.stderr
    assert set(tmp_path.iterdir()) == before  # nothing written, not even runs/.cache
