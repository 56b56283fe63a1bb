"""Tests of window-wise value extraction (mlsites.sampling.extract_values, read_valid_mask)."""

import numpy as np
import pytest
import rasterio
from affine import Affine
from rasterio.crs import CRS

from mlsites.errors import GridMismatchError, InputError
from mlsites.grid import GridSpec, read_array, write_array
from mlsites.sampling import extract_values, read_valid_mask

X0, Y0, CELL = 1000.0, 3000.0, 10.0
# float32 storage: values up to ~1e3 keep about 1e-4 absolute precision (STYLE.md §8 rtol 1e-4).
F32_RTOL = 1e-4


@pytest.fixture
def grid():
    return GridSpec(CRS.from_epsg(3857), Affine(CELL, 0, X0, 0, -CELL, Y0), 90, 70)


@pytest.fixture
def surface(grid):
    """Analytic plane z = 2 col + 3 row + 5 with a nodata hole, float32."""
    rows, cols = np.mgrid[0 : grid.height, 0 : grid.width]
    z = (2.0 * cols + 3.0 * rows + 5.0).astype(np.float32)
    z[10:14, 20:30] = np.nan
    return z


@pytest.fixture
def samples(grid):
    rng = np.random.default_rng(4)
    rows = rng.integers(0, grid.height, 500)
    cols = rng.integers(0, grid.width, 500)
    rows[:3], cols[:3] = 11, 25  # in the hole, repeated
    return rows, cols


def test_array_layer_equals_indexing(grid, surface, samples):
    rows, cols = samples
    table = extract_values({"z": surface}, rows, cols, grid)
    np.testing.assert_array_equal(table["z"].to_numpy(), surface[rows, cols].astype(np.float64))
    assert table["z"].dtype == np.float64 and len(table) == 500


@pytest.mark.parametrize("block_size", [7, 32, 1024])
def test_raster_windowed_equals_plane(grid, surface, samples, tmp_path, block_size):
    rows, cols = samples
    path = write_array(tmp_path / "z.tif", surface, grid)
    table = extract_values({"z": path}, rows, cols, grid, block_size=block_size)
    # Reference: the analytic plane 2 col + 3 row + 5, NaN in the hole.
    want = 2.0 * cols + 3.0 * rows + 5.0
    hole = (rows >= 10) & (rows < 14) & (cols >= 20) & (cols < 30)
    want[hole] = np.nan
    np.testing.assert_allclose(table["z"], want, rtol=F32_RTOL, atol=0, equal_nan=True)
    assert hole.sum() >= 3


def test_reprojected_layer_windowed_equals_whole_read(grid, tmp_path, samples):
    # A coarser layer (25 m cells) in another placement: warped on the fly.
    src_transform = Affine(25.0, 0, X0 - 40, 0, -25.0, Y0 + 30)
    rows_s, cols_s = np.mgrid[0:40, 0:45]
    z = (np.sin(rows_s / 5.0) + cols_s * 0.1).astype(np.float32)
    path = tmp_path / "coarse.tif"
    with rasterio.open(path, "w", driver="GTiff", width=45, height=40, count=1, dtype="float32",
                       crs=grid.crs, transform=src_transform, nodata=np.nan) as dst:
        dst.write(z, 1)
    rows, cols = samples
    for kind in ("continuous", "categorical"):
        whole = read_array(path, grid, kind=kind, dtype=np.float64)
        table = extract_values({"z": path}, rows, cols, grid, kinds=kind, block_size=16)
        # Equivalence windowed vs whole warp (STYLE.md §7); GDAL may resample window
        # edges in float32, hence the float32 tolerance.
        np.testing.assert_allclose(table["z"], whole[rows, cols], rtol=F32_RTOL, atol=1e-6,
                                   equal_nan=True)


def test_several_layers_keep_order(grid, surface, samples, tmp_path):
    rows, cols = samples
    path = write_array(tmp_path / "z.tif", surface, grid)
    other = np.arange(grid.n_cells, dtype=np.float64).reshape(grid.shape)
    table = extract_values({"b": other, "a": path}, rows, cols, grid, kinds={"a": "categorical"})
    assert list(table.columns) == ["b", "a"]
    np.testing.assert_array_equal(table["b"], rows * grid.width + cols)  # flat index by design


def test_no_samples(grid, surface):
    table = extract_values({"z": surface}, [], [], grid)
    assert list(table.columns) == ["z"] and len(table) == 0


def test_bad_inputs(grid, surface):
    with pytest.raises(InputError, match=r"1 sample cell\(s\) lie outside the \(70, 90\) grid "
                                         r"\(first: row 70, col 0\)"):
        extract_values({"z": surface}, [0, 70], [0, 0], grid)
    with pytest.raises(GridMismatchError, match=r"layer 'z' array has shape \(3, 3\)"):
        extract_values({"z": np.zeros((3, 3))}, [0], [0], grid)
    with pytest.raises(InputError, match="kinds names unknown layer"):
        extract_values({"z": surface}, [0], [0], grid, kinds={"q": "continuous"})


def test_read_valid_mask(grid, surface, tmp_path):
    path = write_array(tmp_path / "z.tif", surface, grid)
    mask = read_valid_mask(path, grid, block_rows=9)
    np.testing.assert_array_equal(mask, ~np.isnan(surface))
    assert mask.dtype == bool


def test_band_of_each_layer(tmp_path, grid, surface, samples):
    # Band 2 holds the analytic plane, band 1 its negative; the band asked for is read.
    path = tmp_path / "two.tif"
    with rasterio.open(path, "w", driver="GTiff", width=grid.width, height=grid.height, count=2,
                       dtype="float32", crs=grid.crs, transform=grid.transform, nodata=np.nan) as dst:
        dst.write(-surface, 1)
        dst.write(surface, 2)
    rows, cols = samples
    got = extract_values({"plane": path, "negative": path}, rows, cols, grid, bands={"plane": 2})
    np.testing.assert_array_equal(got["plane"], surface[rows, cols].astype(np.float64))
    np.testing.assert_array_equal(got["negative"], -surface[rows, cols].astype(np.float64))
    with pytest.raises(InputError, match=r"two\.tif: band 3 asked for, but the raster has 2 band\(s\)"):
        extract_values({"plane": path}, rows, cols, grid, bands={"plane": 3})
