"""Benchmark: Monte Carlo dating and per-block density maps.

(1) 10 000 simulations of 1 000 invented sites over 100 blocks of 50 years: the whole
``monte_carlo`` call (dated runs, null runs, aoristic sums) and ``block_table``,
timed beside a plain vectorised NumPy version of the dated runs (inverse CDF,
``searchsorted`` on the limits, ``bincount``) on the same draws. Target: seconds.
(2) Density GeoTIFFs of 20 blocks on a 2000 x 2000 grid of 10 m cells from 1 000
sites (bandwidth 300 m), with peak Python memory from tracemalloc.
Prints one JSON line.

Run: python3 tests/benchmarks/periods.py
"""

import json
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
from rasterio.crs import CRS
from rasterio.transform import from_origin

from mlsites.grid import GridSpec
from mlsites.periods import DateDensity, block_table, monte_carlo, simulate_block_counts, time_blocks, write_densities

N_SIM, N_SITES = 10_000, 1_000


def numpy_counts(start, end, blocks, n_sim, seed):
    rng = np.random.default_rng(seed)
    dens = DateDensity("uniform")
    out = np.zeros((n_sim, blocks.n_blocks), dtype=np.int64)
    step = max(1, (1 << 22) // start.size)
    for k0 in range(0, n_sim, step):
        k = min(step, n_sim - k0)
        idx = np.searchsorted(blocks.edges, dens.ppf(rng.random((k, start.size)), start, end), side="right") - 1
        ok = (idx >= 0) & (idx < blocks.n_blocks)
        flat = (idx + (np.arange(k) * blocks.n_blocks)[:, None])[ok]
        out[k0:k0 + k] = np.bincount(flat, minlength=k * blocks.n_blocks).reshape(k, -1)
    return out


def main():
    rng = np.random.default_rng(0)
    start = rng.uniform(-5000, -300, N_SITES).round()
    end = np.minimum(start + rng.choice([50, 100, 300, 800], N_SITES), 0.0)
    blocks = time_blocks(50, span=(-5000, 0))
    simulate_block_counts(start, end, blocks, n_simulations=10, random_state=0)  # compile once
    t = time.perf_counter()
    mc = monte_carlo(start, end, blocks, n_simulations=N_SIM, random_state=1)
    block_table(blocks, mc)
    seconds_mc = time.perf_counter() - t
    t = time.perf_counter()
    ours = simulate_block_counts(start, end, blocks, n_simulations=N_SIM, random_state=2)
    seconds_kernel = time.perf_counter() - t
    t = time.perf_counter()
    ref = numpy_counts(start, end, blocks, N_SIM, 2)
    seconds_numpy = time.perf_counter() - t
    assert (ref == ours).all()

    grid = GridSpec(CRS.from_epsg(32631), from_origin(400000.0, 5020000.0, 10.0, 10.0), 2000, 2000)
    x = rng.uniform(400000, 420000, N_SITES)
    y = rng.uniform(5000000, 5020000, N_SITES)
    weights = rng.dirichlet(np.ones(20), N_SITES)
    with tempfile.TemporaryDirectory() as folder:
        tracemalloc.start()
        t = time.perf_counter()
        write_densities([Path(folder) / f"b{k}.tif" for k in range(20)], x, y, weights, grid, bandwidth_m=300.0)
        seconds_maps = time.perf_counter() - t
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    print(json.dumps({
        "benchmark": "periods", "n_simulations": N_SIM, "n_sites": N_SITES, "n_blocks": blocks.n_blocks,
        "monte_carlo_and_table_s": round(seconds_mc, 2), "dated_runs_kernel_s": round(seconds_kernel, 2),
        "dated_runs_numpy_s": round(seconds_numpy, 2), "kernel_vs_numpy": round(seconds_numpy / seconds_kernel, 1),
        "density_maps_20_blocks_2000x2000_s": round(seconds_maps, 1),
        "density_cells_per_s": round(20 * grid.n_cells / seconds_maps),
        "density_peak_python_mb": round(peak / 2**20, 1),
    }))


if __name__ == "__main__":
    main()
