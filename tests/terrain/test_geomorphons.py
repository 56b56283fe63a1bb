"""Tests for geomorphon landforms (Jasiewicz & Stepinski 2013, METHODS.md §3).

References used: the check values and lookup table of METHODS.md §3 (after
Jasiewicz & Stepinski 2013, Geomorphology 182:147-156,
doi:10.1016/j.geomorph.2012.11.005), properties derived there, and a slow
pure-Python reference below that follows the §3 formulas literally (atan angles
in degrees, zenith/nadir, difference rule).
"""

import itertools
import math
from unittest import mock

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter

import mlsites.terrain._geomorphons as gm_module
from mlsites.errors import InputError
from mlsites.terrain import LANDFORM_CLASSES, geomorphons
from mlsites.terrain._geomorphons import _landform_lookup

# --- independent transcription of METHODS.md §3 -----------------------------

# Landform table, rows n- = 0..8, columns n+ = 0..8 (METHODS.md §3).
METHODS_TABLE = [
    "FL FL FL FS FS VL VL VL PT",
    "FL FL FS FS FS VL VL VL",
    "FL SH SL SL HL HL VL",
    "SH SH SL SL SL HL",
    "SH SH SP SL SL",
    "RI RI SP SP",
    "RI RI RI",
    "RI RI",
    "PK",
]
# Legend of the table (METHODS.md §3).
ABBREVIATION_NAMES = {
    "FL": "flat", "PK": "peak", "RI": "ridge", "SH": "shoulder", "SP": "spur",
    "SL": "slope", "HL": "hollow", "FS": "footslope", "VL": "valley", "PT": "pit",
}  # fmt: skip
# +/- swap sigma (METHODS.md §3): FL<->FL, SL<->SL, PK<->PT, RI<->VL, SH<->FS, SP<->HL.
SWAP = {"FL": "FL", "SL": "SL", "PK": "PT", "PT": "PK", "RI": "VL", "VL": "RI",
        "SH": "FS", "FS": "SH", "SP": "HL", "HL": "SP"}  # fmt: skip

CODE_OF_NAME = {name: code for code, name in LANDFORM_CLASSES.items()}
CODE = {abbr: CODE_OF_NAME[name] for abbr, name in ABBREVIATION_NAMES.items()}
SIGMA_CODE = np.zeros(11, dtype=np.uint8)  # code -> swapped code, 0 stays 0
for _abbr, _other in SWAP.items():
    SIGMA_CODE[CODE[_abbr]] = CODE[_other]

# Directions E, NE, N, NW, W, SW, S, SE as (row step, col step); row 0 is north.
DIRECTIONS = [(0, 1), (-1, 1), (-1, 0), (-1, -1), (0, -1), (1, -1), (1, 0), (1, 1)]


def table_class(n_minus, n_plus):
    return METHODS_TABLE[n_minus].split()[n_plus]


def line_angles(z0, samples, distances):
    """Elevation angles beta_k, zenith phi and nadir psi in degrees (METHODS.md §3)."""
    beta = [math.degrees(math.atan((z - z0) / d)) for z, d in zip(samples, distances)]
    return beta, 90.0 - max(beta), 90.0 + min(beta)


def reference_pattern(dem, row, col, cellsize, lookup_cells, flatness_deg, skip_cells):
    """Ternary pattern (string over E..SE) of one cell, literally after METHODS.md §3.

    Edge rules as documented by geomorphons(): a line stops at the raster edge or its
    first NaN; steps k <= skip_cells are not read; a line without samples is '0'.
    """
    dx, dy = cellsize
    z0 = float(dem[row, col])
    pattern = ""
    for dr, dc in DIRECTIONS:
        samples, distances = [], []
        for k in range(1, lookup_cells + 1):
            if k <= skip_cells:
                continue
            r, c = row + k * dr, col + k * dc
            if not (0 <= r < dem.shape[0] and 0 <= c < dem.shape[1]):
                break
            z = float(dem[r, c])
            if math.isnan(z):
                break
            samples.append(z)
            distances.append(k * math.hypot(dc * dx, dr * dy))
        if not samples:
            pattern += "0"
            continue
        _, phi, psi = line_angles(z0, samples, distances)
        pattern += "+" if psi - phi > flatness_deg else "-" if psi - phi < -flatness_deg else "0"
    return pattern


def reference_geomorphons(dem, cellsize, lookup_cells, flatness_deg, skip_cells=0):
    dem = np.asarray(dem, dtype=np.float64)
    out = np.zeros(dem.shape, dtype=np.uint8)
    for row, col in np.ndindex(dem.shape):
        if math.isnan(dem[row, col]):
            continue
        p = reference_pattern(dem, row, col, cellsize, lookup_cells, flatness_deg, skip_cells)
        out[row, col] = CODE[table_class(p.count("-"), p.count("+"))]
    return out


def counts(dem, cellsize, **kwargs):
    """(n-, n+) per cell from the real kernel, by swapping in a table that encodes them."""
    count_table = (np.arange(9)[:, None] * 9 + np.arange(9)[None, :] + 1).astype(np.uint8)
    with mock.patch.object(gm_module, "_LOOKUP", count_table):
        codes = geomorphons(dem, cellsize, **kwargs).astype(int)
    return np.divmod(codes - 1, 9)


def random_dem(rng, shape, n_holes=0, dyadic=False):
    """Smoothed noise with fine roughness (metres), optional NaN cells."""
    z = gaussian_filter(rng.normal(size=shape), 2.0) * 30.0 + rng.normal(size=shape) * 0.3
    if dyadic:  # multiples of 1/64: sums and differences below stay exact
        z = np.round(z * 64.0) / 64.0
    if n_holes:
        flat = rng.choice(z.size, size=n_holes, replace=False)
        z.ravel()[flat] = np.nan
    return z


@pytest.fixture
def rng():
    return np.random.default_rng(20240607)


# --- check values, METHODS.md §3 table "Check values (3)" -------------------

_Y, _X = np.mgrid[10:-11:-1, -10:11].astype(np.float64)  # x east, y north of (10, 10)

CHECK_VALUES = [
    # surface, z, pattern (E,NE,N,NW,W,SW,S,SE), (n-, n+), class -- all METHODS.md §3
    ("cone", 100.0 - np.hypot(_X, _Y), "--------", (8, 0), "PK"),
    ("inverted cone", np.hypot(_X, _Y), "++++++++", (0, 8), "PT"),
    ("horizontal plane", np.full_like(_X, 5.0), "00000000", (0, 0), "FL"),
    ("inclined plane", 0.5 * _X + 0.2 * _Y, "+++----+", (4, 4), "SL"),
    ("ridge", -np.abs(_X), "--0---0-", (6, 0), "RI"),
    ("valley", np.abs(_X), "++0+++0+", (0, 6), "VL"),
    ("plateau edge", -np.maximum(_X, 0.0), "--00000-", (3, 0), "SH"),
    ("slope foot", np.maximum(-_X, 0.0), "000+++00", (0, 3), "FS"),
    ("gentle plane", 0.01 * _X, "+000-000", (1, 1), "FL"),
]


@pytest.mark.parametrize(
    "surface, z, pattern, expected_counts, expected_class",
    CHECK_VALUES,
    ids=[row[0] for row in CHECK_VALUES],
)
def test_check_values(surface, z, pattern, expected_counts, expected_class):
    # Reference follows the formulas; it must reproduce the published pattern.
    assert reference_pattern(z, 10, 10, (1.0, 1.0), 5, 1.0, 0) == pattern
    n_minus, n_plus = counts(z, 1.0, lookup_cells=5, flatness_deg=1.0)
    assert (n_minus[10, 10], n_plus[10, 10]) == expected_counts
    got = geomorphons(z, 1.0, lookup_cells=5, flatness_deg=1.0)[10, 10]
    assert LANDFORM_CLASSES[int(got)] == ABBREVIATION_NAMES[expected_class]


def test_single_line_example():
    # METHODS.md §3: delta = 10 m, z_O = 0, z = 0.5, 3.0, -1.0 at k = 1, 2, 3 ->
    # beta = 2.8624, 8.5308, -1.9092; phi = 81.4692; psi = 88.0908; psi - phi = 6.6216.
    # Values are printed to 4 decimals, so atol = 5e-5 deg.
    beta, phi, psi = line_angles(0.0, [0.5, 3.0, -1.0], [10.0, 20.0, 30.0])
    np.testing.assert_allclose(beta, [2.8624, 8.5308, -1.9092], rtol=0, atol=5e-5)
    np.testing.assert_allclose([phi, psi, psi - phi], [81.4692, 88.0908, 6.6216], atol=5e-5)

    # The same line as the east ray of a 1 x 4 DEM: only E has samples.
    dem = np.array([[0.0, 0.5, 3.0, -1.0]])
    for t, expected in [(1.0, (0, 1)), (6.60, (0, 1)), (6.64, (0, 0))]:
        n_minus, n_plus = counts(dem, 10.0, lookup_cells=3, flatness_deg=t)
        assert (n_minus[0, 0], n_plus[0, 0]) == expected, t
    # -z mirrors the element ('+' -> '-').
    n_minus, n_plus = counts(-dem, 10.0, lookup_cells=3, flatness_deg=1.0)
    assert (n_minus[0, 0], n_plus[0, 0]) == (1, 0)


@pytest.mark.parametrize("azimuth_deg", [0.0, 17.0, 45.0, 101.0, 222.0, 300.0])
def test_steep_plane_is_slope(azimuth_deg):
    # METHODS.md §3: any inclined plane steep enough gives n+ = n- -> SL.
    g = math.tan(math.radians(20.0))
    a = math.radians(azimuth_deg)  # clockwise from north
    z = g * (math.sin(a) * _X + math.cos(a) * _Y)
    n_minus, n_plus = counts(z, 1.0, lookup_cells=5)
    assert n_minus[10, 10] == n_plus[10, 10] >= 2
    assert LANDFORM_CLASSES[int(geomorphons(z, 1.0, lookup_cells=5)[10, 10])] == "slope"


# --- lookup table -------------------------------------------------------------


def test_lookup_matches_methods_table():
    lut = _landform_lookup()
    assert lut.shape == (9, 9) and lut.dtype == np.uint8
    for n_minus, n_plus in itertools.product(range(9), repeat=2):
        expected = CODE[table_class(n_minus, n_plus)] if n_minus + n_plus <= 8 else 0
        assert lut[n_minus, n_plus] == expected, (n_minus, n_plus)


def test_lookup_cell_and_class_counts():
    # METHODS.md §3: 45 valid cells; FL 6, SH 5, FS 5, RI 7, VL 7, SL 7, SP 3, HL 3, PK 1, PT 1.
    lut = _landform_lookup()
    valid = np.add.outer(np.arange(9), np.arange(9)) <= 8
    assert valid.sum() == 45
    assert np.all(lut[valid] > 0) and np.all(lut[~valid] == 0)
    expected = {"FL": 6, "SH": 5, "FS": 5, "RI": 7, "VL": 7, "SL": 7, "SP": 3, "HL": 3,
                "PK": 1, "PT": 1}  # fmt: skip
    got = np.bincount(lut[valid], minlength=11)
    assert {abbr: int(got[CODE[abbr]]) for abbr in expected} == expected


def test_lookup_swap_symmetry():
    # METHODS.md §3: LUT(n-, n+) = sigma(LUT(n+, n-)).
    lut = _landform_lookup()
    for n_minus in range(9):
        for n_plus in range(9 - n_minus):
            assert lut[n_minus, n_plus] == SIGMA_CODE[lut[n_plus, n_minus]]


def test_landform_classes():
    assert list(LANDFORM_CLASSES) == list(range(1, 11))
    assert sorted(LANDFORM_CLASSES.values()) == sorted(ABBREVIATION_NAMES.values())
    # Our numbering (issue 7): from the lowest to the highest relative position.
    order = ["pit", "valley", "hollow", "footslope", "flat", "slope", "spur", "shoulder", "ridge", "peak"]
    assert [LANDFORM_CLASSES[c] for c in range(1, 11)] == order


def test_codes_are_ordinal_in_relative_position(rng):
    # The codes rise with the height of a cell above its surroundings: on smooth
    # random relief their Spearman correlation with a local-mean TPI (scipy
    # uniform_filter over the lookup square) is strongly positive (0.81 for this
    # seed; the threshold 0.7 leaves room for other draws).
    from scipy.ndimage import uniform_filter
    from scipy.stats import spearmanr

    z = gaussian_filter(rng.normal(size=(200, 200)), 5.0) * 300.0
    codes = geomorphons(z, 10.0, lookup_cells=8)
    position = z - uniform_filter(z, 17)
    assert spearmanr(codes.ravel(), position.ravel()).statistic > 0.7
    # The +/- swap (METHODS.md §3) mirrors the classes below flat onto those above slope.
    low = [CODE[a] for a in ("PT", "VL", "HL", "FS")]
    assert max(low) < CODE["FL"] < CODE["SL"] < min(SIGMA_CODE[low])


def test_octagon_pattern_counts():
    # METHODS.md §3 (498 confirmed in the paper): 3^8 = 6561 ternary patterns, 498
    # distinct up to rotation + reflection of the octagon, 834 up to rotation only.
    def rotations(p):
        return [p[i:] + p[:i] for i in range(8)]

    patterns = list(itertools.product((-1, 0, 1), repeat=8))
    by_rotation = {min(rotations(p)) for p in patterns}
    by_dihedral = {min(rotations(p) + rotations(p[::-1])) for p in patterns}
    assert (len(patterns), len(by_dihedral), len(by_rotation)) == (6561, 498, 834)


# --- numba kernel vs. pure-Python reference -----------------------------------


@pytest.mark.parametrize(
    "shape, cellsize, lookup_cells, flatness_deg, skip_cells, dtype",
    [
        ((23, 21), (1.0, 1.0), 4, 1.0, 0, np.float64),
        ((23, 21), (2.0, 3.0), 5, 0.5, 1, np.float64),
        ((19, 24), (3.0, 2.0), 6, 2.0, 2, np.float32),
        ((12, 12), (1.0, 1.0), 30, 1.0, 0, np.float32),  # lines end at the edges
    ],
)
def test_matches_reference(rng, shape, cellsize, lookup_cells, flatness_deg, skip_cells, dtype):
    dem = random_dem(rng, shape, n_holes=shape[0] * shape[1] // 15).astype(dtype)
    dem[5:8, 6:9] = np.nan  # a block hole as well as scattered cells
    got = geomorphons(
        dem, cellsize, lookup_cells=lookup_cells, flatness_deg=flatness_deg, skip_cells=skip_cells
    )
    expected = reference_geomorphons(dem, cellsize, lookup_cells, flatness_deg, skip_cells)
    assert got.dtype == np.uint8
    np.testing.assert_array_equal(got, expected)
    assert len(np.unique(got[got > 0])) >= 5  # the comparison covers many classes


# --- edge rules -----------------------------------------------------------------


def test_nan_centre_is_nodata_and_lone_cell_is_flat():
    # Documented edge rule: NaN centre -> 0; a line with no sample is '0', so a
    # valid cell surrounded by NaN has (0, 0) -> FL (METHODS.md §3 table).
    dem = np.full((5, 5), np.nan)
    dem[2, 2] = 7.0
    got = geomorphons(dem, 1.0, lookup_cells=3)
    expected = np.zeros((5, 5), dtype=np.uint8)
    expected[2, 2] = CODE["FL"]
    np.testing.assert_array_equal(got, expected)


def test_nan_stops_line_unless_skipped():
    dem = np.array([[0.0, np.nan, 100.0]])
    # Line E stops at the NaN: the 100 m cell is not seen.
    assert counts(dem, 1.0, lookup_cells=2)[1][0, 0] == 0
    # With skip_cells=1 the NaN is not read and the 100 m cell counts as '+'.
    assert counts(dem, 1.0, lookup_cells=2, skip_cells=1)[1][0, 0] == 1
    # Without the NaN the cell is seen (control).
    assert counts(np.array([[0.0, 0.0, 100.0]]), 1.0, lookup_cells=2)[1][0, 0] == 1


def test_edges_get_classes(rng):
    dem = random_dem(rng, (15, 15))
    got = geomorphons(dem, 1.0, lookup_cells=4)
    assert np.all((got >= 1) & (got <= 10))


def test_windowed_equals_whole_with_lookup_halo(rng):
    # Docstring claim: halo = lookup_cells makes the trimmed window exact.
    dem = random_dem(rng, (40, 40), n_holes=40)
    lookup = 6
    whole = geomorphons(dem, 2.0, lookup_cells=lookup, skip_cells=1)
    r0, r1, c0, c1 = 12, 25, 9, 30
    window = dem[r0 - lookup : r1 + lookup, c0 - lookup : c1 + lookup]
    part = geomorphons(window, 2.0, lookup_cells=lookup, skip_cells=1)
    np.testing.assert_array_equal(part[lookup:-lookup, lookup:-lookup], whole[r0:r1, c0:c1])


# --- invariances (METHODS.md §3 properties) ------------------------------------


def test_negated_dem_swaps_classes(rng):
    # METHODS.md §3: classifying -z gives sigma(class of z) at every cell.
    dem = random_dem(rng, (30, 30), n_holes=30)
    got = geomorphons(-dem, 1.5, lookup_cells=5)
    np.testing.assert_array_equal(got, SIGMA_CODE[geomorphons(dem, 1.5, lookup_cells=5)])


def test_constant_offset_invariance(rng):
    # METHODS.md §3; dyadic elevations keep z + c - (z0 + c) exact, so equality is exact.
    dem = random_dem(rng, (30, 30), n_holes=20, dyadic=True)
    np.testing.assert_array_equal(
        geomorphons(dem + 1024.0, 1.0, lookup_cells=5), geomorphons(dem, 1.0, lookup_cells=5)
    )


@pytest.mark.parametrize(
    "transform, swaps_axes",
    [
        (lambda a: np.rot90(a, 1), True),
        (lambda a: np.rot90(a, 2), False),
        (lambda a: np.rot90(a, 3), True),
        (np.fliplr, False),
        (np.flipud, False),
        (np.transpose, True),
    ],
    ids=["rot90", "rot180", "rot270", "fliplr", "flipud", "transpose"],
)
@pytest.mark.parametrize("cellsize", [(1.0, 1.0), (2.0, 3.0)], ids=["square", "rectangular"])
def test_rotation_and_mirror_invariance(rng, transform, swaps_axes, cellsize):
    # METHODS.md §3: counts are unchanged by 90-degree rotations and mirrors. The
    # whole array is compared, since the edge rules are symmetric too; rotating a
    # rectangular grid by 90 degrees swaps dx and dy.
    dem = random_dem(rng, (24, 27), n_holes=25)
    expected = transform(geomorphons(dem, cellsize, lookup_cells=5))
    moved_cellsize = cellsize[::-1] if swaps_axes else cellsize
    got = geomorphons(np.ascontiguousarray(transform(dem)), moved_cellsize, lookup_cells=5)
    np.testing.assert_array_equal(got, expected)


# --- input handling -------------------------------------------------------------


def test_integer_and_masked_input(rng):
    dem = np.round(random_dem(rng, (15, 16)) * 10).astype(np.int32)
    expected = geomorphons(dem.astype(np.float64), 1.0, lookup_cells=4)
    np.testing.assert_array_equal(geomorphons(dem, 1.0, lookup_cells=4), expected)
    mask = np.zeros(dem.shape, dtype=bool)
    mask[3, 4] = True
    masked = geomorphons(np.ma.masked_array(dem, mask), 1.0, lookup_cells=4)
    with_nan = dem.astype(np.float64)
    with_nan[3, 4] = np.nan
    np.testing.assert_array_equal(masked, geomorphons(with_nan, 1.0, lookup_cells=4))
    assert masked[3, 4] == 0


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"dem": np.zeros((2, 3, 4))}, "dimension"),
        ({"dem": np.array([["a", "b"]])}, "dtype"),
        ({"cellsize": 0.0}, "cellsize"),
        ({"cellsize": (1.0, -1.0)}, "cellsize"),
        ({"cellsize": (1.0, 2.0, 3.0)}, "cellsize"),
        ({"cellsize": "10"}, "cellsize"),
        ({"lookup_cells": 0}, "lookup_cells"),
        ({"lookup_cells": 2.5}, "lookup_cells"),
        ({"skip_cells": -1}, "skip_cells"),
        ({"lookup_cells": 3, "skip_cells": 3}, "skip_cells"),
        ({"flatness_deg": -0.5}, "flatness_deg"),
        ({"flatness_deg": float("nan")}, "flatness_deg"),
        ({"flatness_deg": 180.0}, "flatness_deg"),
    ],
)
def test_invalid_input(kwargs, match):
    args = {"dem": np.zeros((4, 4)), "cellsize": 1.0}
    args.update(kwargs)
    dem, cellsize = args.pop("dem"), args.pop("cellsize")
    with pytest.raises(InputError, match=match):
        geomorphons(dem, cellsize, **args)
