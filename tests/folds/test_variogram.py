"""Tests for the empirical variogram, model fits and the block-size suggestion."""

import warnings

import numpy as np
import pytest

from mlsites.errors import DataQualityWarning, InputError, InsufficientDataError
from mlsites.folds import (
    empirical_variogram,
    fit_variogram,
    suggest_block_size,
    variogram_model,
)

CELL = 10.0  # metres per grid cell in the random-field tests


def gaussian_random_field(n, range_param_cells, model, seed):
    """Stationary Gaussian random field, unit variance, on an n x n grid.

    Circulant embedding with the FFT (Dietrich & Newsam 1997, SIAM J. Sci. Comput.
    18:1088-1107, doi:10.1137/S1064827592240555): the covariance on a 2n x 2n
    torus is diagonalised by the 2-D DFT; complex white noise scaled by the square
    root of its eigenvalues and transformed back gives two independent fields (real
    and imaginary part) with exactly that covariance when all eigenvalues are >= 0.
    """
    m = 2 * n
    lag = np.minimum(np.arange(m), m - np.arange(m))
    h = np.hypot(lag[:, None], lag[None, :]) / range_param_cells
    if model == "exponential":
        cov = np.exp(-h)
    else:  # spherical
        t = np.minimum(h, 1.0)
        cov = 1.0 - 1.5 * t + 0.5 * t**3
    eig = np.fft.fft2(cov).real
    assert eig.min() > -1e-9 * eig.max(), "embedding not non-negative definite"
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal((m, m)) + 1j * rng.standard_normal((m, m))
    field = np.fft.fft2(np.sqrt(np.clip(eig, 0, None) / (m * m)) * noise)
    return field.real[:n, :n]


def _sample_field(field, n_points, seed):
    n = field.shape[0]
    idx = np.random.default_rng(seed + 1000).choice(n * n, n_points, replace=False)
    row, col = np.divmod(idx, n)
    return (col + 0.5) * CELL, (n - row - 0.5) * CELL, field.ravel()[idx]


# ------------------------------------------------------------ empirical variogram


def test_transect_methods_check_values():
    # METHODS.md §6 check values: transect x = 0..4, z = 1..5 -> gamma(1) = 0.5 with 4
    # pairs, gamma(2) = 2.0 with 3 pairs (gamma(h) = (h^2)/2 for z = x + 1), tol 1e-12
    vg = empirical_variogram(np.arange(5.0), np.zeros(5), np.arange(1.0, 6.0), n_lags=5, max_lag=5)
    assert vg.count.tolist() == [0, 4, 3, 2, 1]
    np.testing.assert_allclose(vg.lag[1:], [1, 2, 3, 4], rtol=0, atol=1e-12)
    np.testing.assert_allclose(vg.gamma[1:3], [0.5, 2.0], rtol=0, atol=1e-12)
    assert np.isnan(vg.gamma[0]) and not vg.subsampled


def test_empirical_variogram_matches_brute_force_pairs():
    # Reference: explicit double loop over all unordered pairs with the same bins.
    rng = np.random.default_rng(0)
    x, y, z = rng.uniform(0, 100, (3, 120))
    n_lags, max_lag = 7, 60.0
    gsum, cnt, dsum = np.zeros(n_lags), np.zeros(n_lags), np.zeros(n_lags)
    for i in range(x.size):
        for j in range(i + 1, x.size):
            d = np.hypot(x[i] - x[j], y[i] - y[j])
            if d <= max_lag:
                k = min(int(d // (max_lag / n_lags)), n_lags - 1)
                gsum[k] += (z[i] - z[j]) ** 2
                cnt[k] += 1
                dsum[k] += d
    vg = empirical_variogram(x, y, z, n_lags=n_lags, max_lag=max_lag)
    assert vg.count.tolist() == cnt.astype(int).tolist()
    np.testing.assert_allclose(vg.gamma, gsum / (2 * cnt), rtol=1e-12)
    np.testing.assert_allclose(vg.lag, dsum / cnt, rtol=1e-12)


def test_subsampled_variogram_of_white_noise_is_flat():
    # iid N(0, 1) values: gamma(h) = 1 at every lag (no autocorrelation). With ~40 000
    # pairs per estimate the standard error is below 0.02; 0.1 is 5 standard errors.
    rng = np.random.default_rng(2)
    x, y = rng.uniform(0, 1000, (2, 6000))
    z = rng.standard_normal(6000)
    vg = empirical_variogram(x, y, z, n_lags=5, max_lag=300, max_pairs=200_000, random_state=0)
    assert vg.subsampled and vg.n_points < 6000
    assert 100_000 < vg.count.sum() < 400_000
    np.testing.assert_allclose(vg.gamma, 1.0, atol=0.1)


def test_missing_values_are_counted_and_dropped():
    z = np.array([1.0, np.nan, 3.0, 4.0, np.nan])
    with pytest.warns(DataQualityWarning, match="2 of 5"):
        vg = empirical_variogram(np.arange(5.0), np.zeros(5), z, n_lags=2, max_lag=4)
    assert vg.n_points == 3


def test_empirical_variogram_rejects_bad_input():
    with pytest.raises(InsufficientDataError, match="at least 3"):
        empirical_variogram([0.0, 1.0], [0.0, 0.0], [1.0, 2.0])
    with pytest.raises(InputError, match="z has 2"):
        empirical_variogram([0.0, 1.0, 2.0], [0.0, 0.0, 0.0], [1.0, 2.0])


# ---------------------------------------------------------------------- models


def test_exponential_model_methods_check_values():
    # METHODS.md §6: c0 = 0, c = 1, a = 100 -> gamma(100) = 0.632121, gamma(300) = 0.950213
    g = variogram_model([100.0, 300.0], model="exponential", nugget=0, partial_sill=1, range_param=100)
    np.testing.assert_allclose(g, [0.632121, 0.950213], atol=1e-6)


def test_spherical_and_gaussian_model_values():
    # spherical: gamma(a/2) = 1.5 * 0.5 - 0.5 * 0.125 = 0.6875, sill from a on (derived);
    # Gaussian: gamma(a) = 1 - exp(-1) (derived from the formula in METHODS.md §6)
    g = variogram_model([50.0, 100.0, 250.0], model="spherical", nugget=0.2, partial_sill=1, range_param=100)
    np.testing.assert_allclose(g, [0.8875, 1.2, 1.2], atol=1e-12)
    g = variogram_model([100.0], model="gaussian", nugget=0, partial_sill=1, range_param=100)
    np.testing.assert_allclose(g, [1 - np.exp(-1)], atol=1e-12)
    assert variogram_model([0.0], model="exponential", nugget=0.3, partial_sill=1, range_param=5)[0] == 0


@pytest.mark.parametrize(
    "model, practical",
    # METHODS.md §6: practical range 3a = 300 (exponential), sqrt(3) a = 173.2051
    # (Gaussian), a = 100 (spherical), for a = 100
    [("exponential", 300.0), ("gaussian", 173.2051), ("spherical", 100.0)],
)
def test_fit_recovers_noise_free_model(model, practical):
    h = np.linspace(5, 400, 40)
    g = variogram_model(h, model=model, nugget=0.1, partial_sill=2.0, range_param=100.0)
    fit = fit_variogram(h, g, np.full(h.size, 50), model=model)
    # noise-free data: the least-squares optimum is exact up to solver tolerance
    np.testing.assert_allclose([fit.nugget, fit.partial_sill, fit.range_param], [0.1, 2.0, 100.0], rtol=1e-4, atol=1e-6)
    np.testing.assert_allclose(fit.practical_range, practical, rtol=1e-4)
    assert fit.resolved and fit.sill == pytest.approx(2.1, rel=1e-4)


def test_fit_flags_a_range_beyond_the_lags():
    h = np.linspace(1, 50, 20)  # the exponential sill is reached only near 300
    g = variogram_model(h, model="exponential", nugget=0, partial_sill=1, range_param=100)
    assert not fit_variogram(h, g, np.ones(20)).resolved


def test_fit_needs_three_bins_and_a_known_model():
    with pytest.raises(InsufficientDataError, match="3 non-empty"):
        fit_variogram([1.0, 2.0, np.nan], [0.1, 0.2, np.nan], [3, 3, 0])
    with pytest.raises(InputError, match="exponential, spherical, gaussian"):
        fit_variogram([1.0, 2.0, 3.0], [1, 2, 3], [1, 1, 1], model="cubic")


# -------------------------------------------- range recovery on random fields


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize(
    "model, range_param_cells, practical_cells",
    # practical range 3a (exponential) or a (spherical), METHODS.md §6
    [("exponential", 4, 12), ("spherical", 12, 12)],
)
def test_practical_range_recovered_on_gaussian_random_fields(model, range_param_cells, practical_cells, seed):
    # Issue requirement: range recovered within 25 % on fields of known range. A
    # 256 x 256 field is about 20 practical ranges wide; 4000 sampled cells; lags up
    # to 3 practical ranges.
    field = gaussian_random_field(256, range_param_cells, model, seed)
    x, y, z = _sample_field(field, 4000, seed)
    true_range = practical_cells * CELL
    vg = empirical_variogram(x, y, z, n_lags=20, max_lag=3 * true_range, random_state=seed)
    fit = fit_variogram(vg.lag, vg.gamma, vg.count, model=model)
    assert abs(fit.practical_range / true_range - 1) <= 0.25
    assert fit.sill == pytest.approx(1.0, abs=0.25)  # unit-variance field


# --------------------------------------------------------- block-size suggestion


def test_suggest_block_size_on_random_fields():
    short = gaussian_random_field(256, 4, "exponential", 10)  # practical range 120 m
    long = gaussian_random_field(256, 24, "spherical", 11)  # practical range 240 m
    x, y, zs = _sample_field(short, 4000, 10)
    _, _, zl = _sample_field(long, 4000, 10)
    layers = {"short": zs, "long": zl}
    res = suggest_block_size(x, y, layers, model="best", random_state=0)
    t = res.table.set_index("layer")
    assert t.loc["short", "practical_range_m"] == pytest.approx(120, rel=0.25)
    assert t.loc["long", "practical_range_m"] == pytest.approx(240, rel=0.25)
    # rule: median of the resolved practical ranges (documented)
    assert res.block_size == pytest.approx(np.median(t["practical_range_m"]), rel=1e-12)
    text = str(res)
    assert "short" in text and "long" in text and "suggested block size" in text
    res_max = suggest_block_size(x, y, layers, model="best", rule="max", random_state=0)
    assert res_max.block_size == pytest.approx(t["practical_range_m"].max(), rel=1e-12)


def test_suggest_block_size_warns_about_unresolved_layers():
    # A linear trend has no sill: its layer is named in a warning and left out.
    rng = np.random.default_rng(3)
    field = gaussian_random_field(128, 3, "exponential", 3)
    x, y, z = _sample_field(field, 2000, 3)
    layers = {"noise_field": z, "trend": x / 100.0 + rng.normal(0, 0.01, x.size)}
    with pytest.warns(DataQualityWarning, match="trend"):
        res = suggest_block_size(x, y, layers, max_lag=400, refine=False, random_state=0)
    t = res.table.set_index("layer")
    assert not t.loc["trend", "resolved"] and t.loc["noise_field", "resolved"]
    assert res.block_size == t.loc["noise_field", "practical_range_m"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        with pytest.raises(InsufficientDataError, match="larger"):
            suggest_block_size(x, y, {"trend": layers["trend"]}, max_lag=400)


def test_suggest_block_size_rejects_bad_options():
    with pytest.raises(InputError, match="median, max"):
        suggest_block_size([0, 1, 2], [0, 0, 0], {"a": [1, 2, 3]}, rule="mean")
    with pytest.raises(InputError, match="layers is empty"):
        suggest_block_size([0, 1, 2], [0, 0, 0], {})
