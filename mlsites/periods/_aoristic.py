"""Time blocks, date densities within a site's range, and aoristic weights.

A site's date is uncertain within its range ``[start, end)`` (years on one
continuous axis, negative before year 1). Aoristic analysis (Ratcliffe 2000)
spreads each site's unit of probability over the time blocks its range overlaps;
the sum over sites of a block is the expected number of sites in it.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import numpy as np

from mlsites.errors import InputError

__all__ = ["MAX_BLOCKS", "DENSITIES", "TimeBlocks", "time_blocks", "DateDensity", "check_density",
           "check_ranges", "aoristic_weights", "aoristic_sum", "sparse_weights"]

#: Most time blocks a study may have (more is a sign of a wrong width or span).
MAX_BLOCKS = 10_000
#: Shapes of the date density within a site's range.
DENSITIES = ("uniform", "trapezoid")
#: Weights (sites x block limits) computed at once when they are summed or stored sparse.
_CHUNK_VALUES = 1 << 22


def _site_chunk(blocks) -> int:
    return max(1, _CHUNK_VALUES // (blocks.n_blocks + 1))


@dataclass(frozen=True)
class TimeBlocks:
    """Consecutive half-open time blocks ``[edges[j], edges[j + 1])`` of one width.

    Attributes
    ----------
    edges : ndarray of float64, shape (n_blocks + 1,)
        Block limits in years (negative before year 1), increasing.
    width : float
        Block width in years.
    origin : float
        A year every block limit is aligned on (limits are ``origin + k * width``).
    """

    edges: np.ndarray
    width: float
    origin: float

    @property
    def n_blocks(self) -> int:
        return len(self.edges) - 1

    @property
    def starts(self) -> np.ndarray:
        return self.edges[:-1]

    @property
    def ends(self) -> np.ndarray:
        return self.edges[1:]

    def labels(self) -> list[str]:
        """``"start..end"`` per block, years as numbers (for tables and file names)."""
        return [f"{a:g}..{b:g}" for a, b in zip(self.starts, self.ends)]


def _finite_number(value, what) -> float:
    if not isinstance(value, numbers.Real) or isinstance(value, bool) or not math.isfinite(value):
        raise InputError(f"{what} is {value!r}; expected a finite number of years")
    return float(value)


def time_blocks(width, *, span, origin=0.0) -> TimeBlocks:
    """Blocks of ``width`` years covering ``span``, their limits aligned on ``origin``.

    Parameters
    ----------
    width : float
        Block width in years, at least 1.
    span : (float, float)
        First and last year to cover, ``[span[0], span[1])``; the blocks are
        extended outwards to the nearest aligned limits.
    origin : float, default 0
        Block limits are ``origin + k * width`` for whole numbers ``k``; with
        width 100 and origin 0 they fall on whole centuries, origin 50 shifts
        them by half a block.

    Returns
    -------
    TimeBlocks

    Raises
    ------
    InputError
        Width below a year, an empty or reversed span, or more than
        :data:`MAX_BLOCKS` blocks.

    Examples
    --------
    >>> time_blocks(100, span=(-3450, -3150)).edges.tolist()
    [-3500.0, -3400.0, -3300.0, -3200.0, -3100.0]
    >>> time_blocks(100, span=(-3450, -3150), origin=50).edges.tolist()
    [-3450.0, -3350.0, -3250.0, -3150.0]
    """
    width = _finite_number(width, "block width")
    origin = _finite_number(origin, "block origin")
    if width < 1:
        raise InputError(f"block width {width:g} years is narrower than a year; use block_width_years >= 1")
    try:
        lo, hi = (float(v) for v in span)
    except (TypeError, ValueError):
        raise InputError(f"span {span!r}; expected two years [start, end)") from None
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        raise InputError(f"span [{lo:g}, {hi:g}) is empty or reversed; give [start, end) with start < end")
    k0 = math.floor((lo - origin) / width)
    k1 = math.ceil((hi - origin) / width)
    n = k1 - k0
    if n > MAX_BLOCKS:
        raise InputError(f"{n} time blocks of {width:g} years over [{lo:g}, {hi:g}); at most {MAX_BLOCKS} "
                         "are allowed: use wider blocks (block_width_years) or a shorter span")
    edges = origin + width * np.arange(k0, k1 + 1, dtype=np.float64)
    return TimeBlocks(edges=edges, width=width, origin=origin)


@dataclass(frozen=True)
class DateDensity:
    """Probability density of a site's date within its range ``[start, end)``.

    Parameters
    ----------
    kind : {"uniform", "trapezoid"}
        ``"uniform"``: every year of the range equally likely (Ratcliffe 2000).
        ``"trapezoid"``: the density rises linearly from zero at ``start`` over
        the first ``ramp_share`` of the range, stays flat, and falls to zero over
        the last ``ramp_share``, so the middle of a range is trusted more than
        its ends.
    ramp_share : float, default 0.25
        Share of the range taken by each ramp, in (0, 0.5]; 0.5 is a triangle.
        Ignored for ``"uniform"``.

    Notes
    -----
    With duration ``d = end - start``, ramp ``r = ramp_share * d`` and height
    ``h = 1 / (d - r)`` (so the area is one), the cumulative distribution at
    ``t = clip(x - start, 0, d)`` is, in closed form [derived],

    - ``h t^2 / (2 r)`` for ``t < r``,
    - ``h (t - r / 2)`` for ``r <= t <= d - r``,
    - ``1 - h (d - t)^2 / (2 r)`` for ``t > d - r``;

    ``r = 0`` gives the uniform ``t / d``. Block weights are differences of it,
    so they are exact and sum to one over blocks covering the range. Its
    inverse (for Monte Carlo draws) is closed form too. A range with
    ``start == end`` is a point date: all its probability is at ``start``.
    """

    kind: str = "uniform"
    ramp_share: float = 0.25

    def __post_init__(self):
        if self.kind not in DENSITIES:
            raise InputError(f"date density {self.kind!r}; choose one of {', '.join(DENSITIES)}")
        if self.kind == "trapezoid":
            r = self.ramp_share
            if not isinstance(r, numbers.Real) or isinstance(r, bool) or not 0 < r <= 0.5:
                raise InputError(f"ramp_share {r!r}; expected a share in (0, 0.5] of the range per ramp")

    @property
    def _ramp(self) -> float:
        return float(self.ramp_share) if self.kind == "trapezoid" else 0.0

    def cdf(self, x, start, end) -> np.ndarray:
        """Probability that the date is before ``x`` (arrays broadcast)."""
        x, start, end = (np.asarray(v, dtype=np.float64) for v in (x, start, end))
        d = end - start
        t = np.clip(x - start, 0.0, np.maximum(d, 0.0))
        point = d == 0
        with np.errstate(divide="ignore", invalid="ignore"):
            if self._ramp == 0.0:
                out = t / d
            else:
                r = self._ramp * d
                h = 1.0 / (d - r)
                out = h * (t - 0.5 * r)
                out = np.where(t < r, h * t * t / (2.0 * r), out)
                out = np.where(t > d - r, 1.0 - h * (d - t) ** 2 / (2.0 * r), out)
        return np.where(point, (x > start).astype(np.float64), out)

    def ppf(self, u, start, end) -> np.ndarray:
        """Date at cumulative probability ``u`` in [0, 1) (the inverse of :meth:`cdf`)."""
        u, start, end = (np.asarray(v, dtype=np.float64) for v in (u, start, end))
        d = end - start
        if self._ramp == 0.0:
            return start + u * d
        r = self._ramp * d
        with np.errstate(divide="ignore", invalid="ignore"):
            h = 1.0 / (d - r)
            a = 0.5 * h * r  # probability under each ramp
            t = np.where(u < a, np.sqrt(2.0 * r * u / h),
                         np.where(u <= 1.0 - a, u / h + 0.5 * r, d - np.sqrt(2.0 * r * (1.0 - u) / h)))
        return start + np.where(d == 0, 0.0, t)


def check_density(density) -> DateDensity:
    """A :class:`DateDensity` from itself or a kind name ("uniform", "trapezoid")."""
    if isinstance(density, DateDensity):
        return density
    if isinstance(density, str):
        return DateDensity(density)
    raise InputError(f"density {density!r}; expected 'uniform', 'trapezoid' or a DateDensity")


def check_ranges(start, end, *, ids=None, source="sites") -> tuple[np.ndarray, np.ndarray]:
    """Return ``start, end`` as float64 arrays after checking them.

    Raises
    ------
    InputError
        Lengths differ, a year is missing or not finite, or an end year lies
        before its start (the message counts them and names the first few).
    """
    s = np.asarray(start, dtype=np.float64).ravel()
    e = np.asarray(end, dtype=np.float64).ravel()
    if s.shape != e.shape:
        raise InputError(f"{source}: {s.size} start years but {e.size} end years; give one of each per site")
    names = np.arange(s.size) if ids is None else np.asarray(ids, dtype=object)
    for bad, what in ((~(np.isfinite(s) & np.isfinite(e)), "a missing or infinite year"),
                      (e < s, "an end year before its start")):
        if bad.any():
            first = ", ".join(str(v) for v in names[bad][:5])
            raise InputError(f"{source}: {int(bad.sum())} site(s) with {what} (first: {first}); fix the "
                             "years (negative before year 1) or the start and end fields")
    return s, e


def aoristic_weights(start, end, blocks: TimeBlocks, *, density="uniform") -> np.ndarray:
    """Probability of each site's date falling in each block.

    Parameters
    ----------
    start, end : array_like of shape (n_sites,)
        Site ranges ``[start, end)`` in years (negative before year 1).
    blocks : TimeBlocks
    density : str or DateDensity, default "uniform"
        Date density within a range (see :class:`DateDensity`).

    Returns
    -------
    ndarray of float64, shape (n_sites, n_blocks)
        ``F(b1) - F(b0)`` per site and block, F the site's cumulative date
        distribution; with the uniform density this is ``overlap([start, end),
        [b0, b1)) / (end - start)``. Rows sum to one when the blocks cover the
        range, and to the share inside the blocks otherwise.

    Raises
    ------
    InputError
        A year is missing, or an end before its start.

    References
    ----------
    Ratcliffe, J. H. (2000). Aoristic analysis: the spatial interpretation of
    unspecific temporal events. International Journal of Geographical
    Information Science 14(7), 669-679. doi:10.1080/136588100424963

    Examples
    --------
    >>> b = time_blocks(100, span=(-3500, -3100))
    >>> aoristic_weights([-3450], [-3150], b).round(6).tolist()
    [[0.166667, 0.333333, 0.333333, 0.166667]]
    """
    s, e = check_ranges(start, end)
    dens = check_density(density)
    return np.diff(dens.cdf(blocks.edges[None, :], s[:, None], e[:, None]), axis=1)


def aoristic_sum(start, end, blocks: TimeBlocks, *, density="uniform") -> np.ndarray:
    """The aoristic sum per block: expected number of sites (sum of weights).

    Same parameters as :func:`aoristic_weights`; sites are handled in chunks so
    memory stays bounded for many sites and blocks.
    """
    s, e = check_ranges(start, end)
    dens = check_density(density)
    total = np.zeros(blocks.n_blocks)
    step = _site_chunk(blocks)
    for i in range(0, s.size, step):
        total += aoristic_weights(s[i:i + step], e[i:i + step], blocks, density=dens).sum(axis=0)
    return total


def sparse_weights(start, end, blocks: TimeBlocks, *, density="uniform"):
    """:func:`aoristic_weights` as a ``scipy.sparse`` CSR matrix, built in site chunks.

    A site's range usually overlaps a few blocks, so this stays small for many
    sites and blocks where the dense matrix would not.
    """
    from scipy import sparse

    s, e = check_ranges(start, end)
    dens = check_density(density)
    step = _site_chunk(blocks)
    parts = [sparse.csr_matrix(aoristic_weights(s[i:i + step], e[i:i + step], blocks, density=dens))
             for i in range(0, s.size, step)]
    if not parts:
        return sparse.csr_matrix((0, blocks.n_blocks))
    return sparse.vstack(parts, format="csr")
