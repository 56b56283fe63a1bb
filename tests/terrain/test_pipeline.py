"""The terrain stage on files: windowed equals whole, outputs GIS users expect, bad input."""

import json

import numpy as np
import pytest
import rasterio
from click.testing import CliRunner
from rasterio.crs import CRS
from rasterio.transform import from_origin

from mlsites import terrain
from mlsites.cli.main import cli
from mlsites.grid import GridSpec, read_array, write_array
from mlsites.terrain import TerrainSettings, compute_terrain
from tests.conftest import assert_raster_allclose

LOCAL = ("slope", "aspect", "northness", "eastness", "tpi", "ruggedness", "roughness",
         "profile_curvature", "plan_curvature", "landform")
HYDRO = ("filled_dem", "flow_direction", "flow_accumulation", "streams", "stream_distance",
         "height_above_drainage")


def _dem_with_holes(shape=(90, 70), seed=0):
    """A smooth random surface (Gaussian-filtered noise, invented) with nodata holes."""
    from scipy.ndimage import gaussian_filter

    rng = np.random.default_rng(seed)
    z = gaussian_filter(rng.normal(size=shape), 4) * 400 + np.linspace(0, 60, shape[1])
    z[10:14, 20:27] = np.nan
    z[60:62, 5:9] = np.nan
    z[:, -1][::3] = np.nan
    return z.astype(np.float32)


@pytest.fixture
def dem_file(tmp_path):
    grid = GridSpec(CRS.from_epsg(32631), from_origin(500000.0, 5100000.0, 10.0, 10.0), 70, 90)
    path = tmp_path / "dem.tif"
    write_array(path, _dem_with_holes(), grid, nodata=-9999.0)
    return path


@pytest.mark.parametrize("block_rows", [1, 7, 33])
def test_windowed_equals_whole(tmp_path, dem_file, block_rows):
    # Brief: results identical whether a raster is processed whole or in windows of
    # any size, on a DEM with nodata holes. Reference = the whole-array call of each layer.
    settings = TerrainSettings(layers=LOCAL, tpi_radii_m=(30.0, 55.0), landform_lookup_cells=6,
                               block_rows=block_rows)
    summary = compute_terrain(dem_file, tmp_path / "out", settings, quiet=True)
    dem = read_array(dem_file, dtype=np.float64)
    whole = {
        "slope": terrain.slope(dem, 10.0),
        "aspect": np.where(np.isnan(terrain.aspect(dem, 10.0)) & ~np.isnan(terrain.slope(dem, 10.0)), -1.0,
                           terrain.aspect(dem, 10.0)),
        "ruggedness": terrain.ruggedness(dem),
        "plan_curvature": terrain.plan_curvature(dem, 10.0),
        "tpi_55m": terrain.tpi(dem, 10.0, radius=55.0),
        "landform": terrain.geomorphons(dem, 10.0, lookup_cells=6),
    }
    for name, expected in whole.items():
        got = read_array(tmp_path / "out" / f"{name}.tif", dtype=np.float64)
        if name == "landform":
            expected = np.where(expected == 0, np.nan, expected)
        # float32 files: compare at float32 precision.
        assert_raster_allclose(got, expected.astype(np.float32), rtol=1e-6, atol=1e-6, err_msg=name)
    tpi = read_array(tmp_path / "out" / "tpi_30m.tif", dtype=np.float64)
    std = read_array(tmp_path / "out" / "tpi_30m_std.tif", dtype=np.float64)
    # Standardised with population mean and sd over the study area (numpy as reference).
    assert_raster_allclose(std, (tpi - np.nanmean(tpi)) / np.nanstd(tpi), rtol=1e-5, atol=1e-5)
    assert set(summary["layers"]) >= {"slope", "tpi_30m", "tpi_30m_std", "landform"}


def test_windowed_results_identical_across_sizes(tmp_path, dem_file):
    outs = []
    for rows in (5, 90):
        d = tmp_path / f"w{rows}"
        compute_terrain(dem_file, d, TerrainSettings(layers=("tpi", "slope"), tpi_radii_m=(40.0,),
                                                     block_rows=rows), quiet=True)
        outs.append({n: read_array(d / f"{n}.tif") for n in ("tpi_40m", "tpi_40m_std", "slope")})
    for n in outs[0]:
        np.testing.assert_array_equal(outs[0][n], outs[1][n], err_msg=n)


def test_outputs_are_tiled_compressed_with_metadata(tmp_path, dem_file):
    compute_terrain(dem_file, tmp_path / "o", TerrainSettings(layers=("slope", "landform", "streams"),
                                                              landform_lookup_cells=5), quiet=True)
    with rasterio.open(tmp_path / "o" / "slope.tif") as ds:
        assert ds.profile["tiled"] and ds.profile["compress"] == "zstd" and np.isnan(ds.nodata)
        assert ds.tags()["units"] == "degrees"
    with rasterio.open(tmp_path / "o" / "landform.tif") as ds:
        tags = ds.tags()
        assert ds.nodata == 0 and ds.dtypes[0] == "uint8"
        assert sorted(k for k in tags if k.startswith("class_")) == sorted(f"class_{i}" for i in range(1, 11))
        # published class names (Jasiewicz & Stepinski 2013), lowest to highest position
        assert (tags["class_1"], tags["class_5"], tags["class_10"]) == ("pit", "flat", "peak")
    summary = json.loads((tmp_path / "o" / "terrain.json").read_text())
    assert summary["layers"]["slope"]["file"] == "slope.tif"
    assert not [p for p in (tmp_path / "o").iterdir() if p.name.startswith(".")]


def test_layer_statistics_match_numpy_over_any_windows(tmp_path, dem_file):
    # terrain.json statistics of a layer equal NumPy's over the whole file (float64
    # nanmean / nanstd with ddof 0 / nanmin / nanmax, the reference), for windows of
    # 1, 13 and all rows.
    for rows in (1, 13, 90):
        summary = compute_terrain(dem_file, tmp_path / f"s{rows}", TerrainSettings(layers=("slope", "tpi"),
                                  tpi_radii_m=(30.0,), block_rows=rows), quiet=True)
        for name in ("slope", "tpi_30m"):
            values = terrain.slope(read_array(dem_file, dtype=np.float64), 10.0) if name == "slope" else \
                terrain.tpi(read_array(dem_file, dtype=np.float64), 10.0, radius=30.0)
            got = summary["layers"][name]
            assert got["valid_cells"] == int(np.count_nonzero(~np.isnan(values)))
            for key, ref in (("mean", np.nanmean), ("std", np.nanstd), ("min", np.nanmin), ("max", np.nanmax)):
                assert got[key] == pytest.approx(ref(values), rel=1e-12, abs=1e-12), (rows, name, key)


def test_flat_cells_marked_in_aspect_file(tmp_path):
    # A plateau (constant block) inside a plane: aspect is undefined on the plateau
    # (METHODS.md §1, constant window) and the file marks it -1, not nodata.
    grid = GridSpec(CRS.from_epsg(32631), from_origin(0.0, 1000.0, 10.0, 10.0), 30, 30)
    z = np.add.outer(np.zeros(30), np.arange(30) * 2.0).astype(np.float32)
    z[10:20, 10:20] = 50.0
    write_array(tmp_path / "dem.tif", z, grid)
    compute_terrain(tmp_path / "dem.tif", tmp_path / "o", TerrainSettings(layers=("aspect",)), quiet=True)
    aspect = read_array(tmp_path / "o" / "aspect.tif")
    assert (aspect[12:18, 12:18] == -1).all()
    # Plane falling to the west (z grows east): aspect 270 degrees (METHODS.md §1 check values).
    np.testing.assert_allclose(aspect[3, 1:8], 270.0, atol=1e-4)
    assert np.isnan(aspect[0]).all()


def test_hydrology_files_match_array_chain(tmp_path, dem_file):
    compute_terrain(dem_file, tmp_path / "h", TerrainSettings(layers=HYDRO, stream_threshold_km2=0.05),
                    quiet=True)
    dem = read_array(dem_file)
    ref = terrain.hydrology_layers(dem, 10.0, stream_threshold_km2=0.05)
    # uint32 counts in the file, 0 = nodata (read back as NaN).
    acc = np.asarray(ref["accumulation"], np.float32)
    np.testing.assert_array_equal(read_array(tmp_path / "h" / "flow_accumulation.tif"),
                                  np.where(acc == 0, np.nan, acc))
    streams = read_array(tmp_path / "h" / "streams.tif")
    assert set(np.unique(streams[~np.isnan(streams)])) <= {0.0, 1.0}


def test_vector_distance_layer(tmp_path, dem_file):
    # Distance to a single point feature: the exact Euclidean distance from each cell
    # centre to the centre of the cell holding the point (analytic reference).
    import geopandas as gpd
    from shapely.geometry import Point

    grid = GridSpec(CRS.from_epsg(32631), from_origin(500000.0, 5100000.0, 10.0, 10.0), 70, 90)
    x, y = grid.xy(40, 30)
    gpd.GeoDataFrame(geometry=[Point(x, y)], crs="EPSG:32631").to_file(tmp_path / "well.gpkg")
    compute_terrain(dem_file, tmp_path / "d", TerrainSettings(layers=(), vectors={"well": tmp_path / "well.gpkg"}),
                    quiet=True)
    got = read_array(tmp_path / "d" / "distance_well.tif", dtype=np.float64)
    rows, cols = np.mgrid[0:90, 0:70]
    expected = np.hypot((rows - 40) * 10.0, (cols - 30) * 10.0)
    expected[np.isnan(read_array(dem_file))] = np.nan
    assert_raster_allclose(got, expected, rtol=1e-6, atol=1e-3)


def _run(args):
    return CliRunner().invoke(cli, args)


def test_cli_writes_layers(tmp_path, dem_file):
    res = _run(["terrain", str(dem_file), "--out", str(tmp_path / "c"), "--layers", "slope,aspect", "--quiet"])
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in (tmp_path / "c").iterdir()) == ["aspect.tif", "slope.tif", "terrain.json"]


def _assert_clean_error(res, out_dir, pattern):
    assert res.exit_code == 2, res.output
    assert "Traceback" not in res.output
    lines = [ln for ln in res.output.strip().splitlines() if ln]
    assert len(lines) == 1 and pattern in lines[0], res.output
    assert not out_dir.exists() or not any(out_dir.iterdir())


def test_cli_bad_inputs(tmp_path, dem_file):
    out = tmp_path / "bad"
    _assert_clean_error(_run(["terrain", str(tmp_path / "nope.tif"), "--out", str(out)]), out, "not found")
    (tmp_path / "text.tif").write_text("hello")
    _assert_clean_error(_run(["terrain", str(tmp_path / "text.tif"), "--out", str(out)]), out, "not a raster")
    _assert_clean_error(_run(["terrain", str(dem_file), "--out", str(out), "--layers", "slop"]), out,
                        "unknown terrain layer 'slop'")
    _assert_clean_error(_run(["terrain", str(dem_file), "--out", str(out), "--layers", "tpi",
                              "--tpi-radii", "5"]), out, "smaller than one cell")
    grid = GridSpec(CRS.from_epsg(32631), from_origin(0, 100, 10, 10), 5, 5)
    write_array(tmp_path / "empty.tif", np.full((5, 5), -9999, np.float32), grid, nodata=-9999.0)
    _assert_clean_error(_run(["terrain", str(tmp_path / "empty.tif"), "--out", str(out)]), out, "nodata")
    tiny = GridSpec(CRS.from_epsg(32631), from_origin(0, 100, 10, 10), 2, 2)
    write_array(tmp_path / "tiny.tif", np.ones((2, 2), np.float32), tiny)
    _assert_clean_error(_run(["terrain", str(tmp_path / "tiny.tif"), "--out", str(out)]), out, "smaller than")


def test_cli_refuses_to_overwrite(tmp_path, dem_file):
    out = tmp_path / "o"
    assert _run(["terrain", str(dem_file), "--out", str(out), "--layers", "slope", "-q"]).exit_code == 0
    before = (out / "slope.tif").stat().st_mtime_ns
    res = _run(["terrain", str(dem_file), "--out", str(out), "--layers", "slope", "-q"])
    assert res.exit_code == 2 and "--overwrite" in res.output
    assert (out / "slope.tif").stat().st_mtime_ns == before
    assert _run(["terrain", str(dem_file), "--out", str(out), "--layers", "slope", "-q", "--overwrite"]).exit_code == 0


def test_geographic_dem(tmp_path):
    # A degree grid: slope with per-row metric spacing is allowed; TPI is refused with a
    # message on how to reproject (brief: never silently wrong slopes).
    grid = GridSpec(CRS.from_epsg(4326), from_origin(10.0, 45.01, 1 / 3600, 1 / 3600), 40, 36)
    z = np.add.outer(np.arange(36) * 2.0, np.arange(40) * 1.0).astype(np.float32)
    write_array(tmp_path / "geo.tif", z, grid)
    res = _run(["terrain", str(tmp_path / "geo.tif"), "--out", str(tmp_path / "g"), "--layers", "slope", "-q"])
    assert res.exit_code == 0, res.output
    slope = read_array(tmp_path / "g" / "slope.tif", dtype=np.float64)
    from mlsites.grid import metric_cell_sizes

    dx, dy = metric_cell_sizes(grid)
    # Plane: dz/dx = 1 m per cell east, dz/dy = 2 m per cell south (rows increase south).
    expected = np.degrees(np.arctan(np.hypot(1.0 / dx, 2.0 / dy)))
    np.testing.assert_allclose(slope[1:-1, 1:-1], np.broadcast_to(expected[1:-1, None], (34, 38)), atol=1e-4)
    res = _run(["terrain", str(tmp_path / "geo.tif"), "--out", str(tmp_path / "g2"), "--layers", "tpi"])
    assert res.exit_code == 2 and "gdalwarp" in res.output


def test_dem_read_once_per_pass(tmp_path, dem_file, monkeypatch):
    # issue 7: the DEM was read five times; now once by the windowed pass and once
    # whole for hydrology and distances together. Counted as grid cells read from the
    # DEM (reads past the grid edge return NaN without reading and are not counted).
    import geopandas as gpd
    from shapely.geometry import LineString

    from mlsites.grid import AlignedRaster, read_grid

    grid = read_grid(dem_file)
    left, bottom, right, top = grid.bounds
    gpd.GeoDataFrame(geometry=[LineString([(left, bottom), (right, top)])], crs=grid.crs).to_file(
        tmp_path / "road.gpkg")
    cells = []
    real_read = AlignedRaster.read

    def counting_read(self, window=None, **kw):
        out = real_read(self, window, **kw)
        if self.path == dem_file:
            cells.append(grid.n_cells if window is None else _cells_on_grid(window, grid))
        return out

    monkeypatch.setattr(AlignedRaster, "read", counting_read)
    settings = TerrainSettings(layers=("slope", "tpi", "streams", "stream_distance"), tpi_radii_m=(30.0,),
                               vectors={"road": str(tmp_path / "road.gpkg")}, stream_threshold_km2=0.01,
                               block_rows=1000)
    compute_terrain(dem_file, tmp_path / "o", settings, quiet=True)
    assert sum(cells) == 2 * grid.n_cells  # one windowed pass + one whole read


def _cells_on_grid(window, grid):
    r0, c0 = max(int(window.row_off), 0), max(int(window.col_off), 0)
    r1 = min(int(window.row_off + window.height), grid.height)
    c1 = min(int(window.col_off + window.width), grid.width)
    return max(r1 - r0, 0) * max(c1 - c0, 0)
