"""Tests for the exact Euclidean distance transform (Felzenszwalb & Huttenlocher 2012).

References used: ``scipy.ndimage.distance_transform_edt`` (scipy 1.17, exact EDT
between cell centres with per-axis sampling) as the reference implementation,
the distance table of METHODS.md section 4 (10 m cells), and distances that
follow from geometry (a single target cell).
"""

import numpy as np
import pytest
from scipy.ndimage import distance_transform_edt

from mlsites.errors import InputError
from mlsites.terrain import distance_to_cells

# METHODS.md section 4: stream cells of the 6x6 example and the distances (m) to them.
STREAMS_6 = np.array([
    [0, 0, 0, 0, 0, 0],
    [0, 0, 0, 0, 0, 0],
    [0, 0, 0, 1, 0, 0],
    [0, 0, 1, 1, 1, 0],
    [0, 0, 0, 1, 0, 0],
    [0, 0, 0, 1, 0, 0],
], dtype=bool)
DIST_6 = np.array([
    [36.0555, 28.2843, 22.3607, 20.0000, 22.3607, 28.2843],
    [28.2843, 22.3607, 14.1421, 10.0000, 14.1421, 22.3607],
    [22.3607, 14.1421, 10.0000, 0.0000, 10.0000, 14.1421],
    [20.0000, 10.0000, 0.0000, 0.0000, 0.0000, 10.0000],
    [22.3607, 14.1421, 10.0000, 0.0000, 10.0000, 14.1421],
    [28.2843, 20.0000, 10.0000, 0.0000, 10.0000, 20.0000],
])
# float32 output against float64 scipy: float32 rounding is 6e-8 relative.
RTOL = 1e-6


def test_methods_example():
    # Table printed to 4 decimals: tolerance 1e-4 m (METHODS.md section 4).
    np.testing.assert_allclose(distance_to_cells(STREAMS_6, 10.0), DIST_6, rtol=0, atol=1e-4)


@pytest.mark.parametrize("shape", [(40, 37), (1, 50), (50, 1), (3, 600), (257, 5)])
@pytest.mark.parametrize("density", [0.002, 0.05, 0.5])
@pytest.mark.parametrize("cellsize", [1.0, 25.0, (10.0, 30.0), (7.5, 2.0)])
def test_matches_scipy_edt(shape, density, cellsize, global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    mask = rng.random(shape) < density
    mask.flat[rng.integers(mask.size)] = True  # at least one target
    dx, dy = (cellsize, cellsize) if np.isscalar(cellsize) else cellsize
    expected = distance_transform_edt(~mask, sampling=(dy, dx))
    got = distance_to_cells(mask, cellsize)
    assert got.dtype == np.float32
    np.testing.assert_allclose(got, expected, rtol=RTOL, atol=0)


def test_single_target_is_a_cone():
    # Distance from the centre cell is hypot of the metric offsets (geometry).
    mask = np.zeros((9, 11), dtype=bool)
    mask[4, 6] = True
    i, j = np.mgrid[0:9, 0:11]
    expected = np.hypot((i - 4) * 3.0, (j - 6) * 2.0)
    np.testing.assert_allclose(distance_to_cells(mask, (2.0, 3.0)), expected, rtol=RTOL, atol=0)


def test_empty_and_full_masks():
    assert np.all(np.isposinf(distance_to_cells(np.zeros((4, 5), dtype=bool), 1.0)))
    np.testing.assert_array_equal(distance_to_cells(np.ones((4, 5), dtype=bool), 1.0), 0.0)


def test_non_bool_mask_is_cast():
    mask = np.array([[0, 0, 3]], dtype=np.uint8)
    np.testing.assert_array_equal(distance_to_cells(mask, 10.0), [[20.0, 10.0, 0.0]])


@pytest.mark.parametrize("cellsize", [0.0, (1.0, -1.0), (1.0, 2.0, 3.0)])
def test_bad_cellsize(cellsize):
    with pytest.raises(InputError, match="cellsize"):
        distance_to_cells(np.ones((2, 2), dtype=bool), cellsize)
