"""The hillshade maps are drawn on (mlsites.terrain.hillshade)."""

import subprocess

import numpy as np
import pytest
import rasterio
from rasterio.crs import CRS
from rasterio.transform import from_origin
from scipy.ndimage import gaussian_filter

from mlsites.grid import GridSpec, write_array
from mlsites.terrain import hillshade
from tests.conftest import requires_gdaldem


@requires_gdaldem
@pytest.mark.gdal
def test_hillshade_matches_gdaldem(tmp_path):
    # GDAL 3.6 gdaldem hillshade (azimuth 315, altitude 45, z 1) writes round(1 + 254 * shade), 1 in shade
    # and 0 (nodata) on the border; a seeded smooth surface on 30 m cells
    rng = np.random.default_rng(0)
    dem = (gaussian_filter(rng.normal(size=(120, 150)), 5) * 3000 + 500).astype(np.float32)
    dem[50:55, 60:64] = np.nan
    grid = GridSpec(CRS.from_epsg(32633), from_origin(500000.0, 5000000.0, 30.0, 30.0), 150, 120)
    write_array(tmp_path / "dem.tif", dem, grid)
    subprocess.run(["gdaldem", "hillshade", str(tmp_path / "dem.tif"), str(tmp_path / "hs.tif"), "-q"],
                   check=True, capture_output=True)
    with rasterio.open(tmp_path / "hs.tif") as src:
        ref = src.read(1).astype(np.float64)
    ours = hillshade(dem, 30.0)
    valid = ref > 0
    np.testing.assert_array_equal(np.isfinite(ours), valid)
    assert np.abs(1 + 254 * ours[valid] - ref[valid]).max() <= 0.5 + 1e-6  # byte rounding
    assert valid.sum() > 0.9 * dem.size


def test_hillshade_of_a_plane():
    # analytic plane facing the sun (NW, 315 deg) at slope 45 deg: cos(45) cos(45) + sin(45) sin(45) = 1
    rows, cols = np.mgrid[0:5, 0:5].astype(float)
    dem = (rows + cols) / np.sqrt(2)  # rises to the south-east (rows run south): faces north-west
    np.testing.assert_allclose(hillshade(dem, 1.0)[1:-1, 1:-1], 1.0, atol=1e-12)
    np.testing.assert_allclose(hillshade(np.zeros((4, 4)), 1.0)[1:-1, 1:-1], np.cos(np.radians(45)), atol=1e-12)
