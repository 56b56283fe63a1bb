"""check_model and ``mlsites check``: later-found sites against a model's map.

References: the constructed case of issue 8 (76 % of new sites in a high zone of 35 %
of the area gives Kvamme's gain 1 - 0.35/0.76, METHODS.md §5), METHODS.md §13 check
values for the Wilson interval and the one-sided binomial test, scipy.stats.binomtest
for both, sklearn.metrics.roc_auc_score for the AUC against all mapped cells, and the
map's own zones.tif (written by the map, read here with rasterio) for the zones.
"""

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
import shapely
from click.testing import CliRunner
from rasterio.transform import from_origin
from scipy import stats
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score

from mlsites.cli.main import cli
from mlsites.errors import InputError, InsufficientDataError, OutputExistsError
from mlsites.experiment._hashing import file_digest
from mlsites.experiment._models import save_model
from mlsites.grid import GridSpec, write_array
from mlsites.mapping import CHECK_FILES, ZONE_OUTSIDE, check_model, map_model
from tests.cli.test_run_cli import assert_user_error
from tests.mapping.test_map import copy_card, no_leftovers

CRS = "EPSG:32631"
ROWS, COLS, MAPPED_COLS = 40, 52, 50  # the last two columns are nodata: 40 x 50 = 2000 mapped cells
HIGH_SHARE = 0.35


def invoke(*args):
    return CliRunner().invoke(cli, list(map(str, args)))


# ------------------------------------------------------------------ the constructed map


@pytest.fixture(scope="module")
def toy(tmp_path_factory):
    """A model whose potential rises with one layer, mapped with a high zone of exactly 35 % of the cells.

    The layer holds each of 0 .. 1999 once (a seeded permutation) on the mapped cells;
    the logistic model's score is a strictly increasing function of it (positive
    slope), so the high zone is exactly the 700 cells of the highest values.
    """
    root = tmp_path_factory.mktemp("toy")
    grid = GridSpec(rasterio.crs.CRS.from_string(CRS), from_origin(600000.0, 4000000.0, 10.0, 10.0), COLS, ROWS)
    rng = np.random.default_rng(5)
    elev = np.full((ROWS, COLS), np.nan, dtype=np.float32)
    elev[:, :MAPPED_COLS] = rng.permutation(ROWS * MAPPED_COLS).reshape(ROWS, MAPPED_COLS)
    layer = write_array(root / "elev.tif", elev, grid, nodata=-9999.0)
    X = pd.DataFrame({"elev": np.arange(2000.0)})
    model = LogisticRegression().fit(X, (X["elev"] > 1000).astype(int))
    # a gentle slope keeps every score distinct in float32 (scores 0.12 .. 0.88)
    model.coef_[:] = 0.002
    model.intercept_[:] = -2.0
    entry = {"path": str(layer), "sha256": file_digest(layer)}
    extra = {
        "feature_layers": [{"name": "elev", "source": "input", "kind": "continuous", "band": 1, **entry}],
        "terrain": {"dem": entry, "settings": {}, "distances": {}, "stream_lines": None, "cache_folder": None},
        "zones": {"remainder": "low", "zones": [
            {"name": "high", "target": 0.7, "area_share": HIGH_SHARE, "heldout_site_share": 0.7,
             "heldout_site_share_ci_low": 0.6, "heldout_site_share_ci_high": 0.8, "n_heldout_sites": 50},
            {"name": "medium", "target": 0.9, "area_share": 0.6, "heldout_site_share": 0.9,
             "heldout_site_share_ci_low": 0.8, "heldout_site_share_ci_high": 0.95, "n_heldout_sites": 50}]},
        "site_buffer_m": 0.0,
    }
    saved = save_model(model, root / "models", "toy", features=["elev"], grid=grid, extra=extra)
    mapped = map_model(saved.card_path, root / "map", quiet=True)
    high = elev >= 2000 - HIGH_SHARE * 2000  # the 700 highest values
    return {"root": root, "grid": grid, "card": saved.card_path, "map": mapped.out_dir, "elev": elev, "high": high}


def cell_points(grid, cells):
    rows, cols = np.array([c[0] for c in cells]), np.array([c[1] for c in cells])
    x, y = grid.xy(rows, cols)
    return shapely.points(x, y)


def site_file(path, grid, cells, *, crs=CRS, ids=None):
    """A GeoPackage of point sites at the centres of ``cells`` (written in ``crs``)."""
    ids = ids or [f"N{i:03d}" for i in range(len(cells))]
    gdf = gpd.GeoDataFrame({"site_id": ids}, geometry=cell_points(grid, cells), crs=CRS).to_crs(crs)
    gdf.to_file(path, driver="GPKG")
    return path


def pick_cells(toy, n_high, n_other, seed=0):
    rng = np.random.default_rng(seed)
    high = np.argwhere(toy["high"])
    other = np.argwhere(~toy["high"] & np.isfinite(toy["elev"]))
    return ([tuple(c) for c in high[rng.choice(len(high), n_high, replace=False)]]
            + [tuple(c) for c in other[rng.choice(len(other), n_other, replace=False)]])


def test_the_constructed_map_has_a_high_zone_of_exactly_35_percent(toy):
    summary = json.loads((toy["map"] / "map.json").read_text())
    assert summary["cells"]["mapped"] == 2000
    assert summary["zones"][0]["name"] == "high" and summary["zones"][0]["area_share"] == HIGH_SHARE
    with rasterio.open(toy["map"] / "zones.tif") as src:
        zones = src.read(1)
    np.testing.assert_array_equal(zones == 3, toy["high"])


def test_76_of_100_sites_in_a_high_zone_of_35_percent_give_the_gain_1_minus_035_over_076(toy, tmp_path):
    sites = site_file(tmp_path / "new.gpkg", toy["grid"], pick_cells(toy, 76, 24))
    result = check_model(toy["card"], sites, map_dir=toy["map"], out_dir=tmp_path / "check")
    high = result.table.iloc[0]
    assert (high["zone"], high["n_sites"], high["sites_in_zone"], high["area_share"]) == ("high", 100, 76, 0.35)
    # Kvamme's gain, G = 1 - p_a / p_s (METHODS.md §5): 1 - 0.35 / 0.76 = 0.539474
    assert high["gain"] == pytest.approx(1 - 0.35 / 0.76, abs=1e-12)
    # reference: scipy.stats.binomtest (Wilson interval; one-sided test "greater")
    ref = stats.binomtest(76, 100, 0.35, alternative="greater")
    ci = stats.binomtest(76, 100).proportion_ci(method="wilson")
    assert high["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)
    assert (high["site_share_low"], high["site_share_high"]) == pytest.approx((ci.low, ci.high), abs=1e-12)
    table = pd.read_csv(tmp_path / "check" / "check.csv")
    assert table["gain"].iloc[0] == pytest.approx(0.539474, abs=1e-6)
    assert sorted(p.name for p in (tmp_path / "check").iterdir()) == sorted(CHECK_FILES)


def test_auc_is_against_every_mapped_cell_and_zones_follow_the_map(toy, tmp_path):
    cells = pick_cells(toy, 30, 20, seed=3)
    result = check_model(toy["card"], site_file(tmp_path / "new.gpkg", toy["grid"], cells), map_dir=toy["map"])
    with rasterio.open(toy["map"] / "potential.tif") as src:
        pot = src.read(1, masked=True).filled(np.nan).astype(np.float64)
    land = pot[np.isfinite(pot)]
    site = np.array([pot[r, c] for r, c in cells])
    # reference: scikit-learn's ROC AUC of the site cells against all 2000 mapped cells
    expected = roc_auc_score(np.r_[np.ones(site.size), np.zeros(land.size)], np.r_[site, land])
    assert result.table.iloc[-1]["auc"] == pytest.approx(expected, rel=1e-12)
    assert result.summary["landscape"]["cells"] == "all mapped cells"
    assert result.summary["landscape"]["n_cells"] == 2000
    # each site in the zone the map gives its cell
    with rasterio.open(toy["map"] / "zones.tif") as src:
        zones = src.read(1)
    names = {3: "high", 2: "medium", 1: "low"}
    assert result.sites["zone"].tolist() == [names[zones[r, c]] for r, c in cells]
    assert result.table.iloc[0]["sites_in_zone"] == 30


def test_a_large_landscape_is_a_stated_seeded_sample_whatever_the_strip_size(toy, tmp_path, monkeypatch):
    import mlsites.mapping._check as check_module

    sites = site_file(tmp_path / "new.gpkg", toy["grid"], pick_cells(toy, 10, 10))
    first = check_model(toy["card"], sites, map_dir=toy["map"], max_landscape_cells=500, random_state=7)
    monkeypatch.setattr(check_module, "_STRIP_CELLS", 3 * COLS)  # strips of 3 rows instead of the whole map
    second = check_model(toy["card"], sites, map_dir=toy["map"], max_landscape_cells=500, random_state=7)
    assert first.summary["landscape"]["cells"] == "random sample of mapped cells"
    assert first.summary["landscape"]["n_cells"] == 500 and first.summary["landscape"]["seed"] == 7
    pd.testing.assert_frame_equal(first.table, second.table)
    # reference: the same draw made by hand (ranks of mapped cells in row-major order)
    with rasterio.open(toy["map"] / "potential.tif") as src:
        pot = src.read(1, masked=True).filled(np.nan).astype(np.float64)
    land = pot[np.isfinite(pot)]
    drawn = land[np.sort(np.random.default_rng(7).integers(0, land.size, size=500))]
    site = np.array([pot[r, c] for r, c in pick_cells(toy, 10, 10)])
    expected = roc_auc_score(np.r_[np.ones(site.size), np.zeros(drawn.size)], np.r_[site, drawn])
    assert first.table.iloc[-1]["auc"] == pytest.approx(expected, rel=1e-12)


# ------------------------------------------------------------------ METHODS.md §13 through the command


@pytest.mark.parametrize("k, n, low, high, pvalue, p_tol, gain", [
    # METHODS.md §13 check values (k of n new sites in a high zone of 35 % of the area);
    # tolerance: half a unit of the last digit printed there
    (8, 10, 0.490162, 0.943318, 0.004821, 5e-7, 0.5625),
    (4, 10, 0.168180, 0.687326, 0.486173, 5e-7, 0.125),
    (31, 40, 0.624969, 0.876839, 4.88335e-08, 5e-14, 0.548387),
])
def test_methods_check_values_through_the_whole_command(toy, tmp_path, k, n, low, high, pvalue, p_tol, gain):
    sites = site_file(tmp_path / "new.gpkg", toy["grid"], pick_cells(toy, k, n - k))
    result = invoke("check", toy["card"], "--sites", sites, "--map", toy["map"], "--out", tmp_path / "out")
    assert result.exit_code == 0, result.output
    row = pd.read_csv(tmp_path / "out" / "check.csv").iloc[0]
    assert row["zone"] == "high" and row["area_share"] == 0.35
    assert (row["site_share_low"], row["site_share_high"]) == pytest.approx((low, high), abs=5e-7)
    assert row["p_value"] == pytest.approx(pvalue, rel=0, abs=p_tol)
    assert row["gain"] == pytest.approx(gain, abs=5e-7)
    # and the same numbers as scipy.stats.binomtest
    ci = stats.binomtest(k, n).proportion_ci(method="wilson")
    assert (row["site_share_low"], row["site_share_high"]) == pytest.approx((ci.low, ci.high), abs=1e-9)
    assert row["p_value"] == pytest.approx(stats.binomtest(k, n, 0.35, alternative="greater").pvalue, rel=1e-9)
    # the printed table and the verdict on few sites
    assert "high" in result.stdout and f"{k} of {n} new sites" in result.stdout
    verdict = next(line for line in result.stdout.splitlines() if line.startswith("high zone: "))
    chance = "cannot tell the model from chance" in verdict
    assert chance == (low <= 0.35 <= high)
    assert (f"Only {n} new sites: too few for a firm check" in verdict) == (n <= 10)


# ------------------------------------------------------------------ bad and awkward input


def test_sites_in_another_crs_are_reprojected_and_said(toy, tmp_path):
    cells = pick_cells(toy, 12, 8)
    here = check_model(toy["card"], site_file(tmp_path / "utm.gpkg", toy["grid"], cells), map_dir=toy["map"])
    lines = []
    there = check_model(toy["card"], site_file(tmp_path / "deg.gpkg", toy["grid"], cells, crs="EPSG:4326"),
                        map_dir=toy["map"], log=lines.append)
    assert any("from EPSG:4326 to the map's CRS EPSG:32631" in line for line in lines)
    assert there.summary["sites"]["reprojected"] == {"from": "EPSG:4326", "to": "EPSG:32631"}
    assert here.summary["sites"]["reprojected"] is None
    pd.testing.assert_frame_equal(here.table, there.table)


def test_sites_all_outside_the_grid_are_one_line_error_and_write_nothing(toy, tmp_path):
    gdf = gpd.read_file(site_file(tmp_path / "new.gpkg", toy["grid"], pick_cells(toy, 5, 5)))
    gdf.geometry = gdf.geometry.translate(100_000.0, 0.0)
    gdf.to_file(tmp_path / "far.gpkg", driver="GPKG")
    result = invoke("check", toy["card"], "--sites", tmp_path / "far.gpkg", "--map", toy["map"],
                    "--out", tmp_path / "out", "--quiet")
    assert_user_error(result, "far.gpkg", "all 10 site records lie outside the study grid")
    assert not (tmp_path / "out").exists() and no_leftovers(tmp_path)
    with pytest.raises(InsufficientDataError):
        check_model(toy["card"], tmp_path / "far.gpkg", map_dir=toy["map"])


def test_some_sites_outside_or_on_nodata_are_listed_and_dropped(toy, tmp_path):
    grid = toy["grid"]
    cells = pick_cells(toy, 8, 8)
    pts = list(cell_points(grid, cells))
    x0, y0 = grid.xy(0, 0)
    pts += [shapely.Point(x0 - 50.0, y0), shapely.Point(x0, y0 + 1000.0)]  # west and north of the grid
    pts += [shapely.Point(*grid.xy(5, COLS - 1))]  # a mapped-out (nodata) column
    ids = [f"N{i:03d}" for i in range(16)] + ["W1", "N1", "ND1"]
    # a polygon wholly on the nodata columns, and one across the edge of the mapped area
    xa, ya = grid.xy(10, MAPPED_COLS)
    pts += [shapely.box(xa - 4, ya - 4, xa + 14, ya + 4)]
    xb, yb = grid.xy(20, MAPPED_COLS - 1)
    pts += [shapely.box(xb - 4, yb - 4, xb + 14, yb + 4)]
    ids += ["NDP", "EDGE"]
    gpd.GeoDataFrame({"site_id": ids}, geometry=pts, crs=CRS).to_file(tmp_path / "new.gpkg", driver="GPKG")
    result = invoke("check", toy["card"], "--sites", tmp_path / "new.gpkg", "--map", toy["map"],
                    "--out", tmp_path / "out", "--quiet")
    assert result.exit_code == 0, result.output
    assert "17 of 21 site records checked; 4 dropped (see dropped_sites.csv)" in result.stdout
    dropped = pd.read_csv(tmp_path / "out" / "dropped_sites.csv")
    reasons = dict(zip(dropped["site_id"], dropped["reason"]))
    assert reasons == {"W1": "outside study area", "N1": "outside study area", "ND1": "on nodata cell",
                       "NDP": "no usable cell (outside study area or nodata)"}
    assert dropped.set_index("site_id").loc["W1", "source_row"] == 16
    summary = json.loads((tmp_path / "out" / "check.json").read_text())
    assert summary["counts"]["read"] == 21 and summary["counts"]["used"] == 17
    assert summary["counts"]["dropped_by_reason"] == {"outside study area": 2, "on nodata cell": 1,
                                                      "no usable cell (outside study area or nodata)": 1}
    sites = pd.read_csv(tmp_path / "out" / "check_sites.csv")
    assert sites.set_index("site_id").loc["EDGE", "n_cells"] == 1  # its cell on nodata is left out
    # no coordinates in any output unless asked
    assert not {"x", "y", "geometry"} & set(sites.columns)
    assert "x" not in pd.read_csv(tmp_path / "out" / "check.csv").columns


def test_coordinates_only_when_asked(toy, tmp_path):
    cells = pick_cells(toy, 3, 3)
    result = check_model(toy["card"], site_file(tmp_path / "new.gpkg", toy["grid"], cells), map_dir=toy["map"],
                         with_coordinates=True)
    x, y = toy["grid"].xy(np.array([c[0] for c in cells]), np.array([c[1] for c in cells]))
    np.testing.assert_allclose(result.sites["x"], x)
    np.testing.assert_allclose(result.sites["y"], y)


def test_existing_output_folder_is_refused_without_fresh(toy, tmp_path):
    sites = site_file(tmp_path / "new.gpkg", toy["grid"], pick_cells(toy, 4, 4))
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "keep.txt").write_text("mine")
    assert_user_error(invoke("check", toy["card"], "--sites", sites, "--map", toy["map"], "--out", tmp_path / "out",
                             "--quiet"), "exists already", "--fresh")
    assert [p.name for p in (tmp_path / "out").iterdir()] == ["keep.txt"]
    with pytest.raises(OutputExistsError):
        check_model(toy["card"], sites, map_dir=toy["map"], out_dir=tmp_path / "out")
    result = invoke("check", toy["card"], "--sites", sites, "--map", toy["map"], "--out", tmp_path / "out",
                    "--fresh", "--quiet")
    assert result.exit_code == 0, result.output
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == sorted(CHECK_FILES)


def test_a_model_file_failing_its_integrity_check_is_refused(study_run, study_data, tmp_path):
    card = copy_card(study_run, "logistic", tmp_path / "models")
    model = card.with_name("logistic.skops")
    model.write_bytes(model.read_bytes() + b"x")
    result = invoke("check", card, "--sites", study_data / "sites.gpkg", "--out", tmp_path / "out", "--quiet")
    assert_user_error(result, "logistic.skops", "SHA-256")
    assert not (tmp_path / "out").exists() and no_leftovers(tmp_path)


def test_a_map_of_another_card_is_refused(toy, study_run, tmp_path):
    sites = site_file(tmp_path / "new.gpkg", toy["grid"], pick_cells(toy, 4, 4))
    other = map_model(study_run.models_dir / "fuzzy.card.json", tmp_path / "fuzzy_map", quiet=True)
    with pytest.raises(InputError, match=r"was made from another model card .* give the map folder of this"):
        check_model(toy["card"], sites, map_dir=other.out_dir, out_dir=tmp_path / "out")
    assert not (tmp_path / "out").exists() and no_leftovers(tmp_path)


def test_without_a_map_the_card_is_mapped_into_a_temporary_folder_first(toy, tmp_path):
    sites = site_file(tmp_path / "new.gpkg", toy["grid"], pick_cells(toy, 9, 6))
    given = check_model(toy["card"], sites, map_dir=toy["map"])
    lines = []
    made = check_model(toy["card"], sites, out_dir=tmp_path / "out", log=lines.append, quiet=True)
    assert any("mapping toy.card.json into a temporary folder first" in line for line in lines)
    assert made.summary["map"]["source"] == "made for this check (temporary)"
    pd.testing.assert_frame_equal(given.table, made.table)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["new.gpkg", "out"]  # the temporary map is gone


# ------------------------------------------------------------------ real maps of the study


@pytest.fixture(scope="module")
def study_map(study_run, tmp_path_factory):
    return map_model(study_run.models_dir / "logistic.card.json", tmp_path_factory.mktemp("check_map") / "logistic",
                     quiet=True)


def test_training_sites_are_reported_and_zones_match_the_map(study_run, study_data, study_map, tmp_path):
    card = study_run.models_dir / "logistic.card.json"
    training = gpd.read_file(study_data / "sites.gpkg")
    result = check_model(card, study_data / "sites.gpkg", map_dir=study_map.out_dir)
    # every site read is one of the model's own training sites: same id and same place
    used = set(pd.read_parquet(study_run.run_dir / "samples" / "samples.parquet").query("label == 1")["site_id"])
    flagged = result.sites.set_index("site_id")["training_site"]
    assert set(flagged.index) == used
    assert (flagged == "same id and place").all()
    assert result.summary["training_sites"]["n_matching"] == len(used)
    # the same places under new ids, and new ids three cells away
    moved = training.assign(site_id=[f"L{i}" for i in range(len(training))])
    moved.to_file(tmp_path / "same_place.gpkg", driver="GPKG")
    moved.assign(geometry=moved.geometry.translate(30.0, 0.0)).to_file(tmp_path / "away.gpkg", driver="GPKG")
    same = check_model(card, tmp_path / "same_place.gpkg", map_dir=study_map.out_dir).sites
    assert (same["training_site"] == "same place").all()
    away = check_model(card, tmp_path / "away.gpkg", map_dir=study_map.out_dir).sites
    assert (away["training_site"] == "").mean() > 0.9  # a few may sit next to another training site
    # the zone of each single-zone site is the map's zone of its cells (zones.tif; 255 = outside the AOA)
    with rasterio.open(study_map.out_dir / "zones.tif") as src:
        zones = src.read(1)
    with rasterio.open(study_map.out_dir / "applicable.tif") as src:
        app = src.read(1)
        transform = src.transform
    assert (zones[app == 0] == ZONE_OUTSIDE).all()
    names = {z["code"]: z["name"] for z in study_map.summary["zones"]}
    gdf = training.to_crs(CRS)
    rows, cols = rasterio.transform.rowcol(transform, gdf.geometry.x, gdf.geometry.y)
    centre = dict(zip(gdf["site_id"], zip(rows, cols)))
    whole = result.sites[result.sites["zone_share"] == 1]
    for r in whole.itertuples():
        code = zones[centre[r.site_id]]
        if code != ZONE_OUTSIDE:
            assert names[code] == r.zone, r.site_id
    assert result.table.iloc[-1]["share_applicable"] == pytest.approx(
        np.average(result.sites["share_applicable"], weights=np.ones(len(result.sites))))


def test_the_run_maps_are_found_from_the_card(study_run, study_data, tmp_path):
    # the study run maps nothing: its card points at a run without maps, so the card is mapped first
    lines = []
    result = check_model(study_run.models_dir / "fuzzy.card.json", study_data / "sites.gpkg", log=lines.append,
                         quiet=True)
    assert any("no map at" in line and "maps/fuzzy" in line for line in lines)
    assert result.summary["map"]["source"] == "made for this check (temporary)"


# ------------------------------------------------------------------ in a run


NEW_SITES_CHECK = """
[check]
sites = "{sites}"
"""


@pytest.fixture(scope="module")
def checked_run(study_data, tmp_path_factory):
    from mlsites.experiment import run_experiment
    from tests.mapping.study import write_study_experiment

    folder = tmp_path_factory.mktemp("check_run")
    # later-found sites: random places in the study area, plus two training sites found again
    rng = np.random.default_rng(12)
    with rasterio.open(study_data / "dem.tif") as src:
        left, bottom, right, top = src.bounds
        crs = src.crs
    pts = shapely.points(rng.uniform(left + 50, right - 50, 30), rng.uniform(bottom + 50, top - 50, 30))
    found = gpd.GeoDataFrame({"site_id": [f"LF{i:02d}" for i in range(30)]}, geometry=pts, crs=crs)
    training = gpd.read_file(study_data / "sites.gpkg").to_crs(crs).iloc[:2][["site_id", "geometry"]]
    pd.concat([found, training], ignore_index=True).to_file(folder / "later.gpkg", driver="GPKG")
    path = write_study_experiment(folder, study_data, maps="best_and_baseline", use=("logistic", "fuzzy"))
    path.write_text(path.read_text() + NEW_SITES_CHECK.format(sites=folder / "later.gpkg"))
    return run_experiment(path, quiet=True, n_jobs=2), folder / "later.gpkg"


def test_a_run_checks_its_maps_on_the_later_found_sites(checked_run):
    run, sites = checked_run
    mapped = sorted(p.name for p in (run.run_dir / "maps").iterdir())
    assert mapped == ["fuzzy", "logistic"]
    assert sorted(p.name for p in (run.run_dir / "check").iterdir()) == mapped
    stage = run.manifest["stages"]["check"]
    assert sorted(stage["learners"]) == mapped
    for learner in mapped:
        folder = run.run_dir / "check" / learner
        assert sorted(p.name for p in folder.iterdir()) == sorted(CHECK_FILES)
        summary = json.loads((folder / "check.json").read_text())
        assert summary["map"]["source"] == "given"
        assert summary["training_sites"]["n_matching"] >= 2  # the two training sites found again
        # equivalence: the published card and map checked again give the same table
        again = check_model(run.models_dir / f"{learner}.card.json", sites)
        assert again.summary["map"]["source"] == "run map"
        pd.testing.assert_frame_equal(again.table, pd.read_csv(folder / "check.csv", dtype={"code": "Int64"}),
                                      check_dtype=False, rtol=1e-9)
        assert stage["learners"][learner]["sites_used"] == summary["counts"]["used"]
    assert "check: done" in (run.run_dir / "run.log").read_text()


def test_check_section_is_validated_with_the_rest(study_data, tmp_path):
    from mlsites.errors import ConfigError
    from mlsites.experiment import load_experiment
    from tests.mapping.study import write_study_experiment

    path = write_study_experiment(tmp_path, study_data, use=("logistic",))
    text = path.read_text()
    path.write_text(text + '\n[check]\nsites = "nowhere.gpkg"\nlearners = ["mlp"]\n')
    with pytest.raises(ConfigError) as err:
        load_experiment(path)
    assert "[check.sites] file not found" in str(err.value) and "[check.learners] ['mlp'] not among" in str(err.value)
    path.write_text(text + '\n[check]\nid_field = "code"\n')
    with pytest.raises(ConfigError, match=r"\[check.sites\] missing; \[check\] sets id_field"):
        load_experiment(path)


def test_a_run_learner_without_a_map_is_mapped_for_its_check(study_run, study_data, tmp_path):
    # check_in_run with a learner the run did not map: the card (as staged) is mapped
    # into a temporary folder with the staged training table, and nothing else is left
    from mlsites.experiment._stages import RunContext
    from mlsites.mapping._check import check_in_run

    staging = tmp_path / "staging"
    (staging / "samples").mkdir(parents=True)
    (staging / "samples" / "samples.parquet").write_bytes(
        (study_run.run_dir / "samples" / "samples.parquet").read_bytes())
    spec = {"sites": str(study_data / "sites.gpkg"), "layer": None, "id_field": "site_id", "x_field": None,
            "y_field": None, "crs": None, "learners": ["fuzzy"]}
    lines = []
    ctx = RunContext(exp={"check": spec}, name="mapstudy", run_dir=tmp_path / "run", models_dir=study_run.models_dir,
                     staging=staging, model_staging=study_run.models_dir, table=None, features=[], categorical=[],
                     grid=None, crossval=None, factories={}, splitter=None, seed=3, n_jobs=1, quiet=True,
                     log=lines.append)
    out = check_in_run(ctx)
    assert list(out["learners"]) == ["fuzzy"]
    assert any("mapping fuzzy.card.json into a temporary folder first" in line for line in lines)
    assert sorted(p.name for p in (staging / "check").iterdir()) == ["fuzzy"]
    assert sorted(p.name for p in (staging / "check" / "fuzzy").iterdir()) == sorted(CHECK_FILES)
    summary = json.loads((staging / "check" / "fuzzy" / "check.json").read_text())
    assert summary["training_sites"]["table"] == str(staging / "samples" / "samples.parquet")
    assert out["learners"]["fuzzy"]["training_sites"] == summary["counts"]["used"]  # its own training sites
    # nothing to do without [check] sites
    assert check_in_run(RunContext(**{**ctx.__dict__, "exp": {"check": {**spec, "sites": None}}})) is None


def test_a_csv_of_sites_needs_its_crs_and_may_use_other_columns(toy, tmp_path):
    cells = pick_cells(toy, 6, 4)
    pts = gpd.GeoSeries(cell_points(toy["grid"], cells), crs=CRS).to_crs("EPSG:4326")
    table = pd.DataFrame({"code": [f"C{i}" for i in range(len(cells))], "east_deg": pts.x, "north_deg": pts.y})
    table.to_csv(tmp_path / "new.csv", index=False)
    args = ["check", toy["card"], "--sites", tmp_path / "new.csv", "--map", toy["map"], "--id-field", "code",
            "--x-field", "east_deg", "--y-field", "north_deg"]
    assert_user_error(invoke(*args, "--out", tmp_path / "a", "--quiet"), "new.csv", "carries no CRS", "--crs")
    assert not (tmp_path / "a").exists()
    result = invoke(*args, "--crs", "EPSG:4326", "--out", tmp_path / "b")
    assert result.exit_code == 0, result.output
    assert "from EPSG:4326 to the map's CRS EPSG:32631" in result.stderr
    assert "10 of 10 site records checked" in result.stdout
    assert pd.read_csv(tmp_path / "b" / "check_sites.csv")["site_id"].tolist() == table["code"].tolist()
    assert pd.read_csv(tmp_path / "b" / "check.csv")["sites_in_zone"].iloc[0] == 6

