"""Monte Carlo dating (Crema 2012): METHODS.md §9 proportions, convergence, null, table."""

import numpy as np
import pytest
from scipy import stats

from mlsites.errors import InputError
from mlsites.periods import (
    DateDensity,
    aoristic_sum,
    aoristic_weights,
    block_table,
    monte_carlo,
    simulate_block_counts,
    simulate_null_counts,
    time_blocks,
)
from mlsites.periods._montecarlo import MonteCarloCounts


def _numpy_counts(start, end, blocks, n, density, seed):
    """Slow reference: inverse-CDF dates, searchsorted on the limits, count per row."""
    rng = np.random.default_rng(seed)
    dens = DateDensity(density) if isinstance(density, str) else density
    out = np.zeros((n, blocks.n_blocks), dtype=np.int64)
    u = rng.random((n, len(start)))
    for k in range(n):
        idx = np.searchsorted(blocks.edges, dens.ppf(u[k], start, end), side="right") - 1
        for i in idx[(idx >= 0) & (idx < blocks.n_blocks)]:
            out[k, i] += 1
    return out


def test_proportions_match_methods_check_values():
    # METHODS.md §9: N = 10 000 uniform draws in [-3450, -3150), aligned blocks; proportions within
    # 1/6 +- 0.0112, 1/3 +- 0.0141 (3 sd of a binomial share)
    blocks = time_blocks(100, span=(-3500, -3100))
    counts = simulate_block_counts([-3450], [-3150], blocks, n_simulations=10_000, random_state=0)
    share = counts.sum(axis=0) / 10_000
    assert (np.abs(share - [1 / 6, 1 / 3, 1 / 3, 1 / 6]) <= [0.0112, 0.0141, 0.0141, 0.0112]).all(), share
    assert (counts.sum(axis=1) == 1).all()  # one date per site per simulation


@pytest.mark.parametrize("density", ["uniform", DateDensity("trapezoid", 0.3)])
def test_mean_converges_to_aoristic_sum_within_3_standard_errors(density, global_random_seed):
    # Crema 2012: the per-block mean count converges to the aoristic sum; se = sd / sqrt(N)
    rng = np.random.default_rng(global_random_seed)
    start = rng.uniform(-3000, 0, 400).round()
    end = start + rng.choice([0, 50, 200, 700], 400)
    blocks = time_blocks(100, span=(start.min(), end.max()))
    n = 4000
    counts = simulate_block_counts(start, end, blocks, n_simulations=n, density=density, random_state=1)
    expected = aoristic_sum(start, end, blocks, density=density)
    se = counts.std(axis=0, ddof=1) / np.sqrt(n)
    ok = np.abs(counts.mean(axis=0) - expected) <= 3 * se + 1e-12
    # 3 se holds for 99.7 % of blocks if the mean is right; allow one block in a hundred to stray
    assert ok.mean() >= 0.99, np.flatnonzero(~ok)


def test_trapezoid_draws_follow_their_cdf():
    # Kolmogorov-Smirnov test (scipy.stats.kstest) of the inverse-CDF draws against the closed-form CDF
    dens = DateDensity("trapezoid", 0.2)
    u = np.random.default_rng(3).random(20_000)
    dates = dens.ppf(u, -3450, -3150)
    assert stats.kstest(dates, lambda x: dens.cdf(x, -3450, -3150)).pvalue > 1e-3


@pytest.mark.parametrize("density", ["uniform", DateDensity("trapezoid", 0.25)])
def test_kernel_equals_numpy_reference(density, global_random_seed):
    rng = np.random.default_rng(global_random_seed)
    start = rng.uniform(-1000, 1000, 60).round(1)
    end = start + rng.choice([0, 0.5, 10, 99.9, 300], 60)
    start[:3], end[:3] = [-500, -400, 700], [-500, -400, 700]  # point dates on block limits
    blocks = time_blocks(50, span=(-800, 900), origin=0)  # some ranges stick out of the span
    got = simulate_block_counts(start, end, blocks, n_simulations=300, density=density, random_state=5)
    np.testing.assert_array_equal(got, _numpy_counts(start, end, blocks, 300, density, 5))


def test_counts_do_not_depend_on_chunking(monkeypatch):
    start, end = np.array([-3450.0, -3350, -3300]), np.array([-3150.0, -3250, -3000])
    blocks = time_blocks(100, span=(-3500, -3000))
    whole = simulate_block_counts(start, end, blocks, n_simulations=500, random_state=9)
    monkeypatch.setattr("mlsites.periods._montecarlo._CHUNK_DRAWS", 7)
    np.testing.assert_array_equal(simulate_block_counts(start, end, blocks, n_simulations=500, random_state=9),
                                  whole)


def test_null_is_uniform_through_time():
    # under the null every block of equal width expects n / n_blocks sites (multinomial)
    blocks = time_blocks(100, span=(-3500, -3000))
    null = simulate_null_counts(np.ones(50), blocks, n_simulations=20_000, random_state=2)
    assert (null.sum(axis=1) == 50).all()
    se = null.std(axis=0, ddof=1) / np.sqrt(20_000)
    assert (np.abs(null.mean(axis=0) - 10) <= 3 * se).all()
    # a site half outside the blocks is inside in about half the simulations (binomial)
    half = simulate_null_counts([0.5], blocks, n_simulations=20_000, random_state=2).sum(axis=1)
    assert abs(half.mean() - 0.5) <= 3 * np.sqrt(0.25 / 20_000)


def test_block_table_envelopes_and_flags():
    # constructed counts: two blocks, the second always 5 more than the first
    blocks = time_blocks(100, span=(0, 200))
    counts = np.column_stack([np.arange(100) % 3, np.arange(100) % 3 + 5]).astype(np.int32)
    null = np.column_stack([np.arange(100) % 4, 3 - np.arange(100) % 4]).astype(np.int32)
    mc = MonteCarloCounts(counts=counts, null_counts=null, aoristic=np.array([1.0, 6.0]), n_simulations=100)
    t = block_table(blocks, mc)
    assert t["block_start"].tolist() == [0, 100]
    np.testing.assert_allclose(t["mc_mean"], counts.mean(axis=0))
    np.testing.assert_allclose(t[["mc_low", "mc_high"]].to_numpy(),
                               np.quantile(counts, [0.025, 0.975], axis=0).T)
    assert np.isnan(t.loc[0, "change_mean"]) and t.loc[1, "change_mean"] == 5
    assert t.loc[1, "change_low"] == 5 and t.loc[1, "change_sure"] == "rise"
    # null changes are 3 - 2 (i mod 4) in {3, 1, -1, -3}: a change of 5 lies beyond them
    assert t.loc[1, "change_beyond_null"] == "rise"


def test_a_real_rise_is_flagged_and_a_flat_series_is_not():
    # 200 sites in the last block only vs. spread evenly: the rise at the last limit is beyond the null
    blocks = time_blocks(100, span=(0, 1000))
    rng = np.random.default_rng(4)
    flat = rng.uniform(0, 950, 300).round()
    start = np.concatenate([flat, np.full(200, 900.0)])
    end = np.concatenate([flat + 50, np.full(200, 1000.0)])
    t = block_table(blocks, monte_carlo(start, end, blocks, n_simulations=2000, random_state=0))
    assert t["change_beyond_null"].tolist()[-1] == "rise"
    t_flat = block_table(blocks, monte_carlo(flat, flat + 50, blocks, n_simulations=2000, random_state=0))
    assert (t_flat["change_beyond_null"] == "").mean() >= 0.8


def test_same_seed_same_counts():
    blocks = time_blocks(100, span=(-3500, -3000))
    a = monte_carlo([-3450], [-3150], blocks, n_simulations=200, random_state=11)
    b = monte_carlo([-3450], [-3150], blocks, n_simulations=200, random_state=11)
    np.testing.assert_array_equal(a.counts, b.counts)
    np.testing.assert_array_equal(a.null_counts, b.null_counts)
    np.testing.assert_allclose(a.aoristic, aoristic_weights([-3450], [-3150], blocks)[0])


@pytest.mark.parametrize("n", [0, 2.5, True])
def test_bad_number_of_simulations(n):
    with pytest.raises(InputError, match="n_simulations"):
        simulate_block_counts([0], [1], time_blocks(1, span=(0, 1)), n_simulations=n)


def test_too_many_counts_are_refused():
    with pytest.raises(InputError, match="fewer simulations or wider blocks"):
        simulate_block_counts([0], [1], time_blocks(1, span=(0, 10_000)), n_simulations=10_000)
