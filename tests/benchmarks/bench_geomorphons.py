"""Throughput of :func:`mlsites.terrain.geomorphons` (a benchmark, not a test).

Target: at least 2 million cells/s with ``lookup_cells=20`` on 2 cores.
Run: ``python tests/benchmarks/bench_geomorphons.py [--size 4000] [--repeat 3]``.
"""

import argparse
import time

import numba
import numpy as np
from scipy.ndimage import gaussian_filter

from mlsites.terrain import geomorphons


def synthetic_dem(size, seed=0):
    """Smoothed white noise plus a tilt, in metres, float32."""
    rng = np.random.default_rng(seed)
    noise = gaussian_filter(rng.normal(size=(size, size)), sigma=8.0)
    noise *= 40.0 / noise.std()
    tilt = np.linspace(0.0, 200.0, size)[None, :]
    return (noise + tilt).astype(np.float32)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=4000, help="rows = cols of the DEM")
    parser.add_argument("--lookup-cells", type=int, default=20)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    dem = synthetic_dem(args.size)
    geomorphons(dem[:50, :50], 25.0, lookup_cells=args.lookup_cells)  # compile
    times = []
    for _ in range(args.repeat):
        start = time.perf_counter()
        classes = geomorphons(dem, 25.0, lookup_cells=args.lookup_cells)
        times.append(time.perf_counter() - start)
    best = min(times)
    print(
        f"{args.size}x{args.size} float32, lookup_cells={args.lookup_cells}, "
        f"threads={numba.get_num_threads()}: best {best:.2f} s, "
        f"{dem.size / best / 1e6:.2f} million cells/s"
    )
    print("class counts:", np.bincount(classes.ravel(), minlength=11).tolist())


if __name__ == "__main__":
    main()
