"""River valley of the fictional landscapes: cross-section, channel courses, lookup index.

Coordinates here are local metres of the grid: x east from the left edge, y south
from the top edge. The main valley runs along the longer grid side; ``a`` is the
distance along that axis from the upstream edge and ``b`` the distance across it.
Only exactly rounded operations (+ - * / sqrt, comparisons) are applied per cell,
so a cell's value does not depend on the size of the window it is computed in.
"""

from __future__ import annotations

import math
from collections import namedtuple

import numpy as np
import shapely

from mlsites.synthetic._kernels import fbm_points

__all__ = ["valley_geometry", "main_surface", "channel_lines", "ChannelIndex"]

#: Slope of the floodplain and terrace benches towards the river (m/m).
BENCH_SLOPE = 0.002
#: Side slope of tributary valleys (m/m).
TRIBUTARY_SIDE_SLOPE = 0.5
#: Largest slope of the main river's course against the valley axis; tributaries
#: leave at 35 degrees or more (tan 35 = 0.7) and wiggle by at most 0.2, so they
#: never cross the main river again.
MAX_MEANDER_SLOPE = 0.4
#: Spacing of the channel line vertices, in cells.
VERTEX_CELLS = 3.0

#: Channel segments bucketed on a square grid: ``items[start[b]:start[b + 1]]`` are
#: the segments within ``radii[channel]`` of bucket ``b`` (row-major, ``nbx`` wide).
ChannelIndex = namedtuple("ChannelIndex", "segs seg_channel start items bucket_m nbx nby radii")


def smoothstep(t):
    """0 below 0, 1 above 1, 3t^2 - 2t^3 between (C1)."""
    t = np.clip(t, 0.0, 1.0)
    return t * t * (3.0 - 2.0 * t)


def smooth_relu(x, k):
    """C1 smooth max(x, 0): a quadratic blend over |x| < k."""
    return np.where(x >= k, x, np.where(x <= -k, 0.0, (x + k) * (x + k) / (4.0 * k)))


def valley_geometry(p: dict) -> dict:
    """All distances (m) and heights (m) of the valley cross-section, and the axis."""
    rows, cols = p["shape"]
    cs, depth = p["cellsize"], p["valley_depth_m"]
    half = p["valley_width_m"] / 2.0
    rng = np.random.default_rng([p["random_state"], 3])
    axis = int(rng.integers(0, 2)) + (0 if cols >= rows else 2)
    v = dict(half=half, depth=depth, bed=max(0.75 * cs, 3.0), bank=max(cs, 5.0),
             bank_height=min(2.0, 0.1 * depth), n_terraces=p["n_terraces"], axis=axis,
             width_m=cols * cs, height_m=rows * cs)
    v["axis_length"] = v["width_m"] if axis < 2 else v["height_m"]
    v["cross_width"] = v["height_m"] if axis < 2 else v["width_m"]
    v["floodplain"] = (0.3 if v["n_terraces"] else 0.7) * half
    v["wall_start"] = 0.7 * half
    v["terrace_height"] = 0.4 * depth if v["n_terraces"] else 0.0
    v["bench_slope"] = min(BENCH_SLOPE, 0.05 * depth / half)
    v["bench_from"] = v["bed"] + v["bank"]
    v["wall_height"] = depth - v["bank_height"] - v["terrace_height"] - v["bench_slope"] * (half - v["bench_from"])
    v["taper"] = (0.8 * half, 1.5 * half)
    v["reach"] = 1.5 * half
    sigma = p["relief_m"] / 4.0
    v["upland_offset"] = 2.0 * sigma
    v["upland_max"] = 5.0 * sigma
    v["upland_soft"] = max(0.5 * sigma, 1e-6)
    v["tributary_depth"] = 0.5 * depth
    floor_half = max(2.0 * v["bed"], 0.1 * half, v["bed"] + v["bank"])
    v["tributary_profile"] = np.array(
        [v["bed"], v["bank"], v["bank_height"], floor_half, TRIBUTARY_SIDE_SLOPE, v["bank"]])
    # A tributary floor at the nearest point p is at least floor(a_p) - tributary_depth
    # (it is a running minimum of S - incision upstream, and S >= floor there), and any
    # main surface S(q) is at most floor(a_q) + depth + upland_max with
    # floor(a_q) <= floor(a_p) + river_gradient * d. The tributary surface rises at
    # TRIBUTARY_SIDE_SLOPE beyond its floor, so past this distance it is above S and
    # drops out of the minimum without a jump.
    v["tributary_reach"] = ((v["tributary_depth"] + depth + v["upland_max"] - v["bank_height"]
                             + TRIBUTARY_SIDE_SLOPE * floor_half) / (TRIBUTARY_SIDE_SLOPE - p["river_gradient"])
                            + 2.0 * v["bank"])
    return v


def main_rise(d, v):
    """Height of the main valley surface above its channel at distance ``d`` (m)."""
    rise = v["bank_height"] * smoothstep((d - v["bed"]) / v["bank"])
    rise = rise + v["bench_slope"] * np.clip(d - v["bench_from"], 0.0, v["half"] - v["bench_from"])
    n = v["n_terraces"]
    if n:
        width = (v["wall_start"] - v["floodplain"]) / n
        for i in range(n):
            rise = rise + (v["terrace_height"] / n) * smoothstep((d - v["floodplain"] - i * width) / (0.3 * width))
    return rise + v["wall_height"] * smoothstep((d - v["wall_start"]) / (v["half"] - v["wall_start"]))


def upland_height(relief, v):
    """Upland above the valley shoulders: relief + 2 sigma, softly kept in [0, 5 sigma]."""
    if v["upland_max"] == 0.0:
        return np.zeros_like(relief)
    k, top = v["upland_soft"], v["upland_max"]
    return top - smooth_relu(top - smooth_relu(relief + v["upland_offset"], k), k)


def along_axis(x, y, v):
    """Distance ``a`` (m) along the valley axis from the upstream edge."""
    return {0: x, 1: v["width_m"] - x, 2: y, 3: v["height_m"] - y}[v["axis"]]


def to_local(a, b, v):
    """Local (x, y) of axis coordinates (a, b)."""
    return {0: (a, b), 1: (v["width_m"] - a, b), 2: (b, a), 3: (b, v["height_m"] - a)}[v["axis"]]


def main_surface(x, y, relief, d_main, p, v):
    """Main valley plus upland surface S (m) from fractal relief and main-channel distance.

    Beyond the valley's reach the cross-section is constant (shoulder height plus the
    full upland); computing it directly there saves most of the work on large grids.
    """
    floor = p["outlet_elevation_m"] + p["river_gradient"] * (v["axis_length"] - along_axis(x, y, v))
    floor = np.broadcast_to(floor, relief.shape)
    upland = upland_height(relief, v)
    surface = floor + v["depth"] + upland
    near = d_main < v["reach"]
    if near.any():
        d = d_main[near]
        taper = smoothstep((d - v["taper"][0]) / (v["taper"][1] - v["taper"][0]))
        surface[near] = floor[near] + main_rise(d, v) + taper * upland[near]
    return surface


def _main_course(rng, p, v):
    """Main river centre line as (a, b) samples; ``a`` strictly increasing."""
    length, width = v["axis_length"], v["cross_width"]
    lambdas, amps = [], []
    while not lambdas or lambdas[-1] / 2.0 >= max(4.0 * v["half"], 40.0 * p["cellsize"]):
        lam = length * 2.0 ** -len(lambdas) * rng.uniform(0.8, 1.25)
        lambdas.append(lam)
        amps.append(lam**1.3 * rng.uniform(0.5, 1.0))
    lambdas, amps = np.array(lambdas), np.array(amps)
    phases = rng.uniform(0.0, 2.0 * np.pi, lambdas.size)
    margin = 3.0 * max(v["reach"], v["tributary_reach"])
    step = VERTEX_CELLS * p["cellsize"]
    a = np.arange(-margin, length + margin + step, step)
    arg = 2.0 * np.pi * a[:, None] / lambdas + phases
    wiggle = np.sin(arg) @ amps
    slope = np.abs((np.cos(arg) * (2.0 * np.pi / lambdas)) @ amps)
    scale = min(0.25 * width / max(np.abs(wiggle).max(), 1e-12), MAX_MEANDER_SLOPE / max(slope.max(), 1e-12))
    return a, width * rng.uniform(0.4, 0.6) + scale * wiggle


def _tributary_courses(rng, p, v, main_ab):
    """Tributary centre lines in (a, b), from the confluence upstream to past the grid edge."""
    n = p["n_tributaries"]
    length, width = v["axis_length"], v["cross_width"]
    theta = np.radians(rng.uniform(35.0, 55.0))
    first_side = int(rng.integers(0, 2))
    step = VERTEX_CELLS * p["cellsize"]
    main_line = shapely.LineString(main_ab)
    courses, straight = [], []
    for k in range(n):
        a_c = length * (0.2 + 0.6 * (k + rng.uniform(0.25, 0.75)) / n)
        b_c = float(np.interp(a_c, main_ab[:, 0], main_ab[:, 1]))
        side = 1.0 if (first_side + k) % 2 else -1.0
        direction = np.array([-np.cos(theta), side * np.sin(theta)])
        to_edge = min(((width if side > 0 else 0.0) - b_c) / direction[1], a_c / -direction[0])
        s = np.arange(0.0, to_edge + 2.0 * v["tributary_reach"] + step, step)
        lam = rng.uniform(4.0, 8.0, 2) * v["half"]
        amp = rng.uniform(0.3, 1.0, 2) * lam
        offset = np.sin(2.0 * np.pi * s[:, None] / lam) @ amp
        slope = np.abs(np.cos(2.0 * np.pi * s[:, None] / lam) @ (amp * 2.0 * np.pi / lam))
        offset *= 0.2 / max(slope.max(), 1e-12)
        base = np.array([a_c, b_c]) + s[:, None] * direction
        straight.append(base)
        courses.append(base + offset[:, None] * np.array([direction[1], -direction[0]]))
    # Wiggles may bring two tributaries, or a tributary and the main river, close;
    # straight parallel lines cannot cross, so fall back to them then.
    for k in range(n):
        path = courses[k]
        far = np.hypot(*(path - path[0]).T) > 2.0 * v["half"]
        clash = far.sum() > 1 and shapely.LineString(path[far]).distance(main_line) < v["half"]
        clash |= any(shapely.LineString(path).distance(shapely.LineString(courses[j])) < v["half"]
                     for j in range(n) if j != k)
        if clash:
            courses[k] = straight[k]
    return courses


def _tributary_floor(xy, p, v, main_line, octaves, seeds):
    """Floor elevation at the vertices of a tributary, falling towards the confluence (vertex 0)."""
    x, y = xy[:, 0], xy[:, 1]
    d = shapely.distance(shapely.points(x, y), main_line)
    surface = main_surface(x, y, fbm_points(x, y, octaves, seeds), d, p, v)
    # Cut a bank below the main valley surface, and the full depth once out of the valley.
    incision = (np.minimum(v["bank_height"], main_rise(np.minimum(d, v["reach"]), v))
                + (v["tributary_depth"] - v["bank_height"]) * smoothstep((d - v["half"]) / v["half"]))
    floor = np.minimum.accumulate((surface - incision)[::-1])[::-1]
    s = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(xy, axis=0).T))])
    # A small extra fall keeps the floor strictly decreasing downstream.
    return floor + 0.25 * p["river_gradient"] * s


def channel_lines(p, v, octaves, seeds):
    """Channel lines ``[(xy, floor), ...]`` (main river first, floor unused for it)."""
    rng = np.random.default_rng([p["random_state"], 4])
    main_ab = np.column_stack(_main_course(rng, p, v))
    main_xy = np.column_stack(to_local(main_ab[:, 0], main_ab[:, 1], v))
    main_line = shapely.LineString(main_xy)
    lines = [(main_xy, np.zeros(len(main_xy)))]
    for ab in _tributary_courses(rng, p, v, main_ab):
        xy = np.column_stack(to_local(ab[:, 0], ab[:, 1], v))
        lines.append((xy, _tributary_floor(xy, p, v, main_line, octaves, seeds)))
    return lines


def channel_index(lines, v, cellsize) -> ChannelIndex:
    """Bucket the segments of ``lines``: each bucket lists those within its channel's reach."""
    segs, channel = [], []
    for c, (xy, floor) in enumerate(lines):
        segs.append(np.column_stack([xy[:-1], xy[1:], floor[:-1], floor[1:]]))
        channel.append(np.full(len(xy) - 1, c, dtype=np.int64))
    segs, channel = np.ascontiguousarray(np.vstack(segs)), np.concatenate(channel)
    radii = np.array([v["reach"]] + [v["tributary_reach"]] * (len(lines) - 1))
    bucket_m = max(16.0 * cellsize, 0.5 * float(radii.max()))
    nbx, nby = int(math.ceil(v["width_m"] / bucket_m)), int(math.ceil(v["height_m"] / bucket_m))
    r = radii[channel]
    lo_x, hi_x = np.minimum(segs[:, 0], segs[:, 2]) - r, np.maximum(segs[:, 0], segs[:, 2]) + r
    lo_y, hi_y = np.minimum(segs[:, 1], segs[:, 3]) - r, np.maximum(segs[:, 1], segs[:, 3]) + r
    ix0, ix1 = (np.clip(np.floor(q / bucket_m), 0, nbx - 1).astype(np.int64) for q in (lo_x, hi_x))
    iy0, iy1 = (np.clip(np.floor(q / bucket_m), 0, nby - 1).astype(np.int64) for q in (lo_y, hi_y))
    inside = (hi_x >= 0) & (lo_x <= v["width_m"]) & (hi_y >= 0) & (lo_y <= v["height_m"])
    w = ix1 - ix0 + 1
    counts = np.where(inside, w * (iy1 - iy0 + 1), 0)
    seg_of = np.repeat(np.arange(len(segs)), counts)
    k = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    bucket = (iy0[seg_of] + k // w[seg_of]) * nbx + ix0[seg_of] + k % w[seg_of]
    order = np.lexsort((seg_of, bucket))
    start = np.searchsorted(bucket[order], np.arange(nbx * nby + 1)).astype(np.int64)
    return ChannelIndex(segs, channel, start, seg_of[order].astype(np.int64), float(bucket_m), nbx, nby, radii)
