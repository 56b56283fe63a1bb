"""Tests of the fictional landscape generator (mlsites.synthetic).

References used below: the definition of 1/f^beta spectral synthesis (Saupe 1988,
"Algorithms for random fractals", doi:10.1007/978-1-4612-3784-6_2), the generator's
documented construction (linear channel fall, valley cut below its shoulders), and
brute-force NumPy / shapely geometry written here.
"""

import math

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely
from rasterio.windows import Window

from mlsites.errors import CRSError, InputError, OutputExistsError
from mlsites.synthetic import (
    SOIL_CLASSES,
    ZONE_CLASSES,
    fractal_relief,
    make_landscape,
    write_landscape_dem,
)

# A wide grid, so the valley axis runs east-west (the longer side, per the docs).
SHAPE = (120, 200)
PARAMS = dict(cellsize=10.0, valley_width_m=600.0, n_tributaries=2)


@pytest.fixture(scope="module")
def land():
    return make_landscape(SHAPE, random_state=11, **PARAMS)


def _path_cells(grid, line, step_m=1.0):
    """Cells crossed by ``line`` in order, consecutive duplicates removed (brute force)."""
    xy = shapely.get_coordinates(shapely.segmentize(line, step_m))
    rows, cols = grid.rowcol(xy[:, 0], xy[:, 1])
    inside = grid.contains(rows, cols)
    rows, cols = rows[inside], cols[inside]
    keep = np.r_[True, (np.diff(rows) != 0) | (np.diff(cols) != 0)]
    return rows[keep], cols[keep]


def _radial_spectrum(z):
    """Radially averaged periodogram of a square array after removing a plane (Hann window)."""
    n = z.shape[0]
    yy, xx = np.mgrid[:n, :n]
    design = np.column_stack([np.ones(n * n), xx.ravel(), yy.ravel()])
    coef, *_ = np.linalg.lstsq(design, z.ravel().astype(np.float64), rcond=None)
    resid = z - (design @ coef).reshape(n, n)
    taper = np.hanning(n)
    power = np.abs(np.fft.fft2(resid * np.outer(taper, taper))) ** 2
    f = np.fft.fftfreq(n)
    ring = np.rint(np.hypot(*np.meshgrid(f, f)) * n).astype(int)
    sums = np.bincount(ring.ravel(), power.ravel())
    counts = np.bincount(ring.ravel())
    return np.arange(sums.size), sums / np.maximum(counts, 1)


# -- determinism --------------------------------------------------------------------
def test_same_seed_gives_identical_landscapes(land):
    again = make_landscape(SHAPE, random_state=11, **PARAMS)
    for name in ("dem", "streams", "soil", "zones"):
        assert getattr(again, name).tobytes() == getattr(land, name).tobytes(), name
    assert again.channels.geometry.geom_equals_exact(land.channels.geometry, tolerance=0).all()


def test_different_seeds_differ(land):
    other = make_landscape(SHAPE, random_state=12, **PARAMS)
    assert not np.array_equal(other.dem, land.dem)
    assert not np.array_equal(other.streams, land.streams)


@pytest.mark.parametrize(
    "window",
    [Window(0, 0, 200, 120), Window(37, 51, 101, 43), Window(199, 119, 1, 1), Window(0, 60, 200, 1),
     Window(150, 0, 50, 120)],
)
def test_window_equals_whole(land, window):
    part = make_landscape(SHAPE, random_state=11, window=window, **PARAMS)
    rows, cols = window.toslices()
    for name in ("dem", "streams", "soil", "zones"):
        assert np.array_equal(getattr(part, name), getattr(land, name)[rows, cols]), name
    assert part.grid.shape == (window.height, window.width)
    np.testing.assert_allclose(part.grid.xy(0, 0), land.grid.xy(window.row_off, window.col_off), rtol=1e-12)


@pytest.mark.parametrize("window", [Window(3, 5, 64, 17), Window(0, 0, 1, 128)])
def test_fractal_relief_window_equals_whole(window):
    whole = fractal_relief((128, 96), cellsize=10.0, random_state=4)
    part = fractal_relief((128, 96), cellsize=10.0, random_state=4, window=window)
    assert np.array_equal(part, whole[window.toslices()])


@pytest.mark.parametrize("block_rows", [13, 64, 300])
def test_strip_writer_equals_whole_dem(tmp_path, block_rows):
    shape = (90, 300)
    expected = make_landscape(shape, random_state=2, **PARAMS).dem
    path = write_landscape_dem(tmp_path / "dem.tif", shape, random_state=2, block_rows=block_rows, **PARAMS)
    with rasterio.open(path) as src:
        assert np.array_equal(src.read(1), expected)


# -- relief -----------------------------------------------------------------------------
@pytest.mark.parametrize("beta", [2.5, 3.0, 3.5])
def test_relief_has_the_intended_spectral_exponent(beta):
    # Spectral synthesis defines the radially averaged power spectrum P(f) ~ f^-beta
    # (Saupe 1988, sect. 2.4, beta = 2H + 2 for surfaces). Fit the log-log slope between
    # 4 cycles per grid (above the coarsest octaves) and a quarter of Nyquist (below the
    # two-cell finest octave). Tolerance 0.2: sampling scatter of one 512 x 512
    # realisation plus the log-periodic ripple of octaves spaced by factors of 2.
    z = fractal_relief((512, 512), cellsize=10.0, random_state=0, spectral_exponent=beta)
    k, power = _radial_spectrum(z)
    band = (k >= 4) & (k <= 128)
    slope = np.polyfit(np.log(k[band]), np.log(power[band]), 1)[0]
    assert abs(-slope - beta) <= 0.2


def test_finer_cells_keep_the_coarse_relief():
    # Halving the cell size at the same extent only adds octaves finer than the coarse
    # grid, which hold a fraction 2^(-2HK) = 2^-8 of the variance for H = 0.5 and K = 8
    # coarse octaves (series of the docstring), so the 2 x 2 block mean of the fine
    # relief correlates with the coarse one above sqrt(1 - 2^-8) = 0.998 but for the
    # smoothing of the block mean; 0.99 leaves room for that.
    coarse = fractal_relief((128, 128), cellsize=20.0, random_state=6).astype(np.float64)
    fine = fractal_relief((256, 256), cellsize=10.0, random_state=6).astype(np.float64)
    block = fine.reshape(128, 2, 128, 2).mean(axis=(1, 3))
    assert np.corrcoef(block.ravel(), coarse.ravel())[0, 1] > 0.99
    assert math.isclose(block.std(), coarse.std(), rel_tol=0.05)


def test_relief_scales_linearly_with_relief_m():
    a = fractal_relief((32, 48), random_state=1, relief_m=100.0)
    b = fractal_relief((32, 48), random_state=1, relief_m=300.0)
    np.testing.assert_allclose(b, 3.0 * a, rtol=1e-4, atol=1e-4)  # float32 rounding


# -- valley ------------------------------------------------------------------------------
def test_channel_is_lower_than_cells_200_m_away(land):
    main = land.channels.loc[land.channels["kind"] == "main", "geometry"].iloc[0]
    tributaries = land.channels.loc[land.channels["kind"] == "tributary", "geometry"]
    s = np.arange(10.0, main.length - 10.0, 10.0)
    here = shapely.get_coordinates(shapely.line_interpolate_point(main, s))
    ahead = shapely.get_coordinates(shapely.line_interpolate_point(main, s + 1.0))
    tangent = (ahead - here) / np.hypot(*(ahead - here).T)[:, None]
    normal = np.column_stack([-tangent[:, 1], tangent[:, 0]])
    # Tributary floors meet the main floor at the confluence, so near a tributary a
    # cell 200 m away may rightly be lower than an upstream channel cell: skip those.
    far = shapely.distance(shapely.points(here), tributaries.union_all()) > 250.0
    rp, cp = land.grid.rowcol(here[:, 0], here[:, 1])
    checked = 0
    for side in (1.0, -1.0):
        q = here + side * 200.0 * normal
        rq, cq = land.grid.rowcol(q[:, 0], q[:, 1])
        ok = far & land.grid.contains(rq, cq) & land.grid.contains(rp, cp)
        assert np.all(land.dem[rq[ok], cq[ok]] > land.dem[rp[ok], cp[ok]])
        checked += ok.sum()
    assert checked > 20


def test_main_channel_falls_monotonically_downstream(land):
    main = land.channels.loc[land.channels["kind"] == "main", "geometry"].iloc[0]
    rows, cols = _path_cells(land.grid, main)
    z = land.dem[rows, cols].astype(np.float64)
    assert land.streams[rows, cols].all()
    assert np.all(np.diff(z) <= 0.0)
    # The floor falls linearly along the east-west valley axis (documented model):
    # drop = river_gradient * distance between first and last cell centres along x.
    x, _ = land.grid.xy(rows[[0, -1]], cols[[0, -1]])
    expected = land.params["river_gradient"] * abs(x[1] - x[0])
    assert z[0] - z[-1] == pytest.approx(expected, rel=1e-4, abs=1e-3)  # float32 elevations


def test_tributaries_join_the_main_river(land):
    main = land.channels.loc[land.channels["kind"] == "main", "geometry"].iloc[0]
    tributaries = land.channels.loc[land.channels["kind"] == "tributary", "geometry"]
    assert len(tributaries) >= 1
    for line in tributaries:
        # Lines run downstream: a tributary ends at its confluence, on the main line
        # (1 mm: float64 rounding of world coordinates near 5e6 m).
        assert shapely.Point(line.coords[-1]).distance(main) < 1e-3


def test_codes_are_all_documented(land):
    assert set(np.unique(land.soil)) <= set(SOIL_CLASSES)
    assert set(np.unique(land.zones)) <= set(ZONE_CLASSES)
    assert set(np.unique(land.streams)) <= {0, 1}
    assert np.array_equal(land.streams == 1, land.zones == 1)
    assert np.all(land.soil[land.zones == 3] == 2)  # terraces carry terrace gravel (docstring rule)
    assert land.soil_classes is SOIL_CLASSES


def test_flat_relief_is_supported():
    flat = make_landscape((40, 60), random_state=0, relief_m=0.0, **PARAMS)
    assert np.isfinite(flat.dem).all()
    # Without relief every upland cell sits at the valley shoulder: floor + valley depth.
    upland = flat.zones == 0
    assert np.all(flat.dem[upland] >= flat.params["outlet_elevation_m"] + flat.params["valley_depth_m"] - 1e-3)


# -- files --------------------------------------------------------------------------------
def test_written_files(land, tmp_path):
    paths = land.write(tmp_path / "out")
    with rasterio.open(paths["dem"]) as src:
        assert src.crs == land.grid.crs
        assert src.transform == land.grid.transform
        assert math.isnan(src.nodata)
        assert src.block_shapes == [(256, 256)] and src.profile["tiled"]
        assert np.array_equal(src.read(1), land.dem)
    with rasterio.open(paths["soil"]) as src:
        assert src.nodata == 0 and src.dtypes == ("uint8",)
        assert src.profile["tiled"]
        tags = src.tags()
        assert {k: tags[f"class_{k}"] for k in SOIL_CLASSES} == dict(SOIL_CLASSES)
        assert np.array_equal(src.read(1), land.soil)
    lines = gpd.read_file(paths["streams"], layer="streams")
    assert lines.crs == land.grid.crs
    assert len(lines) >= 1 and set(lines.geom_type) == {"LineString"}
    assert lines.within(shapely.box(*land.grid.bounds).buffer(1e-6)).all()
    assert set(lines["kind"]) <= {"main", "tributary"}
    assert not list(tmp_path.glob("out/.*"))  # no temporary files left


def test_existing_outputs_are_not_overwritten(land, tmp_path):
    land.write(tmp_path)
    with pytest.raises(OutputExistsError, match="overwrite=True"):
        land.write(tmp_path)
    land.write(tmp_path, overwrite=True)
    with pytest.raises(OutputExistsError, match="overwrite=True"):
        write_landscape_dem(tmp_path / "dem.tif", (8, 8))


# -- errors ------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(shape=(0, 5)), "shape"),
        (dict(shape=(10,)), "shape"),
        (dict(cellsize=-1.0), "cellsize"),
        (dict(spectral_exponent=4.5), "spectral_exponent"),
        (dict(valley_width_m=50.0), "valley_width_m"),
        (dict(n_terraces=7), "n_terraces"),
        (dict(random_state=-3), "random_state"),
        (dict(window=Window(0, 0, 500, 5)), "window"),
    ],
)
def test_bad_parameters_are_refused(kwargs, match):
    args = dict(shape=(20, 30), cellsize=10.0)
    args.update(kwargs)
    with pytest.raises(InputError, match=match):
        make_landscape(args.pop("shape"), **args)


def test_geographic_crs_is_refused():
    with pytest.raises(CRSError, match="projected"):
        make_landscape((20, 30), crs="EPSG:4326")


def test_unknown_option_is_refused(tmp_path):
    with pytest.raises(InputError, match="relief_m"):
        write_landscape_dem(tmp_path / "x.tif", (8, 8), relief=3.0)
