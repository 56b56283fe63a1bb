"""Tests for depression filling, D8, flow accumulation, streams and HAND.

References used: the 6x6 check example of METHODS.md section 4 (Priority-Flood of
Barnes, Lehman & Mulla 2014, doi:10.1016/j.cageo.2013.04.024; D8 after O'Callaghan
& Mark 1984; HAND after Renno et al. 2008, doi:10.1016/j.rse.2008.03.018), a tilted
V valley whose flow paths and heights follow from its formula, and slow pure
NumPy/Python references written below from the definitions (minimax fill by
fixpoint iteration, D8 by looping over neighbours, accumulation and HAND by
walking every path separately).
"""

from collections import deque

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter

from mlsites.errors import GridMismatchError, InputError
from mlsites.terrain import (
    HYDROLOGY_LAYERS,
    fill_depressions,
    flow_accumulation,
    flow_direction,
    height_above_drainage,
    hydrology_layers,
    stream_cells,
)
from tests.conftest import assert_raster_allclose

# METHODS.md section 4 check values (6x6 DEM, 10 m cells, streams = acc >= 5).
DEM_6 = np.array([
    [10, 10, 10, 10, 10, 10],
    [10, 9, 8, 7, 8, 10],
    [10, 8, 6, 5, 6, 10],
    [10, 7, 5, 2, 4, 10],
    [10, 8, 6, 3.5, 6, 10],
    [10, 10, 10, 3, 10, 10],
], dtype=np.float32)
FILLED_6 = DEM_6.copy()
FILLED_6[3, 3] = 3.5  # METHODS.md section 4: only (3, 3) is raised, 2 -> 3.5
D8_6 = np.array([
    [2, 2, 2, 4, 8, 8],
    [2, 2, 2, 4, 8, 8],
    [2, 2, 2, 4, 4, 8],
    [1, 1, 1, 4, 16, 16],
    [128, 128, 1, 4, 16, 32],
    [128, 128, 1, 0, 16, 32],
], dtype=np.uint8)
ACC_6 = np.array([
    [1, 1, 1, 1, 1, 1],
    [1, 2, 2, 4, 2, 1],
    [1, 2, 3, 9, 2, 1],
    [1, 4, 9, 28, 6, 1],
    [1, 2, 2, 33, 2, 1],
    [1, 1, 1, 36, 1, 1],
], dtype=np.uint32)
STREAMS_6 = (ACC_6 >= 5).astype(np.uint8)  # METHODS.md section 4 streams table
HAND_6 = np.array([
    [6.5, 5, 5, 5, 5, 5],
    [5, 5.5, 3, 2, 3, 6],
    [5, 3, 2.5, 0, 2, 6],
    [5, 2, 0, 0, 0, 6],
    [5, 3, 2.5, 0, 2.5, 6],
    [5, 6.5, 7, 0, 7, 6.5],
])
CELL_6 = 10.0
THRESHOLD_6_KM2 = 5 * CELL_6**2 / 1e6  # 5 cells of 100 m2
# HAND and the filled value at (3, 3) carry one float32 ulp from the epsilon fill
# (METHODS.md section 4), far below this tolerance in metres.
HAND_ATOL = 1e-4

OFFSETS = [(0, 1), (1, 1), (1, 0), (1, -1), (0, -1), (-1, -1), (-1, 0), (-1, 1)]
CODES = [1, 2, 4, 8, 16, 32, 64, 128]  # E, SE, S, SW, W, NW, N, NE (METHODS.md section 4)


# --------------------------------------------------------- references ----------
def neighbours(i, j, shape):
    for di, dj in OFFSETS:
        ii, jj = i + di, j + dj
        if 0 <= ii < shape[0] and 0 <= jj < shape[1]:
            yield ii, jj


def seed_mask(dem):
    """Edge cells and cells next to NaN (the fill's outlets)."""
    nan = np.pad(np.isnan(dem), 1, constant_values=True)
    near = np.zeros(dem.shape, dtype=bool)
    for di, dj in OFFSETS:
        near |= nan[1 + di:1 + di + dem.shape[0], 1 + dj:1 + dj + dem.shape[1]]
    return near & ~np.isnan(dem)


def minimax_fill_reference(dem):
    """Lowest surface >= dem with a non-ascending path to a seed, by fixpoint iteration."""
    valid = ~np.isnan(dem)
    seeds = seed_mask(dem)
    w = np.where(seeds, dem, np.inf)
    w[~valid] = np.inf
    while True:
        p = np.pad(w, 1, constant_values=np.inf)
        low = w.copy()
        for di, dj in OFFSETS:
            low = np.minimum(low, p[1 + di:1 + di + dem.shape[0], 1 + dj:1 + dj + dem.shape[1]])
        new = np.where(valid & ~seeds, np.maximum(dem, low), w)
        if np.array_equal(new, w):
            break
        w = new
    return np.where(valid, w, np.nan).astype(dem.dtype)


def d8_reference(z, dx, dy):
    out = np.full(z.shape, 255, dtype=np.uint8)
    for i in range(z.shape[0]):
        for j in range(z.shape[1]):
            if np.isnan(z[i, j]):
                continue
            best, code = 0.0, 0
            for (di, dj), c in zip(OFFSETS, CODES):
                ii, jj = i + di, j + dj
                if not (0 <= ii < z.shape[0] and 0 <= jj < z.shape[1]) or np.isnan(z[ii, jj]):
                    continue
                drop = (float(z[i, j]) - float(z[ii, jj])) / np.hypot(di * dy, dj * dx)
                if drop > best:
                    best, code = drop, c
            out[i, j] = code
    return out


def downstream(direction, i, j):
    """Next cell along D8, or None."""
    code = int(direction[i, j])
    if code not in CODES:
        return None
    di, dj = OFFSETS[CODES.index(code)]
    return i + di, j + dj


def accumulation_reference(direction):
    acc = np.zeros(direction.shape, dtype=np.int64)
    for i, j in zip(*np.nonzero(direction != 255)):
        cell = (i, j)
        while cell is not None:
            acc[cell] += 1
            cell = downstream(direction, *cell)
    return acc


def hand_reference(z, direction, streams):
    # Walk D8 to the first stream cell; a path that ends first (outlet) is measured
    # against its last cell (the documented edge rule of height_above_drainage).
    out = np.full(z.shape, np.nan)
    for i, j in zip(*np.nonzero(direction != 255)):
        cell = last = (i, j)
        while cell is not None and streams[cell] != 1:
            last, cell = cell, downstream(direction, *cell)
        out[i, j] = float(z[i, j]) - float(z[last if cell is None else cell])
    return out


def random_dem(rng, shape, *, holes=True, smooth=1.0):
    z = gaussian_filter(rng.random(shape), smooth) * 100.0
    z = z.astype(np.float32)
    if holes:
        for _ in range(3):
            i, j = rng.integers(0, shape[0]), rng.integers(0, shape[1])
            z[i:i + rng.integers(1, 5), j:j + rng.integers(1, 5)] = np.nan
    return z


@pytest.fixture(params=[(0, (17, 23)), (1, (30, 12)), (2, (25, 25))], ids=lambda p: f"seed{p[0]}")
def dem(request, global_random_seed):
    seed, shape = request.param
    return random_dem(np.random.default_rng(global_random_seed + seed), shape)


# ------------------------------------------------------ METHODS.md example -----
def test_methods_example_fill():
    # METHODS.md section 4: plain fill raises only (3, 3), to 3.5.
    np.testing.assert_array_equal(fill_depressions(DEM_6, epsilon=False), FILLED_6)
    eps = fill_depressions(DEM_6)
    expected = FILLED_6.copy()
    expected[3, 3] = np.nextafter(np.float32(3.5), np.float32(np.inf))  # "by one extra ulp"
    np.testing.assert_array_equal(eps, expected)


def test_methods_example_chain():
    filled = fill_depressions(DEM_6)
    direction = flow_direction(filled, CELL_6)
    np.testing.assert_array_equal(direction, D8_6)  # METHODS.md section 4 D8 table
    acc = flow_accumulation(direction)
    np.testing.assert_array_equal(acc, ACC_6)  # METHODS.md section 4 accumulation table
    streams = stream_cells(acc, threshold_km2=THRESHOLD_6_KM2, cell_area_m2=CELL_6**2)
    np.testing.assert_array_equal(streams, STREAMS_6)
    hand = height_above_drainage(filled, direction, streams)
    assert_raster_allclose(hand, HAND_6, rtol=0, atol=HAND_ATOL)


def test_methods_example_through_hydrology_layers():
    layers = hydrology_layers(DEM_6, CELL_6, stream_threshold_km2=THRESHOLD_6_KM2)
    assert list(layers) == list(HYDROLOGY_LAYERS)
    np.testing.assert_array_equal(layers["direction"], D8_6)
    np.testing.assert_array_equal(layers["accumulation"], ACC_6)
    np.testing.assert_array_equal(layers["streams"], STREAMS_6)
    assert_raster_allclose(layers["hand"], HAND_6, rtol=0, atol=HAND_ATOL)
    assert layers["stream_distance"][0, 0] == pytest.approx(36.0555, abs=1e-4)  # METHODS.md section 4


# ------------------------------------------------------ fill properties --------
def test_fill_equals_minimax_reference(dem):
    filled = fill_depressions(dem, epsilon=False)
    np.testing.assert_array_equal(filled, minimax_fill_reference(dem))


@pytest.mark.parametrize("epsilon", [False, True])
def test_fill_never_below_input_and_keeps_nodata(dem, epsilon):
    before = dem.copy()
    filled = fill_depressions(dem, epsilon=epsilon)
    np.testing.assert_array_equal(dem, before)  # input untouched
    assert filled.dtype == np.float32
    np.testing.assert_array_equal(np.isnan(filled), np.isnan(dem))
    valid = ~np.isnan(dem)
    assert np.all(filled[valid] >= dem[valid])


@pytest.mark.parametrize("epsilon", [False, True])
def test_filled_has_no_interior_pits(dem, epsilon):
    # Breadth-first search uphill from the seeds over the filled DEM must reach every
    # valid cell, i.e. every cell has a non-ascending path to an edge or NaN.
    filled = fill_depressions(dem, epsilon=epsilon)
    seen = seed_mask(filled)
    queue = deque(zip(*np.nonzero(seen)))
    while queue:
        i, j = queue.popleft()
        for ii, jj in neighbours(i, j, filled.shape):
            if not seen[ii, jj] and filled[ii, jj] >= filled[i, j]:
                seen[ii, jj] = True
                queue.append((ii, jj))
    np.testing.assert_array_equal(seen, ~np.isnan(filled))


def test_epsilon_fill_gives_every_inner_cell_a_lower_neighbour(dem):
    filled = fill_depressions(dem)
    direction = flow_direction(filled, 1.0)
    inner = ~np.isnan(filled) & ~seed_mask(filled)
    assert np.all(direction[inner] != 0)


def test_epsilon_fill_stays_close_to_plain_fill(dem):
    plain = fill_depressions(dem, epsilon=False)
    eps = fill_depressions(dem)
    valid = ~np.isnan(dem)
    unchanged = valid & (plain == dem)
    # Cells outside depressions keep their elevation (random real values: no flats).
    np.testing.assert_array_equal(eps[unchanged], dem[unchanged])
    # Inside, one float32 step per cell of flat at most.
    bound = valid.sum() * np.spacing(np.float32(np.nanmax(dem)))
    assert np.all(eps[valid] >= plain[valid])
    assert np.all(eps[valid] - plain[valid] <= bound)


def test_fill_keeps_a_depression_free_surface():
    # A tilted plane drains everywhere already: nothing may change (Barnes et al. 2014).
    z = (np.add.outer(np.arange(8) * 0.5, np.arange(6) * 0.25)).astype(np.float32)
    np.testing.assert_array_equal(fill_depressions(z), z)
    np.testing.assert_array_equal(fill_depressions(z, epsilon=False), z)


def test_fill_of_flat_plateau_drains_to_edge():
    z = np.full((7, 7), 5.0, dtype=np.float32)
    filled = fill_depressions(z)
    direction = flow_direction(filled, 1.0)
    assert np.all(direction[1:-1, 1:-1] != 0)
    acc = flow_accumulation(direction)
    assert acc[direction == 0].sum() == z.size


# --------------------------------------------------------------------- D8 -----
@pytest.mark.parametrize("cellsize", [1.0, (2.0, 1.0), (10.0, 30.0)])
def test_flow_direction_matches_reference(dem, cellsize):
    filled = fill_depressions(dem)
    dx, dy = (cellsize, cellsize) if np.isscalar(cellsize) else cellsize
    np.testing.assert_array_equal(flow_direction(filled, cellsize), d8_reference(filled, dx, dy))


def test_flow_direction_ties_and_flats():
    # Equal drops E and S with square cells: E comes first (METHODS.md section 4 order).
    z = np.array([[5, 4], [4, 9]], dtype=np.float32)
    assert flow_direction(z, 1.0)[0, 0] == 1
    # Drops W and N equal: W (16) comes before N (64).
    z = np.array([[9, 4], [4, 5]], dtype=np.float32)
    assert flow_direction(z, 1.0)[1, 1] == 16
    # No lower neighbour -> 0; NaN -> 255.
    z = np.array([[1, 1], [1, np.nan]], dtype=np.float32)
    np.testing.assert_array_equal(flow_direction(z, 1.0), [[0, 0], [0, 255]])


def test_flow_direction_rectangular_cells_change_the_choice():
    # Drop 1 m east and 1.5 m south: with dx = 1, dy = 2 the east slope (1/1) beats
    # the south slope (1.5/2); with dx = dy the south one wins.
    z = np.array([[5, 4], [3.5, 9]], dtype=np.float32)
    assert flow_direction(z, (1.0, 2.0))[0, 0] == 1
    assert flow_direction(z, 1.0)[0, 0] == 4


# -------------------------------------------------------- accumulation --------
def test_accumulation_matches_brute_force(dem):
    direction = flow_direction(fill_depressions(dem), 1.0)
    acc = flow_accumulation(direction)
    assert acc.dtype == np.uint32
    np.testing.assert_array_equal(acc, accumulation_reference(direction))


def test_outlet_accumulations_sum_to_valid_cells(dem):
    direction = flow_direction(fill_depressions(dem), (3.0, 2.0))
    acc = flow_accumulation(direction)
    valid = ~np.isnan(dem)
    assert np.all(acc[valid] >= 1) and np.all(acc[~valid] == 0)
    assert acc[direction == 0].sum() == valid.sum()  # METHODS.md section 4 property


def test_accumulation_rejects_cycles_and_bad_codes():
    cycle = np.array([[1, 4], [64, 16]], dtype=np.uint8)  # E, S / N, W: a loop
    with pytest.raises(InputError, match="cycle"):
        flow_accumulation(cycle)
    with pytest.raises(InputError, match="codes other than"):
        flow_accumulation(np.array([[3, 0]], dtype=np.uint8))


def test_accumulation_path_into_nodata_ends_there():
    # Cell (0, 0) points E into a nodata cell: it is an outlet for counting.
    direction = np.array([[1, 255, 16]], dtype=np.uint8)
    np.testing.assert_array_equal(flow_accumulation(direction), [[1, 0, 1]])


# -------------------------------------------------------------- streams -------
def test_stream_threshold_on_rectangular_cells():
    acc = np.array([[0, 1, 2, 3, 4]], dtype=np.uint32)
    # Cells of 20 m x 50 m = 1000 m2; 3 cells = 0.003 km2 is the threshold itself.
    np.testing.assert_array_equal(
        stream_cells(acc, threshold_km2=0.003, cell_area_m2=20.0 * 50.0), [[255, 0, 0, 1, 1]]
    )
    acc_float = np.array([[np.nan, 1, 2, 3, 4]])
    np.testing.assert_array_equal(
        stream_cells(acc_float, threshold_km2=0.003, cell_area_m2=1000.0), [[255, 0, 0, 1, 1]]
    )


@pytest.mark.parametrize("bad", [0, -1.0, np.nan])
def test_stream_threshold_must_be_positive(bad):
    with pytest.raises(InputError, match="threshold_km2"):
        stream_cells(np.ones((2, 2), np.uint32), threshold_km2=bad, cell_area_m2=1.0)


# ------------------------------------------------------------------ HAND ------
def test_hand_matches_path_walk_and_is_non_negative(dem):
    filled = fill_depressions(dem)
    direction = flow_direction(filled, 1.0)
    acc = flow_accumulation(direction)
    streams = stream_cells(acc, threshold_km2=8e-6, cell_area_m2=1.0)  # 8 cells
    hand = height_above_drainage(filled, direction, streams)
    assert hand.dtype == np.float32
    expected = hand_reference(filled, direction, streams)
    # float32 output of a float64 difference of float32 values: rtol by dtype.
    assert_raster_allclose(hand, expected, rtol=1e-6, atol=1e-5)
    assert np.all(hand[streams == 1] == 0)
    assert np.all(hand[np.isfinite(hand)] >= 0)
    assert np.all(np.isnan(hand[np.isnan(dem)]))


def test_hand_has_a_value_on_every_valid_cell(dem):
    # Issue 11: hillslopes draining off the grid without meeting a stream were NaN.
    filled = fill_depressions(dem)
    direction = flow_direction(filled, 1.0)
    streams = stream_cells(flow_accumulation(direction), threshold_km2=8e-6, cell_area_m2=1.0)
    hand = height_above_drainage(filled, direction, streams)
    np.testing.assert_array_equal(np.isnan(hand), np.isnan(dem))


def test_hand_plane_draining_off_the_edge():
    # Analytic case: z = 0.5 m/m falling east on 10 m cells, a stream along column 3.
    # East is the steepest drop (0.5 m/m; diagonals 5/14.14 = 0.354), so cells west
    # of the stream drain into it and cells east of it drain off the east edge, where
    # the last column is the outlet: HAND = the height above that edge cell.
    n_rows, n_cols, cell, c_stream = 6, 10, 10.0, 3
    i, j = np.mgrid[0:n_rows, 0:n_cols]
    z = (0.5 * (n_cols - 1 - j) * cell + 100.0).astype(np.float32)
    streams = (j == c_stream).astype(np.uint8)
    direction = flow_direction(z, cell)
    np.testing.assert_array_equal(direction, np.where(j == n_cols - 1, 0, 1))
    expected = np.where(j <= c_stream, 0.5 * (c_stream - j) * cell, 0.5 * (n_cols - 1 - j) * cell)
    hand = height_above_drainage(z, direction, streams)
    assert_raster_allclose(hand, expected, rtol=0, atol=1e-5)  # multiples of 5 m, exact
    # No stream at all: every cell is measured against the east edge.
    hand = height_above_drainage(z, direction, np.zeros_like(streams))
    assert_raster_allclose(hand, 0.5 * (n_cols - 1 - j) * cell, rtol=0, atol=1e-5)


def test_hand_shape_mismatch():
    with pytest.raises(GridMismatchError):
        height_above_drainage(np.zeros((3, 3)), np.zeros((3, 3), np.uint8), np.zeros((3, 4), np.uint8))


# ------------------------------------------------------ tilted V valley -------
def test_tilted_v_valley():
    # z = 0.5 |x| + 0.05 y on 10 m cells: valley axis at column 4 falling south.
    # Side cells drain across (drop 0.5 m/m beats 0.05 m/m south and
    # 5.5/14.14 = 0.389 m/m diagonally), the axis drains south. All values are
    # multiples of 0.5 m, exact in float32.
    n_rows, n_cols, c0, cell = 12, 9, 4, 10.0
    i, j = np.mgrid[0:n_rows, 0:n_cols]
    side = 0.5 * np.abs(j - c0) * cell
    z = (side + 0.05 * (n_rows - 1 - i) * cell).astype(np.float32)
    np.testing.assert_array_equal(fill_depressions(z), z)  # no depression
    expected_dir = np.where(j > c0, 16, np.where(j < c0, 1, 4)).astype(np.uint8)
    expected_dir[n_rows - 1, c0] = 0  # the outlet
    layers = hydrology_layers(z, cell, stream_threshold_km2=3 * n_cols * cell**2 / 1e6)
    np.testing.assert_array_equal(layers["direction"], expected_dir)
    # Side cells collect their row's cells beyond them; the axis every row above.
    expected_acc = np.where(j > c0, n_cols - j, np.where(j < c0, j + 1, (i + 1) * n_cols))
    np.testing.assert_array_equal(layers["accumulation"], expected_acc)
    head = 2  # first axis row with 3 * n_cols contributing cells
    np.testing.assert_array_equal(layers["streams"], ((j == c0) & (i >= head)).astype(np.uint8))
    expected_hand = side + np.where(i < head, 0.05 * (head - i) * cell, 0.0)
    assert_raster_allclose(layers["hand"], expected_hand, rtol=0, atol=1e-5)  # exact sums of halves
    expected_dist = np.where(i >= head, np.abs(j - c0) * cell, np.hypot((j - c0) * cell, (head - i) * cell))
    assert_raster_allclose(layers["stream_distance"], expected_dist, rtol=1e-6, atol=1e-5)


# ---------------------------------------------------- hydrology_layers --------
def test_wanted_subset_equals_full_run(dem):
    full = hydrology_layers(dem, 5.0, stream_threshold_km2=2e-4)
    for wanted in [{"hand"}, {"stream_distance", "direction"}, {"filled"}, set()]:
        part = hydrology_layers(dem, 5.0, stream_threshold_km2=2e-4, wanted=wanted)
        assert set(part) == wanted
        for name in wanted:
            np.testing.assert_array_equal(part[name], full[name])
    dist = full["stream_distance"]
    np.testing.assert_array_equal(np.isnan(dist), np.isnan(dem))


@pytest.mark.parametrize("wanted", [None, {"hand", "accumulation"}])
def test_on_layer_receives_each_layer_once_in_order(dem, wanted):
    full = hydrology_layers(dem, 5.0, stream_threshold_km2=2e-4)
    seen = []
    rest = hydrology_layers(dem, 5.0, stream_threshold_km2=2e-4, wanted=wanted,
                            on_layer=lambda name, a: seen.append((name, a.copy())))
    assert rest == {}
    expected = [n for n in HYDROLOGY_LAYERS if wanted is None or n in wanted]
    assert [name for name, _ in seen] == expected
    for name, array in seen:
        np.testing.assert_array_equal(array, full[name])


def test_hydrology_layers_errors():
    with pytest.raises(InputError, match="unknown hydrology layer"):
        hydrology_layers(DEM_6, CELL_6, stream_threshold_km2=1.0, wanted={"slope"})
    with pytest.raises(InputError, match=r"\['hand', 'stream_distance'\].*no stream cell"):
        hydrology_layers(DEM_6, CELL_6, stream_threshold_km2=1.0)  # 1 km2 >> 0.0036 km2 grid
    # Without hand or distance the same threshold is fine (all zeros).
    out = hydrology_layers(DEM_6, CELL_6, stream_threshold_km2=1.0, wanted={"streams"})
    assert not out["streams"].any()


@pytest.mark.parametrize("dem_in, match", [
    (np.array([[1.0, np.inf], [1.0, 2.0]]), "infinite"),
    (np.full((3, 3), np.nan), "no valid cell"),
    (np.zeros(5), "2-D"),
    (np.zeros((0, 3)), "2-D"),
])
def test_fill_input_errors(dem_in, match):
    with pytest.raises(InputError, match=match):
        fill_depressions(dem_in)


@pytest.mark.parametrize("cellsize", [0.0, -5.0, (1.0,), (1.0, np.nan), "10", (np.ones(3), np.ones(3))])
def test_bad_cellsize(cellsize):
    with pytest.raises(InputError, match="cellsize"):
        flow_direction(DEM_6, cellsize)
