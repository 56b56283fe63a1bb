"""Benchmark: spatial blocks and fold assignment for a large sample.

100 000 background cells and 2 000 site cells (200 sites of 10 cells) drawn from a
10000 x 10000 grid of 10 m cells (100 km x 100 km); square blocks of 2 km, 5 folds.
Times block ids + fold assignment (the part every run repeats) and records peak
memory with tracemalloc (Python-level allocations, which include NumPy arrays).
Prints one JSON line; targets: under 10 s and under 1 GB.

Run: python3 tests/benchmarks/folds.py
"""

import json
import resource
import time
import tracemalloc

import numpy as np

from mlsites.folds import SpatialBlockFolds, assign_blocks_to_folds, block_ids

N_GRID, CELL = 10_000, 10.0
N_BACKGROUND, N_SITES, CELLS_PER_SITE = 100_000, 200, 10
BLOCK_SIZE, N_SPLITS = 2_000.0, 5


def make_samples(seed=0):
    """Cell-centre coordinates of background cells and clustered site cells."""
    rng = np.random.default_rng(seed)
    flat = rng.choice(N_GRID * N_GRID, N_BACKGROUND, replace=False)
    row, col = np.divmod(flat, N_GRID)
    centre_row = np.repeat(rng.integers(5, N_GRID - 5, N_SITES), CELLS_PER_SITE)
    centre_col = np.repeat(rng.integers(5, N_GRID - 5, N_SITES), CELLS_PER_SITE)
    offset = rng.integers(-3, 4, (2, N_SITES * CELLS_PER_SITE))
    row = np.r_[row, centre_row + offset[0]]
    col = np.r_[col, centre_col + offset[1]]
    x = (col + 0.5) * CELL
    y = (N_GRID - row - 0.5) * CELL
    site = np.r_[np.full(N_BACKGROUND, -1), np.repeat(np.arange(N_SITES), CELLS_PER_SITE)]
    return x, y, site


def main():
    x, y, site = make_samples()
    tracemalloc.start()
    t0 = time.perf_counter()
    bid = block_ids(x, y, block_size=BLOCK_SIZE)
    res = assign_blocks_to_folds(bid, site_id=site, n_splits=N_SPLITS, random_state=0)
    seconds = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    t1 = time.perf_counter()
    blocks = SpatialBlockFolds(
        x, y, site_id=site, block_size=BLOCK_SIZE, n_splits=N_SPLITS, random_state=0
    ).assign(crs="EPSG:3035").blocks
    seconds_with_polygons = time.perf_counter() - t1
    peak_mb = peak / 2**20
    print(
        json.dumps(
            {
                "benchmark": "folds_blocks_assignment",
                "n_samples": int(x.size),
                "n_blocks": int(len(res.blocks)),
                "seconds": round(seconds, 3),
                "peak_mb": round(peak_mb, 1),
                "seconds_with_polygons": round(seconds_with_polygons, 3),
                "n_block_polygons": int(len(blocks)),
                # whole process, imports included (Linux reports kB)
                "process_max_rss_mb": round(
                    resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0, 1
                ),
                "target_ratio_seconds": round(seconds / 10.0, 4),
                "target_ratio_memory": round(peak_mb / 1024.0, 4),
            }
        )
    )


if __name__ == "__main__":
    main()
