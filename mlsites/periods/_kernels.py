"""Numba kernel of the Monte Carlo dating: draws to dates to block counts in one pass."""

import math

from mlsites._numba import pjit, prange


@pjit
def _block_counts_kernel(u, start, end, ramp, edges, width, out):
    """Add to ``out[k, b]`` the sites whose date in simulation k falls in block b.

    ``u`` (n_sim, n_sites) uniform in [0, 1); the date is the inverse of the
    trapezoid cumulative distribution (``ramp`` = ramp share, 0 for uniform) of
    ``[start, end)``; blocks are ``[edges[b], edges[b + 1])`` of equal ``width``.
    The block index from the division is corrected against the exact limits, so
    the result equals ``searchsorted(edges, date, "right") - 1``.
    """
    n_sim, n_sites = u.shape
    nb = edges.size - 1
    e0 = edges[0]
    for k in prange(n_sim):
        for j in range(n_sites):
            s = start[j]
            d = end[j] - s
            x = u[k, j]
            if d == 0.0:
                date = s
            elif ramp == 0.0:
                date = s + x * d
            else:
                r = ramp * d
                h = 1.0 / (d - r)
                a = 0.5 * h * r
                if x < a:
                    t = math.sqrt(2.0 * r * x / h)
                elif x <= 1.0 - a:
                    t = x / h + 0.5 * r
                else:
                    t = d - math.sqrt(2.0 * r * (1.0 - x) / h)
                date = s + t
            q = math.floor((date - e0) / width)
            b = int(min(max(q, -1.0), float(nb)))
            while b >= 0 and date < edges[b]:
                b -= 1
            while b < nb and date >= edges[b + 1]:
                b += 1
            if 0 <= b < nb:
                out[k, b] += 1
