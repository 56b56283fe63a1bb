"""Time and peak memory of the hydrology chain (a benchmark, not a test).

Target: fill + D8 + accumulation + streams + HAND + stream distance under 15 s on
a 4000 x 4000 float32 DEM on 2 cores, at most 16 bytes per cell above the input.
Run: ``python tests/benchmarks/bench_hydrology.py [--size 4000] [--surface smooth|noise]``.

Peak memory is read from the kernel's resident-set high-water mark (VmHWM, reset
through /proc/self/clear_refs before each step), so allocations made inside numba
kernels count too (tracemalloc does not see them). The script re-runs itself with
a fixed malloc mmap threshold so freed grids leave the resident set at once and
do not hide later allocations. Linux only. Times are wall clock and CPU (all
threads); on a shared machine the CPU time is the steadier of the two.
"""

import argparse
import os
import sys
import time

import numba
import numpy as np
from scipy.ndimage import gaussian_filter

from mlsites.terrain import (
    distance_to_cells,
    flow_accumulation,
    flow_direction,
    height_above_drainage,
    hydrology_layers,
    stream_cells,
)
from mlsites.terrain._hydrology import _fill

CELL = 25.0
THRESHOLD_KM2 = 0.5


def synthetic_dem(size, surface, seed=0):
    """Smoothed noise plus a tilt (many small pits), or raw noise (pits everywhere)."""
    rng = np.random.default_rng(seed)
    noise = rng.normal(size=(size, size))
    if surface == "smooth":
        noise = gaussian_filter(noise, sigma=8.0)
    noise *= 40.0 / noise.std()
    tilt = np.linspace(0.0, 200.0, size)[None, :]
    return (noise + tilt + 500.0).astype(np.float32)


def _status(key):
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
    raise RuntimeError(key)


def measure(label, n_cells, func, *args, **kwargs):
    """Run ``func``; print seconds and peak bytes/cell above the memory held before."""
    with open("/proc/self/clear_refs", "w") as f:
        f.write("5")
    before = _status("VmRSS")
    start, cpu = time.perf_counter(), time.process_time()
    result = func(*args, **kwargs)
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    peak = _status("VmHWM") - before
    print(f"{label:<34} {seconds:6.2f} s wall {cpu:6.2f} s cpu   peak +{peak / n_cells:5.1f} B/cell")
    return result, seconds


def main():
    if os.environ.get("MALLOC_MMAP_THRESHOLD_") is None:
        os.environ["MALLOC_MMAP_THRESHOLD_"] = str(1 << 20)
        os.execv(sys.executable, [sys.executable] + sys.argv)
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=4000, help="rows = cols of the DEM")
    parser.add_argument("--surface", choices=["smooth", "noise"], default="smooth")
    args = parser.parse_args()

    dem = synthetic_dem(args.size, args.surface)
    hydrology_layers(dem[:60, :60], CELL, stream_threshold_km2=0.01)  # compile
    n = dem.size
    print(f"{args.size}x{args.size} float32 ({args.surface}), threads={numba.get_num_threads()}; "
          "peaks are above the DEM and any earlier outputs still held")
    (filled, scratch, (max_heap, max_pit)), t_fill = measure("fill_depressions (epsilon)", n, _fill, dem, True)
    del scratch
    print(f"    queue peaks: heap {max_heap} cells ({max_heap / n:.2%}), pit {max_pit} cells ({max_pit / n:.2%})")
    direction, t_dir = measure("flow_direction", n, flow_direction, filled, CELL)
    acc, t_acc = measure("flow_accumulation", n, flow_accumulation, direction)
    streams, t_str = measure("stream_cells", n, stream_cells, acc, threshold_km2=THRESHOLD_KM2,
                             cell_area_m2=CELL * CELL)
    print(f"    stream cells: {np.count_nonzero(streams == 1)} ({np.mean(streams == 1):.2%})")
    hand, t_hand = measure("height_above_drainage", n, height_above_drainage, filled, direction, streams)
    print(f"    HAND NaN on valid cells (no stream downstream): {np.count_nonzero(np.isnan(hand))}")
    dist, t_dist = measure("distance_to_cells", n, distance_to_cells, streams == 1, CELL)
    print(f"{'sum of steps':<34} {t_fill + t_dir + t_acc + t_str + t_hand + t_dist:6.2f} s wall")
    del filled, direction, acc, streams, hand, dist

    measure("hydrology_layers (all six)", n, hydrology_layers, dem, CELL,
            stream_threshold_km2=THRESHOLD_KM2)
    pipeline = {"direction", "accumulation", "streams", "hand", "stream_distance"}
    measure("hydrology_layers (pipeline set)", n, hydrology_layers, dem, CELL,
            stream_threshold_km2=THRESHOLD_KM2, wanted=pipeline)
    measure("hydrology_layers (hand, distance)", n, hydrology_layers, dem, CELL,
            stream_threshold_km2=THRESHOLD_KM2, wanted={"hand", "stream_distance"})
    # A caller that writes each layer away as it comes (here: keeps a tiny sample).
    measure("hydrology_layers (all, on_layer)", n, hydrology_layers, dem, CELL,
            stream_threshold_km2=THRESHOLD_KM2, on_layer=lambda name, a: a[:2, :2].copy())


if __name__ == "__main__":
    main()
