"""Cross-checks of the local terrain derivatives against GDAL's gdaldem.

gdaldem (GDAL's DEM-processing command) is an independent implementation of Horn
slope and aspect, the 3x3 TPI, both TRI variants and roughness (METHODS.md §1, §2
name it as the cross-check). Each test writes one DEM to a GeoTIFF in a projected
CRS with the cell size set explicitly, runs gdaldem on it, and compares the
interior cells with our result for the same array.

DEMs: (1) the sample DEM matplotlib ships, a 3-arc-second geographic grid that both
tools receive as the same array on a 90 m metric grid (the comparison is between
implementations, not about that place); (2) a seeded fractal surface made below by
spectral synthesis, with a nodata hole.

gdaldem is run without ``-compute_edges``, so its one-cell border is nodata like
ours, and without ``-zero_for_flat``, so flat cells get nodata in its aspect where
ours has NaN. GDAL (3.6 here) sums the window in float32 and writes float32, which
sets the tolerances below.
"""

import subprocess

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

from mlsites.terrain import (
    aspect,
    roughness,
    ruggedness,
    ruggedness_mean_abs,
    slope,
    slope_aspect,
    tpi3,
)
from tests.conftest import assert_raster_allclose, requires_gdaldem

pytestmark = [pytest.mark.gdal, requires_gdaldem]

# Tolerances (both DEMs have elevations below ~1100 m and 90 m cells).
# float32 has 24 bits: a window sum of elevations near 1000 m is rounded to ~1e-4 m,
# i.e. a gradient error near 1e-4 / (8 * 90) ~ 2e-7 m/m, 1e-5 degrees; the float32
# output adds ~4e-6 degrees. 1e-3 degrees leaves a wide margin.
SLOPE_TOL_DEG = 1e-3
SLOPE_TOL_PERCENT = 2e-3  # same error in percent (100 * gradient), plus float32 output
# The same gradient error turns the aspect by about 2e-7 / |gradient| radians; on
# cells steeper than 0.01 m/m that is under 0.002 degrees.
ASPECT_MIN_GRADIENT = 0.01
ASPECT_TOL_DEG = 1e-2
# TPI, TRI and roughness: differences of float32 elevations near 1000 m (ulp 6e-5 m)
# summed over 8 neighbours, then a float32 result.
ELEVATION_TOL_M = 2e-3

CELL_M = 90.0
INNER = (slice(1, -1), slice(1, -1))


def sample_dem_from_matplotlib():
    cbook = pytest.importorskip("matplotlib.cbook")
    # the sample DEM matplotlib ships (int16 metres on a 3-arc-second grid)
    return cbook.get_sample_data("jacksboro_fault_dem.npz")["elevation"].astype(np.float32)


def fractal_dem(seed=0, shape=(150, 190), beta=2.2, relief_m=800.0):
    """Fractal surface by spectral synthesis: random phases, power ~ |k|^-beta."""
    rng = np.random.default_rng(seed)
    ky = np.fft.fftfreq(shape[0])[:, None]
    kx = np.fft.rfftfreq(shape[1])[None, :]
    k = np.hypot(kx, ky)
    k[0, 0] = 1.0
    amplitude = k ** (-beta / 2)
    amplitude[0, 0] = 0.0
    spectrum = amplitude * np.exp(2j * np.pi * rng.random(amplitude.shape))
    z = np.fft.irfft2(spectrum, s=shape)
    z = (z - z.min()) / (z.max() - z.min()) * relief_m + 100.0
    z[60:66, 80:85] = np.nan  # a nodata hole
    return z.astype(np.float32)


@pytest.fixture(scope="module", params=["sample_dem", "fractal"])
def dem_tif(request, tmp_path_factory):
    dem = sample_dem_from_matplotlib() if request.param == "sample_dem" else fractal_dem()
    path = tmp_path_factory.mktemp("gdaldem") / f"{request.param}.tif"
    profile = dict(
        driver="GTiff", width=dem.shape[1], height=dem.shape[0], count=1, dtype="float32",
        crs="EPSG:32633",  # an arbitrary metric CRS; only the cell size matters here
        transform=from_origin(500000.0, 5000000.0, CELL_M, CELL_M), nodata=np.nan,
    )
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(dem, 1)
    return dem, path


def run_gdaldem(src, mode, *options):
    dst = src.with_name(f"{src.stem}_{mode}_{'_'.join(o.strip('-') for o in options)}.tif")
    subprocess.run(["gdaldem", mode, str(src), str(dst), *options, "-q"], check=True, capture_output=True)
    with rasterio.open(dst) as ds:
        out = ds.read(1).astype(np.float64)
        nodata = ds.nodata
    if nodata is not None and not np.isnan(nodata):
        out[out == nodata] = np.nan
    return out


def test_slope_matches_gdaldem(dem_tif):
    dem, path = dem_tif
    expected = run_gdaldem(path, "slope")
    got = slope(dem, CELL_M)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))  # border and hole
    assert_raster_allclose(got[INNER], expected[INNER], rtol=0, atol=SLOPE_TOL_DEG)
    assert_raster_allclose(slope_aspect(dem, CELL_M)[0], got, rtol=0, atol=0)


def test_percent_slope_matches_gdaldem(dem_tif):
    dem, path = dem_tif
    expected = run_gdaldem(path, "slope", "-p")
    got = slope(dem, CELL_M, units="percent")
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))
    assert_raster_allclose(got[INNER], expected[INNER], rtol=0, atol=SLOPE_TOL_PERCENT)


def test_aspect_matches_gdaldem(dem_tif):
    dem, path = dem_tif
    expected = run_gdaldem(path, "aspect")  # flat cells nodata, like our NaN
    got = aspect(dem, CELL_M)
    # NaN where a window touches nodata or the edge, and on exactly flat windows
    # (integer elevations make those common in the sample DEM)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))
    grad = np.tan(np.radians(slope(dem, CELL_M)))
    steep = grad >= ASPECT_MIN_GRADIENT
    assert steep.sum() > 0.5 * np.isfinite(grad).sum()  # the check covers most cells
    diff = (got[steep] - expected[steep] + 180.0) % 360.0 - 180.0
    assert np.abs(diff).max() <= ASPECT_TOL_DEG
    assert np.nanmin(got) >= 0.0 and np.nanmax(got) < 360.0


@pytest.mark.parametrize(
    "mode, options, ours",
    [
        ("TPI", (), tpi3),  # z0 minus the mean of the 8 neighbours
        ("TRI", ("-alg", "Riley"), ruggedness),  # sqrt of the sum of squares
        ("TRI", ("-alg", "Wilson"), ruggedness_mean_abs),  # mean absolute difference
        ("roughness", (), roughness),  # max - min of the 3x3 window
    ],
)
def test_window_statistics_match_gdaldem(dem_tif, mode, options, ours):
    dem, path = dem_tif
    expected = run_gdaldem(path, mode, *options)
    got = ours(dem)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))
    assert_raster_allclose(got[INNER], expected[INNER], rtol=0, atol=ELEVATION_TOL_M)


def test_gdaldem_default_tri_is_riley(dem_tif):
    # GDAL >= 3.3 defaults to Riley's sqrt-of-sum-of-squares; our `ruggedness` is that
    dem, path = dem_tif
    expected = run_gdaldem(path, "TRI")
    assert_raster_allclose(ruggedness(dem)[INNER], expected[INNER], rtol=0, atol=ELEVATION_TOL_M)
