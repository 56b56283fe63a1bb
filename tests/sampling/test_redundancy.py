"""Tests of redundant_layer_pairs: near-copies among layers over the study area.

Reference: scipy.stats.spearmanr on the same lattice cells, read here by plain NumPy
slicing of the arrays (every step-th row and column).
"""

import numpy as np
import pytest
from affine import Affine
from rasterio.crs import CRS
from scipy.ndimage import gaussian_filter
from scipy.stats import spearmanr

from mlsites.errors import InputError
from mlsites.grid import GridSpec, write_array
from mlsites.sampling import lattice_cells, redundant_layer_pairs

GRID = GridSpec(CRS.from_epsg(32631), Affine(10.0, 0, 500000.0, 0, -10.0, 4000000.0), 90, 70)


def _layers():
    rng = np.random.default_rng(11)
    a = gaussian_filter(rng.normal(size=GRID.shape), 4)
    b = gaussian_filter(rng.normal(size=GRID.shape), 4)
    layers = {
        "a": a,
        "a_affine": 3.0 * a - 7.0,           # an affine copy: rho = 1
        "a_decreasing": np.exp(-a),          # a monotone decreasing copy: rho = -1
        "a_noisy": a + 0.02 * a.std() * rng.normal(size=a.shape),  # close, below 1
        "b": b,                              # unrelated
        "codes": np.floor(a * 10),           # categorical: never compared
    }
    layers["a"][:5, :5] = np.nan             # nodata in one layer drops those cells for all
    return layers


def test_pairs_match_scipy_spearmanr_on_the_lattice():
    layers = _layers()
    rows, cols, step = lattice_cells(GRID, max_cells=1500)
    # lattice: every step-th row and column, step = ceil(sqrt(6300 / 1500)) = 3
    assert step == 3
    assert np.array_equal(np.unique(rows), np.arange(1, 70, 3)) and np.array_equal(np.unique(cols), np.arange(1, 90, 3))
    names = ["a", "a_affine", "a_decreasing", "a_noisy", "b"]
    values = np.column_stack([layers[n][1::3, 1::3].ravel() for n in names])
    values = values[np.isfinite(values).all(axis=1)]
    rho = spearmanr(values).statistic
    expected = {(names[i], names[j]): rho[i, j] for i in range(5) for j in range(i + 1, 5) if abs(rho[i, j]) > 0.99}
    got = redundant_layer_pairs(layers, GRID, kinds={"codes": "categorical"}, max_cells=1500)
    assert got.attrs["n_cells"] == values.shape[0] and got.attrs["step"] == 3
    assert {(r.first, r.second): r.spearman for r in got.itertuples()} == pytest.approx(expected, abs=1e-12)
    # the affine and the decreasing copies are found, the unrelated layer is not
    assert {("a", "a_affine"), ("a", "a_decreasing")} <= set(expected)
    assert not any("b" in pair or "codes" in pair for pair in expected)
    assert got["spearman"].abs().is_monotonic_decreasing


def test_rasters_and_threshold(tmp_path):
    layers = _layers()
    paths = {}
    for name in ("a", "a_noisy", "b"):
        paths[name] = tmp_path / f"{name}.tif"
        write_array(paths[name], layers[name].astype(np.float32), GRID, nodata=-9999.0)
    rows, cols, _ = lattice_cells(GRID)
    values = np.column_stack([layers[n][rows, cols].astype(np.float32) for n in ("a", "a_noisy")])
    values = values[np.isfinite(values).all(axis=1)]
    rho = spearmanr(values[:, 0], values[:, 1]).statistic
    assert 0.99 < rho < 1
    got = redundant_layer_pairs(paths, GRID)
    assert got[["first", "second"]].values.tolist() == [["a", "a_noisy"]]
    assert got["spearman"].iloc[0] == pytest.approx(rho, abs=1e-12)
    assert len(redundant_layer_pairs(paths, GRID, threshold=min(1.0, rho + 1e-6))) == 0
    with pytest.raises(InputError, match="threshold"):
        redundant_layer_pairs(paths, GRID, threshold=1.5)


def test_constant_layer_is_not_reported():
    layers = {"flat": np.ones(GRID.shape), "also_flat": np.full(GRID.shape, 2.0)}
    with np.errstate(all="raise"):
        assert len(redundant_layer_pairs(layers, GRID)) == 0
