"""Per-block kernel density (Gaussian), its GeoTIFFs and the colour ramp."""

import numpy as np
import pytest
import rasterio
from rasterio.crs import CRS
from rasterio.transform import from_origin
from rasterio.windows import Window
from scipy.stats import gaussian_kde

from mlsites.errors import CRSError, InputError
from mlsites.grid import GridSpec, write_array
from mlsites.periods import kernel_density, scott_bandwidth, write_densities
from tests.conftest import assert_raster_allclose

CELL = 10.0
GRID = GridSpec(CRS.from_epsg(32631), from_origin(400000.0, 5002000.0, CELL, CELL), 200, 200)
CENTRE = (401000.0, 5001000.0)


def _symmetric_sites(seed):
    """Sites in four copies rotated by 90 degrees about CENTRE: their weighted covariance is c I."""
    rng = np.random.default_rng(seed)
    base, w = rng.normal(0, 150, (6, 2)), rng.uniform(0.1, 1.0, 6)
    pts = np.vstack([base @ np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]]).T
                     for a in np.arange(4) * np.pi / 2])
    return pts[:, 0] + CENTRE[0], pts[:, 1] + CENTRE[1], np.tile(w, 4)


def test_density_integrates_to_the_weighted_count():
    # a density (per km2) summed over cells covering the kernels gives the weight sum (within 1 %)
    x, y, w = _symmetric_sites(0)
    d = kernel_density(x, y, w, GRID, bandwidth_m=60.0)
    cell_km2 = CELL * CELL / 1e6
    assert d.sum() * cell_km2 == pytest.approx(w.sum(), rel=0.01)


def test_density_equals_scipy_gaussian_kde_at_cell_centres():
    # scipy.stats.gaussian_kde with covariance h^2 I and the same weights, times the weight sum
    x, y, w = _symmetric_sites(1)
    h = 80.0
    data = np.vstack([x, y])
    c = np.cov(data, aweights=w)
    assert abs(c[0, 1]) < 1e-6 * c[0, 0] and c[0, 0] == pytest.approx(c[1, 1], rel=1e-9)
    kde = gaussian_kde(data, weights=w, bw_method=h / np.sqrt(c[0, 0]))
    np.testing.assert_allclose(kde.covariance, h * h * np.eye(2), rtol=1e-9, atol=1e-6)
    rows, cols = np.meshgrid(np.arange(GRID.height), np.arange(GRID.width), indexing="ij")
    xc, yc = GRID.xy(rows.ravel(), cols.ravel())
    expected = kde(np.vstack([xc, yc])) * w.sum() * 1e6  # per m2 -> per km2
    got = kernel_density(x, y, w, GRID, bandwidth_m=h).ravel()
    # atol: beyond 6 bandwidths a site adds nothing (the documented cutoff, exp(-18) of its peak)
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=np.exp(-18) * expected.max())


def test_windows_equal_the_whole_grid_and_columns_are_blocks():
    x, y, w = _symmetric_sites(2)
    weights = np.column_stack([w, w[::-1], np.zeros_like(w)])
    whole = kernel_density(x, y, weights, GRID, bandwidth_m=50.0)
    part = kernel_density(x, y, weights, GRID, bandwidth_m=50.0, window=Window(37, 20, 91, 64))
    assert_raster_allclose(part, whole[:, 20:84, 37:128], rtol=1e-12, atol=1e-15 * whole.max())
    assert_raster_allclose(whole[0], kernel_density(x, y, w, GRID, bandwidth_m=50.0), rtol=0)
    assert (whole[2] == 0).all()


def test_written_geotiffs_equal_the_array_and_keep_nodata(tmp_path, monkeypatch):
    monkeypatch.setattr("mlsites.periods._density.WINDOW_CELLS", 48)  # several windows
    x, y, w = _symmetric_sites(3)
    dem = np.full(GRID.shape, 100.0, dtype=np.float32)
    dem[:30, :50] = np.nan
    write_array(tmp_path / "dem.tif", dem, GRID)
    weights = np.column_stack([w, 2 * w])
    paths = write_densities([tmp_path / "a.tif", tmp_path / "b.tif"], x, y, weights, GRID, bandwidth_m=70.0,
                            valid_raster=tmp_path / "dem.tif", tags=[{"block": "a"}, {"block": "b"}])
    expected = kernel_density(x, y, weights, GRID, bandwidth_m=70.0).astype(np.float32)
    expected[:, np.isnan(dem)] = np.nan
    for k, p in enumerate(paths):
        with rasterio.open(p) as src:
            assert src.tags()["block"] == "ab"[k] and src.profile["tiled"] and src.nodata != src.nodata
            assert_raster_allclose(src.read(1), expected[k], rtol=1e-6)
    assert not list(tmp_path.glob(".*partial*"))


def test_scott_bandwidth_matches_scipy_factor():
    # Scott's rule: sigma * n^(-1/(d+4)); scipy.stats.gaussian_kde.scotts_factor gives n^(-1/6) for d = 2
    rng = np.random.default_rng(5)
    x, y = rng.normal(0, 300, 40), rng.normal(0, 200, 40)
    factor = gaussian_kde(np.vstack([x, y])).scotts_factor()
    sigma = np.sqrt((x.var(ddof=1) + y.var(ddof=1)) / 2)
    assert scott_bandwidth(x, y) == pytest.approx(sigma * factor, rel=1e-12)


def test_geographic_grid_and_bad_bandwidth_are_refused():
    geo = GridSpec(CRS.from_epsg(4326), from_origin(10.0, 50.0, 0.001, 0.001), 10, 10)
    with pytest.raises(CRSError, match="projected"):
        kernel_density([10.005], [49.995], [1.0], geo, bandwidth_m=100.0)
    with pytest.raises(InputError, match="bandwidth_m"):
        kernel_density([CENTRE[0]], [CENTRE[1]], [1.0], GRID, bandwidth_m=-5)


def test_density_ramp_lightness_falls_monotonically():
    # common practice: a sequential ramp whose lightness changes monotonically stays ordered for
    # colour-vision deficiencies and in greyscale; relative luminance per WCAG 2.x (sRGB)
    from matplotlib.colors import to_rgb

    from mlsites.periods._plots import DENSITY_RAMP

    def luminance(c):
        rgb = np.array(to_rgb(c))
        lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
        return float(lin @ [0.2126, 0.7152, 0.0722])

    lum = [luminance(c) for c in DENSITY_RAMP]
    assert all(a > b for a, b in zip(lum, lum[1:])) and lum[0] > 0.8 and lum[-1] < 0.05
