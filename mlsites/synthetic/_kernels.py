"""Numba kernels of the landscape generator: lattice noise and channel distances.

Every value is a function of the absolute cell coordinates and the seed only, so
a window computed alone equals the same cells of the whole grid, bit for bit. The
kernels use only additions, multiplications, divisions, square roots and integer
hashing (no transcendental functions), whose results do not depend on how a
compiler vectorises a loop.
"""

import numpy as np

from mlsites._numba import ngjit, pjit, prange

__all__ = ["fbm_grid", "fbm_points", "channel_fields"]

#: 32 unit gradient directions of the lattice noise (half-step offset avoids the axes).
_ANGLES = 2.0 * np.pi * (np.arange(32) + 0.5) / 32.0
_GRAD_X = np.cos(_ANGLES)
_GRAD_Y = np.sin(_ANGLES)
_GRAD_MASK = np.uint64(31)

#: Columns of an octave table row: inverse lattice spacing (1/m), amplitude,
#: lattice offsets u and v (lattice units), cosine and sine of the rotation.
OCTAVE_COLUMNS = ("inv_spacing", "amplitude", "offset_u", "offset_v", "cos", "sin")

#: Columns of a segment table row: start x, y, end x, y (local metres), channel
#: floor elevation at the start and at the end (m).
SEGMENT_COLUMNS = ("x0", "y0", "x1", "y1", "floor0", "floor1")

#: Columns of the tributary profile: bed half-width, bank width, bank height,
#: floor half-width, side slope (m/m), softness of the floor-to-side bend (m).
TRIBUTARY_COLUMNS = ("bed_m", "bank_m", "bank_height_m", "floor_m", "side_slope", "bend_m")


@ngjit
def _hash_kernel(i, j, seed):
    """64-bit hash of a lattice point (splitmix64 finaliser of a mixed key)."""
    h = (np.uint64(i) * np.uint64(0x9E3779B97F4A7C15)) ^ (np.uint64(j) * np.uint64(0xC2B2AE3D27D4EB4F)) ^ seed
    h ^= h >> np.uint64(30)
    h *= np.uint64(0xBF58476D1CE4E5B9)
    h ^= h >> np.uint64(27)
    h *= np.uint64(0x94D049BB133111EB)
    h ^= h >> np.uint64(31)
    return h


@ngjit
def _fade_kernel(t):
    """Quintic fade 6t^5 - 15t^4 + 10t^3 (Perlin 2002)."""
    return t * t * t * (t * (t * 6.0 - 15.0) + 10.0)


@ngjit
def _gradient_noise_kernel(u, v, seed):
    """Gradient (Perlin) noise at lattice coordinates ``(u, v)``; range about +-0.7."""
    fi = np.floor(u)
    fj = np.floor(v)
    i = np.int64(fi)
    j = np.int64(fj)
    fu = u - fi
    fv = v - fj
    h = _hash_kernel(i, j, seed) & _GRAD_MASK
    n00 = _GRAD_X[h] * fu + _GRAD_Y[h] * fv
    h = _hash_kernel(i + 1, j, seed) & _GRAD_MASK
    n10 = _GRAD_X[h] * (fu - 1.0) + _GRAD_Y[h] * fv
    h = _hash_kernel(i, j + 1, seed) & _GRAD_MASK
    n01 = _GRAD_X[h] * fu + _GRAD_Y[h] * (fv - 1.0)
    h = _hash_kernel(i + 1, j + 1, seed) & _GRAD_MASK
    n11 = _GRAD_X[h] * (fu - 1.0) + _GRAD_Y[h] * (fv - 1.0)
    a = _fade_kernel(fu)
    b = _fade_kernel(fv)
    lower = n00 + a * (n10 - n00)
    upper = n01 + a * (n11 - n01)
    return lower + b * (upper - lower)


@ngjit
def _fbm_point_kernel(x, y, octaves, seeds):
    """Sum of rotated, scaled and shifted noise octaves at one point (metres)."""
    total = 0.0
    for k in range(octaves.shape[0]):
        inv, amp, ou, ov = octaves[k, 0], octaves[k, 1], octaves[k, 2], octaves[k, 3]
        c, s = octaves[k, 4], octaves[k, 5]
        total += amp * _gradient_noise_kernel((x * c - y * s) * inv + ou, (x * s + y * c) * inv + ov, seeds[k])
    return total


@pjit
def _fbm_grid_kernel(xs, ys, octaves, seeds):
    """Octave noise on the grid ``ys x xs``.

    Octaves are accumulated row by row in the same order as in
    :func:`_fbm_point_kernel`; the four corner gradients are hashed only when a
    cell enters a new lattice square, which makes coarse octaves nearly free.
    """
    out = np.zeros((ys.size, xs.size))
    for r in prange(ys.size):
        y = ys[r]
        for k in range(octaves.shape[0]):
            inv, amp, ou, ov = octaves[k, 0], octaves[k, 1], octaves[k, 2], octaves[k, 3]
            c, s = octaves[k, 4], octaves[k, 5]
            seed = seeds[k]
            pi = np.int64(-(2**62))
            pj = pi
            g00x = g00y = g10x = g10y = g01x = g01y = g11x = g11y = 0.0
            for col in range(xs.size):
                x = xs[col]
                u = (x * c - y * s) * inv + ou
                v = (x * s + y * c) * inv + ov
                fi = np.floor(u)
                fj = np.floor(v)
                i = np.int64(fi)
                j = np.int64(fj)
                if i != pi or j != pj:
                    h = _hash_kernel(i, j, seed) & _GRAD_MASK
                    g00x, g00y = _GRAD_X[h], _GRAD_Y[h]
                    h = _hash_kernel(i + 1, j, seed) & _GRAD_MASK
                    g10x, g10y = _GRAD_X[h], _GRAD_Y[h]
                    h = _hash_kernel(i, j + 1, seed) & _GRAD_MASK
                    g01x, g01y = _GRAD_X[h], _GRAD_Y[h]
                    h = _hash_kernel(i + 1, j + 1, seed) & _GRAD_MASK
                    g11x, g11y = _GRAD_X[h], _GRAD_Y[h]
                    pi, pj = i, j
                fu = u - fi
                fv = v - fj
                n00 = g00x * fu + g00y * fv
                n10 = g10x * (fu - 1.0) + g10y * fv
                n01 = g01x * fu + g01y * (fv - 1.0)
                n11 = g11x * (fu - 1.0) + g11y * (fv - 1.0)
                a = _fade_kernel(fu)
                lower = n00 + a * (n10 - n00)
                upper = n01 + a * (n11 - n01)
                out[r, col] += amp * (lower + _fade_kernel(fv) * (upper - lower))
    return out


@ngjit
def _fbm_points_kernel(xs, ys, octaves, seeds):
    out = np.empty(xs.size)
    for n in range(xs.size):
        out[n] = _fbm_point_kernel(xs[n], ys[n], octaves, seeds)
    return out


@ngjit
def _tributary_rise_kernel(d, prof):
    """Height of a tributary valley surface above its floor at distance ``d`` (m)."""
    bed, bank, bank_h, floor_half, side, bend = prof[0], prof[1], prof[2], prof[3], prof[4], prof[5]
    t = min(max((d - bed) / bank, 0.0), 1.0)
    rise = bank_h * t * t * (3.0 - 2.0 * t)
    e = d - floor_half
    if e >= bend:
        rise += side * e
    elif e > -bend:
        rise += side * (e + bend) * (e + bend) / (4.0 * bend)
    return rise


@pjit
def _channel_kernel(xs, ys, segs, seg_channel, start, items, bucket_m, nbx, nby, radii, prof):
    """Distance to the main channel and the lowest tributary valley surface.

    Channel 0 is the main river; channels 1.. are tributaries whose valley surface
    is ``floor + rise(d)`` (floor interpolated along the nearest segment). Segments
    are looked up in a bucket grid of ``bucket_m`` squares listing every segment
    within ``radii[channel]`` of the bucket.
    """
    ny, nx = ys.size, xs.size
    n_channels = radii.size
    d_main = np.full((ny, nx), np.inf)
    v_trib = np.full((ny, nx), np.inf)
    d_trib = np.full((ny, nx), np.inf)
    for r in prange(ny):
        best = np.empty(n_channels)
        floor = np.empty(n_channels)
        y = ys[r]
        by = min(max(int(y // bucket_m), 0), nby - 1)
        for col in range(nx):
            x = xs[col]
            b = by * nbx + min(max(int(x // bucket_m), 0), nbx - 1)
            best[:] = np.inf
            for k in range(start[b], start[b + 1]):
                s = items[k]
                x0, y0, dx, dy = segs[s, 0], segs[s, 1], segs[s, 2] - segs[s, 0], segs[s, 3] - segs[s, 1]
                t = min(max(((x - x0) * dx + (y - y0) * dy) / (dx * dx + dy * dy), 0.0), 1.0)
                ex = x - (x0 + t * dx)
                ey = y - (y0 + t * dy)
                d2 = ex * ex + ey * ey
                c = seg_channel[s]
                if d2 < best[c]:
                    best[c] = d2
                    floor[c] = segs[s, 4] + t * (segs[s, 5] - segs[s, 4])
            d_main[r, col] = np.sqrt(best[0])
            for c in range(1, n_channels):
                if best[c] <= radii[c] * radii[c]:
                    d = np.sqrt(best[c])
                    v = floor[c] + _tributary_rise_kernel(d, prof)
                    if v < v_trib[r, col]:
                        v_trib[r, col] = v
                        d_trib[r, col] = d
    return d_main, v_trib, d_trib


def fbm_grid(xs, ys, octaves, seeds):
    """Octave gradient noise at the cell centres ``ys x xs`` (local metres)."""
    return _fbm_grid_kernel(np.ascontiguousarray(xs, np.float64), np.ascontiguousarray(ys, np.float64),
                            octaves, seeds)


def fbm_points(xs, ys, octaves, seeds):
    """Octave gradient noise at scattered points (local metres)."""
    return _fbm_points_kernel(np.ascontiguousarray(xs, np.float64), np.ascontiguousarray(ys, np.float64),
                              octaves, seeds)


def channel_fields(xs, ys, index, prof):
    """Main-channel distance, lowest tributary surface and its distance on ``ys x xs``."""
    return _channel_kernel(np.ascontiguousarray(xs, np.float64), np.ascontiguousarray(ys, np.float64),
                           index.segs, index.seg_channel, index.start, index.items, index.bucket_m,
                           index.nbx, index.nby, index.radii, prof)
