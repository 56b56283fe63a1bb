"""Template grid: cell geometry, alignment onto the grid, windows, atomic writing."""

import numpy as np
import pytest
import rasterio
from rasterio.crs import CRS
from rasterio.transform import from_origin
from pyproj import Transformer

from mlsites.errors import CRSError, InputError, RasterReadError
from mlsites.grid import (
    AlignedRaster,
    GridSpec,
    RasterWriter,
    iter_windows,
    metric_cell_sizes,
    read_array,
    read_grid,
    write_array,
)
from tests.conftest import assert_raster_allclose


def test_xy_rowcol_roundtrip(metric_grid):
    rows, cols = np.meshgrid(np.arange(metric_grid.height), np.arange(metric_grid.width), indexing="ij")
    x, y = metric_grid.xy(rows, cols)
    # Cell centres: half a cell in from the north-west corner (GDAL's pixel-is-area convention).
    assert x[0, 0] == 400005.0 and y[0, 0] == 4999995.0
    r2, c2 = metric_grid.rowcol(x, y)
    np.testing.assert_array_equal(r2, rows)
    np.testing.assert_array_equal(c2, cols)
    assert not metric_grid.contains(np.array([-1]), np.array([0]))[0]


def test_rotated_grid_refused():
    from affine import Affine

    with pytest.raises(InputError, match="north-up"):
        GridSpec(CRS.from_epsg(32631), Affine(10, 1, 0, 0, -10, 0), 5, 5)


@pytest.mark.parametrize(
    "lat, dx, dy",
    # METHODS.md §1 check values: 1 arc-second cells on WGS84 at 0, 45 and 60 degrees.
    [(0.0, 30.9221, 30.7151), (45.0, 21.9019, 30.8699), (60.0, 15.5000, 30.9479)],
)
def test_metric_cell_sizes_wgs84(lat, dx, dy):
    one_sec = 1.0 / 3600.0
    grid = GridSpec(CRS.from_epsg(4326), from_origin(10.0, lat + one_sec / 2, one_sec, one_sec), 3, 1)
    dxs, dys = metric_cell_sizes(grid)
    assert dxs[0] == pytest.approx(dx, abs=1e-3)
    assert dys[0] == pytest.approx(dy, abs=1e-3)


def test_metric_cell_sizes_against_pyproj_geodesic():
    # Independent reference: pyproj's geodesic distances on WGS84 between neighbouring cell centres.
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    res = 0.001
    grid = GridSpec(CRS.from_epsg(4326), from_origin(5.0, 52.0, res, res), 4, 3)
    dxs, dys = metric_cell_sizes(grid)
    for row in range(3):
        lat = 52.0 - (row + 0.5) * res
        _, _, east = geod.inv(5.0, lat, 5.0 + res, lat)
        _, _, north = geod.inv(5.0, lat - res / 2, 5.0, lat + res / 2)
        assert dxs[row] == pytest.approx(east, rel=1e-6)
        assert dys[row] == pytest.approx(north, rel=1e-6)


def test_write_read_roundtrip_and_profile(tmp_path, metric_grid):
    a = np.random.default_rng(0).normal(size=metric_grid.shape).astype(np.float32)
    a[3:7, 10:20] = np.nan
    path = write_array(tmp_path / "layer.tif", a, metric_grid, tags={"units": "m"}, description="layer")
    assert not list(tmp_path.glob(".*partial"))
    with rasterio.open(path) as ds:
        # What GIS users expect (brief): tiled, compressed, nodata set.
        assert ds.profile["tiled"] and ds.profile["compress"] == "zstd"
        assert np.isnan(ds.nodata)
        assert ds.tags()["units"] == "m"
        assert ds.descriptions == ("layer",)
    assert_raster_allclose(read_array(path), a, rtol=0)
    assert read_grid(path).same_as(metric_grid)


def test_overviews_built_for_larger_rasters(tmp_path):
    grid = GridSpec(CRS.from_epsg(32631), from_origin(0, 1000, 1, 1), 600, 520)
    write_array(tmp_path / "big.tif", np.ones(grid.shape, np.float32), grid)
    with rasterio.open(tmp_path / "big.tif") as ds:
        assert ds.overviews(1) == [2]


def test_failed_write_leaves_nothing(tmp_path, metric_grid):
    with pytest.raises(RuntimeError):
        with RasterWriter(tmp_path / "x.tif", metric_grid) as w:
            w.write(np.zeros(metric_grid.shape, np.float32))
            raise RuntimeError("boom")
    assert list(tmp_path.iterdir()) == []


def test_alignment_matches_independent_reprojection(tmp_path, metric_grid):
    # A linear field z = x + 2y on a coarser grid in a different CRS (ETRS89/LAEA ->
    # UTM 31N). Bilinear interpolation (upsampling) of a plane is exact, so the aligned
    # value at each target cell centre must equal the plane at that centre transformed
    # by pyproj (the reference); the 0.01 tolerance covers GDAL's approximate
    # transformer (0.001 cell) times the gradient. Downsampling is not tested this way:
    # GDAL then widens the kernel, which is not exact on planes.
    src_crs = CRS.from_epsg(3035)
    to_src = Transformer.from_crs(metric_grid.crs, src_crs, always_xy=True)
    cx, cy = metric_grid.xy(metric_grid.height / 2, metric_grid.width / 2)
    sx, sy = to_src.transform(cx, cy)
    src_grid = GridSpec(src_crs, from_origin(sx - 800, sy + 800, 25.0, 25.0), 64, 64)
    rows, cols = np.mgrid[0:64, 0:64]
    xs, ys = src_grid.xy(rows, cols)
    z = ((xs - sx) + 2 * (ys - sy)).astype(np.float64)
    write_array(tmp_path / "src.tif", z, src_grid)
    with AlignedRaster(tmp_path / "src.tif", metric_grid, kind="continuous") as r:
        assert r.reprojected
        got = r.read(dtype=np.float64)
    trows, tcols = np.mgrid[0 : metric_grid.height, 0 : metric_grid.width]
    tx, ty = metric_grid.xy(trows, tcols)
    ex, ey = to_src.transform(tx, ty)
    expected = (ex - sx) + 2 * (ey - sy)
    inside = ~np.isnan(got)
    assert inside.mean() > 0.9
    np.testing.assert_allclose(got[inside], expected[inside], atol=0.01)


def test_categorical_alignment_keeps_codes(tmp_path, metric_grid):
    # Nearest resampling never invents a class: every aligned value is a source code.
    src_grid = GridSpec(metric_grid.crs, from_origin(399990.0, 5000013.0, 3.3, 3.3), 220, 180)
    codes = np.random.default_rng(1).integers(1, 6, size=src_grid.shape).astype(np.uint8)
    write_array(tmp_path / "soil.tif", codes, src_grid, nodata=0)
    got = read_array(tmp_path / "soil.tif", metric_grid, kind="categorical")
    vals = np.unique(got[~np.isnan(got)])
    assert set(vals.astype(int)) <= {1, 2, 3, 4, 5}


def test_nodata_and_boundless_reads(tmp_path, metric_grid):
    a = np.arange(metric_grid.n_cells, dtype=np.float32).reshape(metric_grid.shape)
    write_array(tmp_path / "a.tif", np.where(a % 7 == 0, -9999, a).astype(np.float32), metric_grid, nodata=-9999.0)
    with AlignedRaster(tmp_path / "a.tif", metric_grid) as r:
        from rasterio.windows import Window

        block = r.read(Window(-2, -3, 10, 10))
    assert np.isnan(block[:3]).all() and np.isnan(block[:, :2]).all()
    inner = block[3:, 2:]
    expected = a[:7, :8]
    assert_raster_allclose(inner, np.where(expected % 7 == 0, np.nan, expected), rtol=0)


@pytest.mark.parametrize("block_rows, block_cols, halo", [(7, None, 0), (13, 9, 3), (100, 100, 5)])
def test_windows_cover_grid_once(metric_grid, block_rows, block_cols, halo):
    seen = np.zeros(metric_grid.shape, int)
    for w in iter_windows(metric_grid, block_rows=block_rows, block_cols=block_cols, halo=halo):
        r, c = int(w.core.row_off), int(w.core.col_off)
        seen[r : r + int(w.core.height), c : c + int(w.core.width)] += 1
        assert w.padded.width == w.core.width + 2 * halo
    assert (seen == 1).all()


def test_read_errors(tmp_path, metric_grid):
    with pytest.raises(RasterReadError, match="not found"):
        read_grid(tmp_path / "missing.tif")
    (tmp_path / "notes.txt").write_text("not a raster")
    with pytest.raises(RasterReadError, match="not a raster"):
        read_grid(tmp_path / "notes.txt")
    no_crs = GridSpec(None, metric_grid.transform, 5, 5)
    write_array(tmp_path / "nocrs.tif", np.zeros((5, 5), np.float32), no_crs)
    with pytest.raises(CRSError, match="no CRS"):
        read_grid(tmp_path / "nocrs.tif")


def test_grid_dict_roundtrip(metric_grid):
    # Model cards and manifests store grids as plain dicts (to_dict); they must come back equal.
    assert GridSpec.from_dict(metric_grid.to_dict()).same_as(metric_grid)


def test_integer_raster_without_nodata_refuses_nan(tmp_path, metric_grid):
    # A NaN written to an integer file without nodata would silently become data.
    a = np.zeros(metric_grid.shape)
    a[0, 0] = np.nan
    with pytest.raises(InputError, match="NaN"):
        with RasterWriter(tmp_path / "codes.tif", metric_grid, dtype=np.uint8) as w:
            w.write(a)
    assert list(tmp_path.iterdir()) == []
