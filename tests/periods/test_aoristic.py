"""Time blocks and aoristic weights: METHODS.md §9 check values, sums, the trapezoid density."""

import numpy as np
import pytest
from scipy import integrate

from mlsites.errors import InputError
from mlsites.periods import DateDensity, aoristic_sum, aoristic_weights, sparse_weights, time_blocks

SITE = (-3450.0, -3150.0)  # METHODS.md §9: a site of 3450-3150 BCE as [-3450, -3150)


def test_aligned_blocks_check_values():
    # METHODS.md §9 check values: 100-year blocks on multiples of 100 -> 1/6, 1/3, 1/3, 1/6; neighbours 0
    blocks = time_blocks(100, span=(-3600, -3000))
    w = aoristic_weights([SITE[0]], [SITE[1]], blocks)[0]
    expected = dict(zip(blocks.starts, [0, 1 / 6, 1 / 3, 1 / 3, 1 / 6, 0]))
    assert blocks.starts.tolist() == [-3600, -3500, -3400, -3300, -3200, -3100]
    np.testing.assert_allclose(w, [expected[s] for s in blocks.starts], rtol=0, atol=1e-12)


def test_offset_blocks_check_values():
    # METHODS.md §9: blocks offset by 50 ([-3450, -3350) ...) -> 1/3, 1/3, 1/3
    blocks = time_blocks(100, span=SITE, origin=50)
    assert blocks.edges.tolist() == [-3450, -3350, -3250, -3150]
    np.testing.assert_allclose(aoristic_weights([SITE[0]], [SITE[1]], blocks)[0], [1 / 3] * 3, rtol=0, atol=1e-12)


def test_inclusive_year_reading_check_values():
    # METHODS.md §9: the inclusive reading [-3450, -3149) (301 years), aligned blocks
    blocks = time_blocks(100, span=(-3500, -3100))
    w = aoristic_weights([-3450], [-3149], blocks)[0]
    np.testing.assert_allclose(w, [0.166113, 0.332226, 0.332226, 0.169435], rtol=0, atol=1e-6)


def test_two_sites_check_values():
    # METHODS.md §9: + a second site [-3350, -3250): weights 0.5, 0.5; sums 1/6, 0.833333, 0.833333, 1/6
    blocks = time_blocks(100, span=(-3500, -3100))
    start, end = [SITE[0], -3350], [SITE[1], -3250]
    np.testing.assert_allclose(aoristic_weights(start, end, blocks)[1], [0, 0.5, 0.5, 0], rtol=0, atol=1e-12)
    np.testing.assert_allclose(aoristic_sum(start, end, blocks), [1 / 6, 0.833333, 0.833333, 1 / 6],
                               rtol=0, atol=1e-6)


@pytest.mark.parametrize("density", [DateDensity("uniform"), DateDensity("trapezoid", 0.25),
                                     DateDensity("trapezoid", 0.5), DateDensity("trapezoid", 0.01)])
def test_weights_of_each_site_sum_to_one_over_covering_blocks(density, global_random_seed):
    # aoristic weights are a probability distribution over blocks covering the range (Ratcliffe 2000)
    rng = np.random.default_rng(global_random_seed)
    start = rng.uniform(-5000, 1000, 300).round()
    end = start + rng.choice([0, 1, 7, 50, 333, 1200], 300)
    for width, origin in [(1, 0), (25, 3), (100, 0), (250, -17.5), (10_000, 0)]:
        blocks = time_blocks(width, span=(start.min(), end.max()), origin=origin)
        w = aoristic_weights(start, end, blocks, density=density)
        assert (w >= -1e-15).all()
        np.testing.assert_allclose(w.sum(axis=1), 1.0, rtol=0, atol=1e-12)
        np.testing.assert_allclose(aoristic_sum(start, end, blocks, density=density), w.sum(axis=0),
                                   rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(sparse_weights(start, end, blocks, density=density).toarray(), w,
                                   rtol=0, atol=0)


def test_part_of_a_range_outside_the_span_is_not_counted():
    # overlap / duration (METHODS.md §9): only [-3400, -3150) of [-3450, -3150) lies in the blocks
    blocks = time_blocks(100, span=(-3400, -3100))
    np.testing.assert_allclose(aoristic_weights([SITE[0]], [SITE[1]], blocks).sum(), 250 / 300, rtol=1e-12)


def test_point_date_falls_in_the_block_holding_it():
    # half-open blocks: a date on a limit belongs to the later block
    blocks = time_blocks(100, span=(-3500, -3100))
    np.testing.assert_array_equal(aoristic_weights([-3400, -3333], [-3400, -3333], blocks),
                                  [[0, 1, 0, 0], [0, 1, 0, 0]])


@pytest.mark.parametrize("ramp", [0.1, 0.25, 0.5])
def test_trapezoid_weights_equal_the_integral_of_the_density(ramp):
    # closed form against numerical integration (scipy.integrate.quad) of the trapezoid density:
    # rises linearly over ramp * d, flat, falls over ramp * d, area one
    s, e = SITE
    d, r = e - s, ramp * (e - s)
    h = 1 / (d - r)

    def pdf(x):
        t = x - s
        return h * min(t / r, 1.0, (d - t) / r) if 0 <= t <= d else 0.0

    assert integrate.quad(pdf, s, e, points=[s + r, e - r])[0] == pytest.approx(1.0, abs=1e-10)
    blocks = time_blocks(37, span=SITE, origin=11)
    w = aoristic_weights([s], [e], blocks, density=DateDensity("trapezoid", ramp))[0]
    kinks = [s, s + r, e - r, e]

    def integral(a, b):  # quad is accurate on each smooth piece
        cuts = [a, *[k for k in kinks if a < k < b], b]
        return sum(integrate.quad(pdf, lo, hi, epsabs=1e-14)[0] for lo, hi in zip(cuts[:-1], cuts[1:]))

    expected = [integral(a, b) for a, b in zip(blocks.starts, blocks.ends)]
    np.testing.assert_allclose(w, expected, rtol=0, atol=1e-12)


def test_trapezoid_trusts_the_middle_more():
    blocks = time_blocks(100, span=(-3500, -3100))
    uni = aoristic_weights([SITE[0]], [SITE[1]], blocks)[0]
    tra = aoristic_weights([SITE[0]], [SITE[1]], blocks, density="trapezoid")[0]
    assert tra[0] < uni[0] and tra[1] > uni[1] and tra[2] > uni[2] and tra[3] < uni[3]


@pytest.mark.parametrize("ramp", [0.25, 0.5])
def test_trapezoid_inverse_is_the_inverse(ramp):
    dens = DateDensity("trapezoid", ramp)
    u = np.linspace(0, 1, 1001, endpoint=False)
    np.testing.assert_allclose(dens.cdf(dens.ppf(u, -3450, -3150), -3450, -3150), u, rtol=0, atol=1e-12)


@pytest.mark.parametrize("width, span, match", [
    (0.5, (-3500, -3100), "narrower than a year"),
    (1, (-10_000, 5), "at most 10000"),
    (100, (-3100, -3500), "empty or reversed"),
    (float("nan"), (-3500, -3100), "finite number"),
])
def test_bad_blocks_are_one_line_errors(width, span, match):
    with pytest.raises(InputError, match=match) as err:
        time_blocks(width, span=span)
    assert "\n" not in str(err.value)


def test_exactly_ten_thousand_blocks_are_allowed():
    assert time_blocks(1, span=(-10_000, 0)).n_blocks == 10_000


def test_end_before_start_is_an_error_naming_the_sites():
    blocks = time_blocks(100, span=(-3500, -3100))
    with pytest.raises(InputError, match=r"1 site\(s\) with an end year before its start"):
        aoristic_weights([-3150], [-3450], blocks)


@pytest.mark.parametrize("density", ["gaussian", DateDensity])
def test_bad_density_is_refused(density):
    with pytest.raises(InputError):
        aoristic_weights([0], [1], time_blocks(1, span=(0, 1)), density=density)


@pytest.mark.parametrize("ramp", [0, 0.6, -0.1])
def test_bad_ramp_is_refused(ramp):
    with pytest.raises(InputError, match="ramp_share"):
        DateDensity("trapezoid", ramp)
