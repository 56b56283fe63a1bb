"""Tests for the local terrain derivatives (METHODS.md §1 and §2).

References used:
- check values of METHODS.md §1 (Horn 1981, doi:10.1109/PROC.1981.11918) and §2
  (Zevenbergen & Thorne 1987, doi:10.1002/esp.3290120107; Riley et al. 1999;
  Weiss 2001 TPI);
- analytic surfaces: planes of known gradient and orientation, quadratic surfaces
  with known derivatives (the Zevenbergen-Thorne fit is exact on quadratics);
- slow NumPy references written below from the formulas in the docstrings, which
  the numba kernels must match cell by cell.
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mlsites.errors import InputError, InsufficientDataError
from mlsites.terrain import (
    aspect,
    eastness,
    northness,
    plan_curvature,
    profile_curvature,
    roughness,
    ruggedness,
    ruggedness_mean_abs,
    slope,
    slope_aspect,
    standardize,
    standardize_with,
    total_curvature,
    tpi,
    tpi3,
)
from tests.conftest import assert_raster_allclose

# Tolerances. METHODS.md prints its check values rounded to 4 or 6 decimals, so
# the comparison tolerance is half a unit of the last printed digit or so.
CHECK_TOL_4 = 1e-4  # values printed with 4 decimals (METHODS.md §1)
CHECK_TOL_6 = 1e-6  # values printed with 6 decimals (METHODS.md §1, §2)
EXACT_TOL = 1e-12  # "computed = exact" rows: only float64 rounding separates them
# Kernel vs NumPy reference, and analytic surfaces: both sides are float64 but the
# kernel uses its own atan (about 1 ulp) and a different order of operations.
ANGLE_ATOL = 1e-9  # degrees
VALUE_RTOL = 1e-9
ELEV_ATOL = 1e-9  # metres, for TPI/TRI/roughness on elevations of order 1..100

THREE_BY_THREE_LAYERS = {
    "slope": lambda z, cs: slope(z, cs),
    "slope_percent": lambda z, cs: slope(z, cs, units="percent"),
    "aspect": lambda z, cs: aspect(z, cs),
    "northness": lambda z, cs: northness(z, cs),
    "eastness": lambda z, cs: eastness(z, cs),
    "profile_curvature": lambda z, cs: profile_curvature(z, cs),
    "plan_curvature": lambda z, cs: plan_curvature(z, cs),
    "total_curvature": lambda z, cs: total_curvature(z, cs),
    "tpi3": lambda z, cs: tpi3(z),
    "ruggedness": lambda z, cs: ruggedness(z),
    "ruggedness_mean_abs": lambda z, cs: ruggedness_mean_abs(z),
    "roughness": lambda z, cs: roughness(z),
}


# --- slow NumPy references -------------------------------------------------


def _per_row(cellsize, n_rows):
    dx, dy = cellsize if isinstance(cellsize, tuple) else (cellsize, cellsize)
    return np.broadcast_to(np.asarray(dx, float), (n_rows,)), np.broadcast_to(np.asarray(dy, float), (n_rows,))


def _interior_windows(dem):
    """Yield (r, c, window) for every interior cell; window is float64 3x3."""
    z = np.asarray(dem, dtype=np.float64)
    for r in range(1, z.shape[0] - 1):
        for c in range(1, z.shape[1] - 1):
            yield r, c, z[r - 1:r + 2, c - 1:c + 2]


def ref_horn(dem, cellsize):
    """Horn p, q per cell; per-row rule of the slope() docstring; NaN if any cell is NaN."""
    dx, dy = _per_row(cellsize, dem.shape[0])
    p = np.full(dem.shape, np.nan)
    q = np.full(dem.shape, np.nan)
    for r, c, w in _interior_windows(dem):
        if np.isnan(w).any():
            continue
        (a, b, c_), (d, e, f), (g, h, i) = w
        # each row's east-west difference over its own 2 dx, weighted 1-2-1
        p[r, c] = ((c_ - a) / (2 * dx[r - 1]) + 2 * (f - d) / (2 * dx[r]) + (i - g) / (2 * dx[r + 1])) / 4
        north_to_south = (dy[r - 1] + dy[r]) / 2 + (dy[r] + dy[r + 1]) / 2
        q[r, c] = ((a + 2 * b + c_) - (g + 2 * h + i)) / 4 / north_to_south
    return p, q


def ref_slope_aspect(dem, cellsize, flat_tol=1e-12):
    p, q = ref_horn(dem, cellsize)
    grad = np.hypot(p, q)
    slope_deg = np.degrees(np.arctan(grad))
    aspect_deg = np.degrees(np.arctan2(-p, -q)) % 360.0
    aspect_deg[aspect_deg >= 360.0] = 0.0
    flat = grad <= flat_tol
    aspect_deg[flat] = np.nan
    north = np.where(flat, 0.0, np.cos(np.radians(aspect_deg)))
    east = np.where(flat, 0.0, np.sin(np.radians(aspect_deg)))
    return slope_deg, 100 * grad, aspect_deg, north, east


def ref_curvatures(dem, cellsize, flat_tol=1e-12):
    """Zevenbergen & Thorne profile, plan, total (METHODS.md §2), per-row rule of the docs."""
    dx, dy = _per_row(cellsize, dem.shape[0])
    out = np.full((3,) + dem.shape, np.nan)
    for r, c, w in _interior_windows(dem):
        if np.isnan(w).any():
            continue
        (z1, z2, z3), (z4, z5, z6), (z7, z8, z9) = w
        h_n, h_s = (dy[r - 1] + dy[r]) / 2, (dy[r] + dy[r + 1]) / 2
        big_d = ((z4 + z6) / 2 - z5) / dx[r] ** 2
        # z_yy / 2 from the three-point rule for unequal spacings h_n, h_s
        big_e = (h_s * z2 + h_n * z8 - (h_n + h_s) * z5) / (h_n * h_s * (h_n + h_s))
        big_f = ((z3 - z1) / (2 * dx[r - 1]) - (z9 - z7) / (2 * dx[r + 1])) / (h_n + h_s)
        big_g = (z6 - z4) / (2 * dx[r])
        big_h = (z2 - z8) / (h_n + h_s)
        g2 = big_g**2 + big_h**2
        if math.sqrt(g2) <= flat_tol:
            prof = plan = 0.0
        else:
            prof = -2 * (big_d * big_g**2 + big_e * big_h**2 + big_f * big_g * big_h) / g2
            plan = -2 * (big_d * big_h**2 + big_e * big_g**2 - big_f * big_g * big_h) / g2
        out[:, r, c] = prof, plan, -2 * (big_d + big_e)
    return out


def ref_window_stats(dem):
    """tpi3, TRI (Riley), mean |d| (Wilson), roughness per cell; strict edges."""
    out = np.full((4,) + dem.shape, np.nan)
    for r, c, w in _interior_windows(dem):
        if np.isnan(w).any():
            continue
        z0 = w[1, 1]
        d = w - z0  # the centre contributes 0 to every sum
        out[:, r, c] = (z0 - (w.sum() - z0) / 8, np.sqrt((d**2).sum()), np.abs(d).sum() / 8, w.max() - w.min())
    return out


def ref_tpi(dem, cellsize, radius, inner_radius=0.0):
    """Brute force: mean of valid cells with inner <= centre distance <= radius, centre excluded."""
    dx, dy = _per_row(cellsize, dem.shape[0])
    out = np.full(dem.shape, np.nan)
    for r in range(dem.shape[0]):
        # every cell within the radius lies in this box around the centre
        k_rows, k_cols = int(radius // dy[r]) + 1, int(radius // dx[r]) + 1
        r0, c_lo = max(r - k_rows, 0), 0
        for c in range(dem.shape[1]):
            if np.isnan(dem[r, c]):
                continue
            c_lo = max(c - k_cols, 0)
            box = dem[r0:r + k_rows + 1, c_lo:c + k_cols + 1]
            rows, cols = np.indices(box.shape)
            dist = np.hypot((rows + r0 - r) * dy[r], (cols + c_lo - c) * dx[r])  # centre row's spacing
            ring = (dist >= inner_radius - 1e-9) & (dist <= radius + 1e-9) & ~np.isnan(box)
            ring[r - r0, c - c_lo] = False
            if ring.any():
                out[r, c] = dem[r, c] - box[ring].mean()
    return out


def circular_difference(a, b):
    return (np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0


@pytest.fixture
def random_dem(global_random_seed):
    """Rough random surface, 23 x 29, elevations ~100 m, with about 5 % NaN holes."""
    rng = np.random.default_rng(global_random_seed)
    dem = 100 + np.cumsum(rng.normal(size=(23, 29)), axis=1) + rng.normal(scale=2, size=(23, 29))
    dem[rng.random(dem.shape) < 0.05] = np.nan
    return dem


# --- METHODS.md §1 check values ----------------------------------------------

W1 = np.array([[10, 12, 15], [9, 11, 14], [7, 9, 13]], dtype=float)


def test_horn_w1_check_values():
    # METHODS.md §1, W1 with dx = dy = 10 m, Horn (1981)
    assert slope(W1, 10.0)[1, 1] == pytest.approx(16.5062, abs=CHECK_TOL_4)
    assert slope(W1, 10.0, units="percent")[1, 1] == pytest.approx(29.6332, abs=CHECK_TOL_4)
    assert aspect(W1, 10.0)[1, 1] == pytest.approx(242.3540, abs=CHECK_TOL_4)
    assert northness(W1, 10.0)[1, 1] == pytest.approx(-0.464007, abs=CHECK_TOL_6)
    assert eastness(W1, 10.0)[1, 1] == pytest.approx(-0.885832, abs=CHECK_TOL_6)


@pytest.mark.parametrize(
    "window, expected_aspect",
    [
        ([[2, 1, 0]] * 3, 90.0),  # METHODS.md §1: z falls to the east
        ([[0, 0, 0], [1, 1, 1], [2, 2, 2]], 0.0),  # falls to the north
        ([[2, 2, 2], [1, 1, 1], [0, 0, 0]], 180.0),  # falls to the south
        ([[0, 1, 2]] * 3, 270.0),  # falls to the west
    ],
)
def test_axis_aligned_planes(window, expected_aspect):
    # METHODS.md §1: slope 45 degrees, aspect as listed, tolerance 1e-9
    dem = np.array(window, dtype=float)
    s, a = slope_aspect(dem, 1.0)
    assert s[1, 1] == pytest.approx(45.0, abs=1e-9)
    assert circular_difference(a[1, 1], expected_aspect) == pytest.approx(0.0, abs=1e-9)
    assert aspect(dem, 1.0)[1, 1] == a[1, 1]


def test_flat_window_has_no_direction():
    # METHODS.md §1 convention: slope 0, aspect NaN (not the 180 of atan2(-0, -0)),
    # northness = eastness = 0; curvature 0 by our documented flat rule.
    dem = np.full((3, 3), 7.0)
    assert slope(dem, 1.0)[1, 1] == 0.0
    assert np.isnan(aspect(dem, 1.0)[1, 1])
    assert np.isnan(slope_aspect(dem, 1.0)[1][1, 1])
    assert northness(dem, 1.0)[1, 1] == 0.0
    assert eastness(dem, 1.0)[1, 1] == 0.0
    assert profile_curvature(dem, 1.0)[1, 1] == 0.0
    assert plan_curvature(dem, 1.0)[1, 1] == 0.0


def wgs84_row_spacing(lat_deg, dlon_deg, dlat_deg):
    """Metric cell sizes of a degree grid row (METHODS.md §1 ellipsoid formulas)."""
    a, f = 6378137.0, 1 / 298.257223563
    e2 = f * (2 - f)
    phi = np.radians(lat_deg)
    w = 1 - e2 * np.sin(phi) ** 2
    n_radius, m_radius = a / np.sqrt(w), a * (1 - e2) / w**1.5
    return n_radius * np.cos(phi) * np.radians(dlon_deg), m_radius * np.radians(dlat_deg)


@pytest.mark.parametrize(
    "lat, dx_expected, dy_expected",
    [(0.0, 30.9221, 30.7151), (45.0, 21.9019, 30.8699), (60.0, 15.5000, 30.9479)],  # METHODS.md §1
)
def test_wgs84_spacing_helper(lat, dx_expected, dy_expected):
    # validates the test helper used below; tolerance 1e-3 m as in METHODS.md §1
    dx, dy = wgs84_row_spacing(lat, 1 / 3600, 1 / 3600)
    assert (dx, dy) == pytest.approx((dx_expected, dy_expected), abs=1e-3)


def test_degree_grid_needs_per_axis_spacing():
    # METHODS.md §1: W1 on a 1" grid at 45 N: slope 7.2864, aspect 249.6130.
    s, a = slope_aspect(W1, (21.9019, 30.8699))
    assert s[1, 1] == pytest.approx(7.2864, abs=CHECK_TOL_4)
    assert a[1, 1] == pytest.approx(249.6130, abs=CHECK_TOL_4)
    # Per-row arrays computed for rows at 45 N + 1", 45 N, 45 N - 1" (row 0 north).
    lats = 45.0 + np.array([1.0, 0.0, -1.0]) / 3600
    dx_rows, dy_rows = wgs84_row_spacing(lats, 1 / 3600, 1 / 3600)
    s_rows, a_rows = slope_aspect(W1, (dx_rows, dy_rows))
    assert s_rows[1, 1] == pytest.approx(7.2864, abs=CHECK_TOL_4)
    assert a_rows[1, 1] == pytest.approx(249.6130, abs=CHECK_TOL_4)
    # METHODS.md §1: the wrong equal spacing gives 5.4832 degrees; must not be produced.
    assert abs(s_rows[1, 1] - 5.4832) > 1.0


def test_plane_on_degree_grid_with_per_row_spacing():
    # Degree grid whose east-west spacing shrinks northward. The surface rises A m/m
    # eastward along every row (x = east distance from the central meridian, using
    # that row's dx) and B m/m northward (y = distance between row centres). On the
    # central meridian its gradient is exactly (A, B); elsewhere meridian convergence
    # adds a north component, so only the central column is checked.
    lats = 60.0 - np.arange(40) * (30 / 3600)  # 30" rows, from 60 N southward
    dx_rows, dy_rows = wgs84_row_spacing(lats, 30 / 3600, 30 / 3600)
    y_rows = -np.concatenate([[0.0], np.cumsum((dy_rows[:-1] + dy_rows[1:]) / 2)])
    big_a, big_b = 0.05, -0.02
    centre = 12
    x = dx_rows[:, None] * (np.arange(25)[None, :] - centre)
    dem = big_a * x + big_b * y_rows[:, None]
    s, a = slope_aspect(dem, (dx_rows, dy_rows))
    expected_slope = np.degrees(np.arctan(np.hypot(big_a, big_b)))
    assert_raster_allclose(s[1:-1, centre], np.full(38, expected_slope), rtol=0, atol=ANGLE_ATOL)
    expected_aspect = np.degrees(np.arctan2(-big_a, -big_b)) % 360
    assert np.abs(circular_difference(a[1:-1, centre], expected_aspect)).max() < ANGLE_ATOL
    # METHODS.md §1 bug: one spacing (here the north-south one) for both axes
    wrong = slope(dem, float(dy_rows.mean()))
    assert np.abs(wrong[1:-1, centre] - expected_slope).min() > 0.5


# --- METHODS.md §2 check values ----------------------------------------------


@pytest.mark.parametrize(
    "window, prof, plan, total",
    [
        # METHODS.md §2, L = 10 m, "computed = exact"
        ([[-5, -10, -17], [-4, -9, -16], [-5, -10, -17]], 0.02, 0.02, 0.04),  # dome
        ([[0, 5, 12], [3, 8, 15], [4, 9, 16]], -0.016, 0.016, 0.0),  # saddle
        ([[2, 4, 6], [1, 2, 3], [0, 0, 0]], -0.008, 0.008, 0.0),  # twist (D = E = 0)
        (W1.tolist(), -0.0025, 0.0025, 0.0),  # W1
    ],
)
def test_zevenbergen_thorne_check_values(window, prof, plan, total):
    dem = np.array(window, dtype=float)
    assert profile_curvature(dem, 10.0)[1, 1] == pytest.approx(prof, abs=EXACT_TOL)
    assert plan_curvature(dem, 10.0)[1, 1] == pytest.approx(plan, abs=EXACT_TOL)
    assert total_curvature(dem, 10.0)[1, 1] == pytest.approx(total, abs=EXACT_TOL)


def test_riley_window_check_values():
    # METHODS.md §2 Riley window: TRI 41.833001 (the paper prints 100), mean |d| 12.5,
    # TPI 3x3 12.5, roughness 25.
    dem = np.array([[200, 210, 220], [210, 225, 225], [205, 210, 220]], dtype=float)
    assert ruggedness(dem)[1, 1] == pytest.approx(41.833001, abs=CHECK_TOL_6)
    assert ruggedness_mean_abs(dem)[1, 1] == pytest.approx(12.5, abs=CHECK_TOL_6)
    assert tpi3(dem)[1, 1] == pytest.approx(12.5, abs=CHECK_TOL_6)
    assert roughness(dem)[1, 1] == pytest.approx(25.0, abs=CHECK_TOL_6)


@pytest.mark.parametrize("cell", [1.0, 10.0])
def test_cone_tpi_check_values(cell):
    # METHODS.md §2: cone z = 100 - 10 r (r in cells) on 7 x 7, centre cell;
    # annulus 2 <= r <= 3 (20 cells) TPI 24.601126; disc 0 < r <= 3 (28 cells) 21.021109.
    rows, cols = np.indices((7, 7))
    cone = 100 - 10 * np.hypot(rows - 3, cols - 3)
    annulus = tpi(cone, cell, radius=3 * cell, inner_radius=2 * cell)
    disc = tpi(cone, cell, radius=3 * cell)
    assert annulus[3, 3] == pytest.approx(24.601126, abs=CHECK_TOL_6)
    assert disc[3, 3] == pytest.approx(21.021109, abs=CHECK_TOL_6)


# --- analytic surfaces on larger grids ---------------------------------------


def _grid_xy(n_rows, n_cols, dx, dy):
    """Cell-centre coordinates, x east and y north (row 0 north)."""
    rows, cols = np.indices((n_rows, n_cols), dtype=float)
    return cols * dx, -rows * dy


@pytest.mark.parametrize("azimuth", [0.0, 30.0, 90.0, 135.0, 200.0, 270.0, 333.0])
@pytest.mark.parametrize("gradient", [0.05, 1.7])
def test_plane_slope_and_aspect_exact(azimuth, gradient):
    # plane falling at `gradient` m/m towards `azimuth`: slope atan(gradient), aspect azimuth
    dx, dy = 10.0, 15.0
    x, y = _grid_xy(12, 14, dx, dy)
    az = np.radians(azimuth)
    dem = -gradient * (x * np.sin(az) + y * np.cos(az))
    s, a = slope_aspect(dem, (dx, dy))
    inner = (slice(1, -1), slice(1, -1))
    assert_raster_allclose(s[inner], np.full((10, 12), np.degrees(np.arctan(gradient))), rtol=0, atol=ANGLE_ATOL)
    assert np.abs(circular_difference(a[inner], azimuth)).max() < ANGLE_ATOL
    assert_raster_allclose(northness(dem, (dx, dy))[inner], np.full((10, 12), np.cos(az)), rtol=0, atol=1e-12)
    assert_raster_allclose(eastness(dem, (dx, dy))[inner], np.full((10, 12), np.sin(az)), rtol=0, atol=1e-12)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_paraboloid_curvature_sign_and_magnitude(sign):
    # z = -sign (x^2 + y^2) / (2 R): a dome (sign +1) has profile = plan = 1/R and
    # total = 2/R (convex positive); a bowl has the negatives. Exact on quadratics.
    radius_m, cell = 400.0, 10.0
    x, y = _grid_xy(21, 21, cell, cell)
    x, y = x - 100.0, y + 100.0  # apex at the centre cell (10, 10)
    dem = -sign * (x**2 + y**2) / (2 * radius_m)
    inner = (slice(1, -1), slice(1, -1))
    prof = profile_curvature(dem, cell)[inner]
    plan = plan_curvature(dem, cell)[inner]
    apex = (9, 9)  # in the inner view
    expected = np.full((19, 19), sign / radius_m)
    expected[apex] = 0.0  # flat apex: our documented rule
    assert_raster_allclose(prof, expected, rtol=VALUE_RTOL, atol=1e-15)
    assert_raster_allclose(plan, expected, rtol=VALUE_RTOL, atol=1e-15)
    assert_raster_allclose(total_curvature(dem, cell)[inner], np.full((19, 19), 2 * sign / radius_m), rtol=VALUE_RTOL)


def test_general_quadratic_curvature_exact():
    # z = a x^2 + b x y + c y^2 + d x + e y: D = a, E = c, F = b, G = z_x, H = z_y at
    # every cell (METHODS.md §2), so the curvatures follow in closed form.
    a, b, c, d, e = 0.003, -0.002, 0.0015, 0.4, -0.25
    dx, dy = 5.0, 8.0
    x, y = _grid_xy(15, 17, dx, dy)
    dem = a * x**2 + b * x * y + c * y**2 + d * x + e * y
    g, h = 2 * a * x + b * y + d, b * x + 2 * c * y + e
    g2 = g**2 + h**2
    prof = -2 * (a * g**2 + c * h**2 + b * g * h) / g2
    plan = -2 * (a * h**2 + c * g**2 - b * g * h) / g2
    inner = (slice(1, -1), slice(1, -1))
    assert_raster_allclose(profile_curvature(dem, (dx, dy))[inner], prof[inner], rtol=1e-7, atol=1e-12)
    assert_raster_allclose(plan_curvature(dem, (dx, dy))[inner], plan[inner], rtol=1e-7, atol=1e-12)
    assert_raster_allclose(total_curvature(dem, (dx, dy))[inner], np.full((13, 15), -2 * (a + c)), rtol=1e-7)


# --- edges and nodata --------------------------------------------------------


@pytest.mark.parametrize("name", sorted(THREE_BY_THREE_LAYERS))
def test_three_by_three_edges_are_nan_on_every_side(name):
    rng = np.random.default_rng(1)
    dem = rng.normal(size=(6, 7)) * 10
    out = THREE_BY_THREE_LAYERS[name](dem, 2.0)
    for side in (out[0, :], out[-1, :], out[:, 0], out[:, -1]):
        assert np.isnan(side).all()
    assert np.isfinite(out[1:-1, 1:-1]).all()


@pytest.mark.parametrize("name", sorted(THREE_BY_THREE_LAYERS))
def test_nan_hole_spreads_to_its_3x3_block(name):
    rng = np.random.default_rng(2)
    dem = rng.normal(size=(12, 14)) * 10
    dem[5, 6] = np.nan
    out = THREE_BY_THREE_LAYERS[name](dem, 2.0)
    expected_nan = np.zeros(dem.shape, bool)
    expected_nan[4:7, 5:8] = True
    expected_nan[[0, -1], :] = expected_nan[:, [0, -1]] = True
    np.testing.assert_array_equal(np.isnan(out), expected_nan)


@pytest.mark.parametrize("shape", [(1, 1), (2, 5), (5, 2)])
def test_arrays_without_interior_are_all_nan(shape):
    dem = np.ones(shape)
    assert np.isnan(slope(dem, 1.0)).all()
    assert np.isnan(roughness(dem)).all()


def test_tpi_edges_use_valid_cells_and_nan_rules():
    rng = np.random.default_rng(3)
    dem = rng.normal(size=(9, 11)) * 5
    dem[4, 4] = np.nan
    out = tpi(dem, 1.0, radius=2.0)
    # edge cells are defined (partial ring), the NaN centre stays NaN
    assert np.isfinite(out[0, :]).all() and np.isfinite(out[:, -1]).all()
    assert np.isnan(out[4, 4]) and np.isnan(out).sum() == 1
    assert_raster_allclose(out, ref_tpi(dem, 1.0, 2.0), rtol=0, atol=ELEV_ATOL)
    # a valid cell whose ring is all NaN gets NaN
    lonely = np.full((5, 5), np.nan)
    lonely[2, 2] = 3.0
    assert np.isnan(tpi(lonely, 1.0, radius=2.0)).all()


# --- kernels vs NumPy references ---------------------------------------------

CELLSIZES = {
    "square": 10.0,
    "rectangular": (7.0, 9.0),
    "per_row": (np.linspace(20.0, 14.0, 23), np.linspace(30.0, 31.0, 23)),
}


@pytest.mark.parametrize("cellsize_name", sorted(CELLSIZES))
def test_horn_layers_match_numpy_reference(random_dem, cellsize_name):
    cs = CELLSIZES[cellsize_name]
    s_ref, pct_ref, a_ref, n_ref, e_ref = ref_slope_aspect(random_dem, cs)
    s, a = slope_aspect(random_dem, cs)
    assert_raster_allclose(s, s_ref, rtol=0, atol=ANGLE_ATOL)
    assert_raster_allclose(slope(random_dem, cs), s_ref, rtol=0, atol=ANGLE_ATOL)
    assert_raster_allclose(slope(random_dem, cs, units="percent"), pct_ref, rtol=VALUE_RTOL)
    np.testing.assert_array_equal(np.isnan(a), np.isnan(a_ref))
    assert np.nanmax(np.abs(circular_difference(a, a_ref))) < ANGLE_ATOL
    np.testing.assert_array_equal(aspect(random_dem, cs), a)
    assert_raster_allclose(northness(random_dem, cs), n_ref, rtol=0, atol=1e-12)
    assert_raster_allclose(eastness(random_dem, cs), e_ref, rtol=0, atol=1e-12)
    finite = a[np.isfinite(a)]
    assert finite.min() >= 0.0 and finite.max() < 360.0


@pytest.mark.parametrize("cellsize_name", sorted(CELLSIZES))
def test_curvatures_match_numpy_reference(random_dem, cellsize_name):
    cs = CELLSIZES[cellsize_name]
    prof_ref, plan_ref, total_ref = ref_curvatures(random_dem, cs)
    # atol: curvatures here are of order 1e-2 1/m; 1e-15 absorbs rounding near zero
    assert_raster_allclose(profile_curvature(random_dem, cs), prof_ref, rtol=VALUE_RTOL, atol=1e-15)
    assert_raster_allclose(plan_curvature(random_dem, cs), plan_ref, rtol=VALUE_RTOL, atol=1e-15)
    assert_raster_allclose(total_curvature(random_dem, cs), total_ref, rtol=VALUE_RTOL, atol=1e-15)


def test_window_statistics_match_numpy_reference(random_dem):
    tpi_ref, tri_ref, mean_abs_ref, rough_ref = ref_window_stats(random_dem)
    assert_raster_allclose(tpi3(random_dem), tpi_ref, rtol=0, atol=ELEV_ATOL)
    assert_raster_allclose(ruggedness(random_dem), tri_ref, rtol=0, atol=ELEV_ATOL)
    assert_raster_allclose(ruggedness_mean_abs(random_dem), mean_abs_ref, rtol=0, atol=ELEV_ATOL)
    assert_raster_allclose(roughness(random_dem), rough_ref, rtol=0, atol=ELEV_ATOL)


@pytest.mark.parametrize(
    "cellsize, radius, inner_radius",
    [
        (10.0, 10.0, 0.0),  # the 4 rook neighbours
        (10.0, 35.0, 0.0),
        ((7.0, 9.0), 40.0, 15.0),  # annulus on rectangular cells
        ((np.linspace(8.0, 6.0, 23), np.full(23, 9.0)), 30.0, 9.0),  # per-row dx
        (1.0, 100.0, 0.0),  # ring larger than the raster
    ],
)
def test_tpi_matches_brute_force(random_dem, cellsize, radius, inner_radius):
    got = tpi(random_dem, cellsize, radius=radius, inner_radius=inner_radius)
    assert_raster_allclose(got, ref_tpi(random_dem, cellsize, radius, inner_radius), rtol=0, atol=ELEV_ATOL)


def test_tpi_wide_raster_crosses_column_stripes():
    # the kernel works in stripes of columns; 1300 columns give several stripes
    rng = np.random.default_rng(4)
    dem = np.cumsum(rng.normal(size=(9, 1300)), axis=1)
    dem[rng.random(dem.shape) < 0.03] = np.nan
    got = tpi(dem, (2.0, 3.0), radius=9.0, inner_radius=2.5)
    assert_raster_allclose(got, ref_tpi(dem, (2.0, 3.0), 9.0, 2.5), rtol=0, atol=ELEV_ATOL)


# --- dtype, windows, properties ----------------------------------------------


def _all_layers(dem, cs):
    layers = {name: f(dem, cs) for name, f in THREE_BY_THREE_LAYERS.items()}
    layers["tpi"] = tpi(dem, cs, radius=25.0, inner_radius=5.0)
    return layers


def test_float32_input_gives_float64_of_the_same_values(random_dem):
    # the kernels read float32 and compute in float64, so a float32 DEM gives exactly
    # the result of the same values cast to float64
    dem32 = random_dem.astype(np.float32)
    got = _all_layers(dem32, 10.0)
    expected = _all_layers(dem32.astype(np.float64), 10.0)
    for name in got:
        assert got[name].dtype == np.float64, name
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)


def test_integer_and_noncontiguous_input(random_dem):
    dem_int = np.nan_to_num(random_dem, nan=0.0).astype(np.int16)
    np.testing.assert_array_equal(slope(dem_int, 10.0), slope(dem_int.astype(float), 10.0))
    view = random_dem[::2, ::-1]
    np.testing.assert_array_equal(roughness(view), roughness(np.ascontiguousarray(view)))
    np.testing.assert_array_equal(slope(view, 10.0), slope(np.ascontiguousarray(view), 10.0))


def test_row_strips_with_halo_reproduce_whole_array(random_dem):
    # 3x3 layers need a 1-cell halo; tpi needs ceil(radius / smallest cell)
    cs = (7.0, 9.0)
    whole = _all_layers(random_dem, cs)
    halo = max(1, math.ceil(25.0 / 7.0))
    split = 11
    top = _all_layers(random_dem[: split + halo], cs)
    bottom = _all_layers(random_dem[split - halo:], cs)
    for name in whole:
        stitched = np.vstack([top[name][:split], bottom[name][halo:]])
        # full-width row strips: every kept cell is computed from the same values in
        # the same order, so the results are identical, not just close
        np.testing.assert_array_equal(stitched, whole[name], err_msg=name)


def test_slope_aspect_equals_separate_calls_and_fills_out(random_dem):
    s, a = slope_aspect(random_dem, (7.0, 9.0))
    np.testing.assert_array_equal(s, slope(random_dem, (7.0, 9.0)))
    np.testing.assert_array_equal(a, aspect(random_dem, (7.0, 9.0)))
    out = (np.full(random_dem.shape, -1.0), np.full(random_dem.shape, -1.0))
    s2, a2 = slope_aspect(random_dem, (7.0, 9.0), out=out)
    assert s2 is out[0] and a2 is out[1]
    np.testing.assert_array_equal(s2, s)
    np.testing.assert_array_equal(a2, a)


@settings(max_examples=60, deadline=None)
@given(
    window=st.lists(st.floats(-100, 100, allow_nan=False), min_size=9, max_size=9),
    dx=st.floats(0.5, 50),
    dy=st.floats(0.5, 50),
)
def test_profile_plus_plan_equals_total(window, dx, dy):
    # METHODS.md §2 [derived]: kappa_prof + kappa_plan = kappa_total on non-flat cells
    dem = np.array(window).reshape(3, 3)
    grad = np.hypot((dem[1, 2] - dem[1, 0]) / (2 * dx), (dem[0, 1] - dem[2, 1]) / (2 * dy))
    if grad < 1e-6:
        return
    prof = profile_curvature(dem, (dx, dy))[1, 1]
    plan = plan_curvature(dem, (dx, dy))[1, 1]
    total = total_curvature(dem, (dx, dy))[1, 1]
    # scale of the terms: |D| + |E| + |F| bound each curvature up to a factor 4
    scale = np.abs(dem).max() / min(dx, dy) ** 2 + 1e-300
    assert prof + plan == pytest.approx(total, abs=1e-12 * scale)


# --- standardisation ---------------------------------------------------------


def test_standardize_uses_population_sd(random_dem):
    expected = (random_dem - np.nanmean(random_dem)) / np.nanstd(random_dem)  # ddof=0
    assert_raster_allclose(standardize(random_dem), expected)
    assert_raster_allclose(standardize_with(random_dem, 100.0, 4.0), (random_dem - 100.0) / 4.0)


def test_standardize_errors():
    with pytest.raises(InsufficientDataError, match="no valid"):
        standardize(np.full((3, 3), np.nan))
    with pytest.raises(InputError, match="sd is 0.0"):
        standardize(np.ones((3, 3)))
    with pytest.raises(InputError, match="sd is -1"):
        standardize_with(np.ones(3), 0.0, -1.0)
    with pytest.raises(InputError, match="mean is nan"):
        standardize_with(np.ones(3), float("nan"), 1.0)


# --- input validation --------------------------------------------------------


@pytest.mark.parametrize(
    "cellsize, match",
    [
        (0.0, "cell size cellsize is 0.0"),
        (-5.0, "must be finite and positive"),
        (float("nan"), "must be finite and positive"),
        ((10.0, np.inf), "cell size dy is inf"),
        ((10.0, 10.0, 10.0), "3 members"),
        ((np.ones(4), 10.0), r"shape \(4,\)"),
        (np.array([10.0, 10.0]), "pass a number, or a tuple"),
        ("10", "a number or a 1-D array"),
    ],
)
def test_bad_cellsize_raises(cellsize, match):
    with pytest.raises(InputError, match=match):
        slope(np.zeros((5, 5)), cellsize)


def test_bad_arguments_raise():
    dem = np.zeros((5, 5))
    with pytest.raises(InputError, match="units is 'radians'"):
        slope(dem, 1.0, units="radians")
    with pytest.raises(InputError, match="2-D"):
        slope(np.zeros((2, 3, 3)), 1.0)
    with pytest.raises(InputError, match="dtype"):
        roughness(np.array([["a", "b"], ["c", "d"]]))
    with pytest.raises(InputError, match="no cells"):
        roughness(np.zeros((0, 4)))
    with pytest.raises(InputError, match="flat_tolerance"):
        aspect(dem, 1.0, flat_tolerance=-1.0)
    with pytest.raises(InputError, match="smaller than one cell"):
        tpi(dem, 10.0, radius=5.0)
    with pytest.raises(InputError, match="larger than radius"):
        tpi(dem, 1.0, radius=2.0, inner_radius=3.0)
    with pytest.raises(InputError, match="holds no cell"):
        tpi(dem, 1.0, radius=1.3, inner_radius=1.1)
    with pytest.raises(InputError, match="radius is -1"):
        tpi(dem, 1.0, radius=-1)
    with pytest.raises(InputError, match="out must be"):
        slope_aspect(dem, 1.0, out=(np.empty((5, 5)), np.empty((5, 5), np.float32)))
    with pytest.raises(InputError, match="out must be"):
        same = np.empty((5, 5))
        slope_aspect(dem, 1.0, out=(same, same))


@pytest.mark.parametrize("layer", ["slope", "tpi", "fill"])
def test_masked_array_mask_is_nodata(layer):
    # A numpy masked array's mask must act as nodata, exactly like NaN (brief: never
    # use hidden values as data). Reference: the same call with NaN in the masked cells.
    from mlsites.terrain import fill_depressions, slope, tpi

    rng = np.random.default_rng(5)
    z = rng.normal(size=(12, 14)) * 10
    mask = np.zeros(z.shape, bool)
    mask[5:7, 6:8] = True
    f = {"slope": lambda a: slope(a, 10.0), "tpi": lambda a: tpi(a, 10.0, radius=25.0),
         "fill": lambda a: fill_depressions(a)}[layer]
    np.testing.assert_array_equal(f(np.ma.array(z, mask=mask)), f(np.where(mask, np.nan, z)))
