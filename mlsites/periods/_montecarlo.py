"""Monte Carlo simulation of site dates within their ranges (Crema 2012).

Each simulation draws one date per site from its date density, puts it in a
time block and counts sites per block. Over many simulations the counts show
how much the picture of settlement through time can move because of date
uncertainty alone. A second, *null* set of simulations gives the same sites
dates spread evenly through the blocks (no change in site numbers), as the
yardstick for changes between consecutive blocks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from mlsites.errors import InputError
from mlsites.periods._aoristic import TimeBlocks, aoristic_sum, check_density, check_ranges
from mlsites.periods._kernels import _block_counts_kernel

__all__ = ["MonteCarloCounts", "simulate_block_counts", "simulate_null_counts", "monte_carlo",
           "block_table", "NULL_MODEL", "ENVELOPE"]

#: Dates drawn at once (bounds the temporary arrays; results do not depend on it).
_CHUNK_DRAWS = 1 << 22
#: Most simulation x block counts kept (int32: 200 MB).
MAX_COUNT_CELLS = 50_000_000
#: Quantiles of the envelopes: a central 95 % interval (numpy's linear quantiles).
ENVELOPE = (0.025, 0.975)
#: What the null simulations assume, for tables and manifests.
NULL_MODEL = ("uniform through time: each site lies inside the blocks with the probability its own range "
              "gives, and there at a date drawn uniformly over all blocks (constant site numbers, no "
              "change through time)")


def _check_n(n_simulations, n_blocks):
    if isinstance(n_simulations, bool) or not isinstance(n_simulations, (int, np.integer)) or n_simulations < 1:
        raise InputError(f"n_simulations is {n_simulations!r}; expected a whole number >= 1")
    if n_simulations * n_blocks > MAX_COUNT_CELLS:
        raise InputError(f"{n_simulations} simulations x {n_blocks} blocks = {n_simulations * n_blocks} counts, "
                         f"more than {MAX_COUNT_CELLS}; use fewer simulations or wider blocks")
    return int(n_simulations)


def _rng(random_state):
    from mlsites.sampling._sites import resolve_rng

    return resolve_rng(random_state)


def simulate_block_counts(start, end, blocks: TimeBlocks, *, n_simulations=1000, density="uniform",
                          random_state=None) -> np.ndarray:
    """Counts of sites per block over ``n_simulations`` random draws of their dates.

    Parameters
    ----------
    start, end : array_like of shape (n_sites,)
        Site ranges ``[start, end)`` in years.
    blocks : TimeBlocks
    n_simulations : int, default 1000
    density : str or DateDensity, default "uniform"
        Date density within a range; draws use its closed-form inverse.
    random_state : int, numpy Generator or None
        One Generator is used for every draw, in order; the same seed gives the
        same counts whatever the chunking.

    Returns
    -------
    ndarray of int32, shape (n_simulations, n_blocks)
        Row k: how many sites simulation k put in each block. Dates outside
        the blocks are counted nowhere.

    Notes
    -----
    Simulation k draws ``u`` uniform in [0, 1) for every site (row-major, so
    the stream of numbers is the same for any chunk size) and takes the date
    ``F^-1(u)``; its block is found on the block limits (half-open, so a date
    on a limit belongs to the later block). The mean count per block tends to
    the aoristic sum (Crema 2012).

    References
    ----------
    Crema, E. R. (2012). Modelling temporal uncertainty in archaeological
    analysis. Journal of Archaeological Method and Theory 19, 440-461.
    doi:10.1007/s10816-011-9122-3
    """
    s, e = check_ranges(start, end)
    dens = check_density(density)
    n_sim = _check_n(n_simulations, blocks.n_blocks)
    rng = _rng(random_state)
    out = np.zeros((n_sim, blocks.n_blocks), dtype=np.int32)
    if s.size == 0:
        return out
    step = max(1, _CHUNK_DRAWS // s.size)
    for k0 in range(0, n_sim, step):
        k = min(step, n_sim - k0)
        _block_counts_kernel(rng.random((k, s.size)), s, e, dens._ramp, blocks.edges, blocks.width,
                             out[k0:k0 + k])
    return out


def simulate_null_counts(share_inside, blocks: TimeBlocks, *, n_simulations=1000, random_state=None) -> np.ndarray:
    """Counts per block when site numbers do not change through time.

    Parameters
    ----------
    share_inside : array_like of shape (n_sites,)
        Each site's probability of lying inside the blocks at all (the sum of
        its aoristic weights; 1 when the blocks cover its range).
    blocks : TimeBlocks
    n_simulations : int
    random_state : int, numpy Generator or None

    Returns
    -------
    ndarray of int32, shape (n_simulations, n_blocks)

    Notes
    -----
    Null model (:data:`NULL_MODEL`): in each simulation site i is inside with
    probability ``share_inside[i]`` and then at a date uniform over all blocks,
    so the sites inside are spread multinomially in proportion to block widths.
    This is the variation a constant number of sites through time produces; a
    change between blocks beyond it is more than chance placement gives.
    """
    share = np.clip(np.asarray(share_inside, dtype=np.float64).ravel(), 0.0, 1.0)
    n_sim = _check_n(n_simulations, blocks.n_blocks)
    rng = _rng(random_state)
    sure = share >= 1.0
    n_inside = np.full(n_sim, int(sure.sum()), dtype=np.int64)
    partial = share[~sure & (share > 0)]
    if partial.size:
        step = max(1, _CHUNK_DRAWS // partial.size)
        for k0 in range(0, n_sim, step):
            k = min(step, n_sim - k0)
            n_inside[k0:k0 + k] += (rng.random((k, partial.size)) < partial).sum(axis=1)
    widths = np.diff(blocks.edges)
    return rng.multinomial(n_inside, widths / widths.sum()).astype(np.int32)


@dataclass(frozen=True)
class MonteCarloCounts:
    """Simulated counts of one study.

    Attributes
    ----------
    counts : ndarray of int32, shape (n_simulations, n_blocks)
        Counts with dates drawn within the sites' ranges.
    null_counts : ndarray of int32, shape (n_simulations, n_blocks)
        Counts under the uniform-through-time null (:data:`NULL_MODEL`).
    aoristic : ndarray of float64, shape (n_blocks,)
        Aoristic sum per block.
    n_simulations : int
    """

    counts: np.ndarray
    null_counts: np.ndarray
    aoristic: np.ndarray
    n_simulations: int


def monte_carlo(start, end, blocks: TimeBlocks, *, n_simulations=1000, density="uniform",
                random_state=None) -> MonteCarloCounts:
    """Aoristic sums, simulated counts and null counts, from one Generator.

    The Generator draws the dated simulations first and the null ones after, so
    one seed fixes both. Parameters as in :func:`simulate_block_counts`.
    """
    s, e = check_ranges(start, end)
    dens = check_density(density)
    rng = _rng(random_state)
    counts = simulate_block_counts(s, e, blocks, n_simulations=n_simulations, density=dens, random_state=rng)
    share = dens.cdf(blocks.edges[-1], s, e) - dens.cdf(blocks.edges[0], s, e)
    null = simulate_null_counts(share, blocks, n_simulations=n_simulations, random_state=rng)
    return MonteCarloCounts(counts=counts, null_counts=null, aoristic=aoristic_sum(s, e, blocks, density=dens),
                            n_simulations=int(n_simulations))


def _envelope(values):
    lo, hi = np.quantile(values, ENVELOPE, axis=0)
    return lo, hi


def block_table(blocks: TimeBlocks, mc: MonteCarloCounts) -> pd.DataFrame:
    """The per-block table: aoristic sum, Monte Carlo counts, changes, null envelopes.

    Returns
    -------
    pandas.DataFrame
        One row per block:

        - ``block_start``, ``block_end``: the block ``[start, end)`` in years;
        - ``aoristic_sum``: expected number of sites (sum of aoristic weights);
        - ``mc_mean``, ``mc_sd``, ``mc_low``, ``mc_high``: mean, standard
          deviation and 95 % envelope (2.5 and 97.5 % quantiles) of the
          simulated counts;
        - ``null_low``, ``null_high``: 95 % envelope of the counts under the
          uniform-through-time null;
        - ``change_mean``, ``change_low``, ``change_high``: rate of change from
          the previous block, as sites gained (or lost, negative) per block
          step, its mean and 95 % envelope over simulations (empty in the
          first row);
        - ``null_change_low``, ``null_change_high``: the same envelope under
          the null;
        - ``change_sure``: "rise" or "fall" when the change envelope excludes
          zero (the direction holds in at least 97.5 % of the date draws, so
          date uncertainty alone cannot reverse it), else empty;
        - ``change_beyond_null``: "rise" or "fall" when the mean change lies
          above ``null_change_high`` or below ``null_change_low``: a change
          larger than constant site numbers with random dates produce in 95 %
          of null simulations; else empty.

    Notes
    -----
    Crema (2012) reads changes between consecutive blocks against simulation
    envelopes [memory: details]; we use the plain difference in counts, which
    stays defined when a block is empty.
    """
    counts = mc.counts.astype(np.float64)
    null = mc.null_counts.astype(np.float64)
    lo, hi = _envelope(counts)
    nlo, nhi = _envelope(null)
    table = pd.DataFrame({
        "block_start": blocks.starts, "block_end": blocks.ends, "aoristic_sum": mc.aoristic,
        "mc_mean": counts.mean(axis=0), "mc_sd": counts.std(axis=0, ddof=1) if len(counts) > 1 else 0.0,
        "mc_low": lo, "mc_high": hi, "null_low": nlo, "null_high": nhi,
    })
    nan = np.full(1, np.nan)
    change, null_change = np.diff(counts, axis=1), np.diff(null, axis=1)
    if change.shape[1]:
        clo, chi = _envelope(change)
        cnlo, cnhi = _envelope(null_change)
        cmean = change.mean(axis=0)
    else:
        clo = chi = cnlo = cnhi = cmean = np.empty(0)
    table["change_mean"] = np.concatenate([nan, cmean])
    table["change_low"] = np.concatenate([nan, clo])
    table["change_high"] = np.concatenate([nan, chi])
    table["null_change_low"] = np.concatenate([nan, cnlo])
    table["null_change_high"] = np.concatenate([nan, cnhi])
    sure = np.where(table["change_low"] > 0, "rise", np.where(table["change_high"] < 0, "fall", ""))
    beyond = np.where(table["change_mean"] > table["null_change_high"], "rise",
                      np.where(table["change_mean"] < table["null_change_low"], "fall", ""))
    table["change_sure"] = sure
    table["change_beyond_null"] = beyond
    return table
