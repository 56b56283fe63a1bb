"""Speed and memory of presence and background sampling (a benchmark, not a test).

Target: on a 10 000 x 10 000 grid (10 m cells, boolean study mask with nodata
holes), 500 sites with 50 m buffers and 100 000 background cells with a 100 m
exclusion distance, under 10 s and under 1 GB peak memory.
Run: ``python tests/benchmarks/sampling.py [--size 10000] [--n-background 100000]``.
Prints one JSON line; ``peak_mb`` is the peak resident set size of the whole
process (interpreter and libraries included), so it over- rather than under-states.
"""

import argparse
import json
import resource
import sys
import time
import warnings

import geopandas as gpd
import numpy as np
import shapely
from affine import Affine
from rasterio.crs import CRS

from mlsites.grid import GridSpec
from mlsites.sampling import presence_cells, read_sites, sample_background

TARGET_SECONDS = 10.0
TARGET_MB = 1024.0


def peak_rss_mb():
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / 1024.0 / 1024.0 if sys.platform == "darwin" else peak / 1024.0


def study_mask(size, seed):
    """All valid except a frame of nodata and a few rectangular holes (lakes, gaps)."""
    rng = np.random.default_rng(seed)
    mask = np.ones((size, size), dtype=bool)
    frame = size // 50
    mask[:frame] = mask[-frame:] = False
    mask[:, :frame] = mask[:, -frame:] = False
    for _ in range(20):
        r, c = rng.integers(0, size - size // 10, 2)
        h, w = rng.integers(size // 100, size // 10, 2)
        mask[r : r + h, c : c + w] = False
    return mask


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=10_000, help="rows = cols of the grid")
    parser.add_argument("--n-sites", type=int, default=500)
    parser.add_argument("--buffer-m", type=float, default=50.0)
    parser.add_argument("--n-background", type=int, default=100_000)
    parser.add_argument("--exclusion-m", type=float, default=100.0)
    parser.add_argument("--survey-polygons", type=int, default=0,
                        help="also restrict background to this many random survey squares")
    parser.add_argument("--survey-mode", default="weighted", choices=["inside", "weighted"])
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    cell = 10.0
    grid = GridSpec(CRS.from_epsg(3857), Affine(cell, 0, 0.0, 0, -cell, args.size * cell),
                    args.size, args.size)
    mask = study_mask(args.size, args.seed)
    rng = np.random.default_rng(args.seed + 1)
    extent = args.size * cell
    sites = gpd.GeoDataFrame(
        {"site_id": [f"s{i}" for i in range(args.n_sites)]},
        geometry=shapely.points(rng.uniform(0, extent, args.n_sites),
                                rng.uniform(0, extent, args.n_sites)),
        crs=3857,
    )

    survey = None
    if args.survey_polygons:
        side = rng.uniform(500, 3000, args.survey_polygons)
        sx, sy = rng.uniform(0, extent, (2, args.survey_polygons))
        survey = gpd.GeoDataFrame({"effort": rng.integers(1, 5, args.survey_polygons)},
                                  geometry=shapely.box(sx, sy, sx + side, sy + side), crs=3857)

    start = time.perf_counter()

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # sites falling in the holes are dropped and counted
        records = read_sites(sites, grid, valid_mask=mask)
        presence = presence_cells(records, grid, buffer_m=args.buffer_m, valid_mask=mask)
    background = sample_background(grid, n=args.n_background, valid_mask=mask,
                                   exclude_sites=records, exclusion_m=args.exclusion_m,
                                   survey=survey, survey_mode=args.survey_mode,
                                   effort_field="effort" if survey is not None else None,
                                   random_state=args.seed)
    seconds = time.perf_counter() - start
    peak = peak_rss_mb()
    print(json.dumps({
        "grid": f"{args.size}x{args.size}",
        "n_sites_kept": records.n_kept,
        "n_presence_cells": len(presence),
        "n_background": len(background),
        "survey_polygons": args.survey_polygons,
        "method": background.attrs["method"],
        "seconds": round(seconds, 3),
        "peak_mb": round(peak, 1),
        "seconds_ratio_to_target": round(seconds / TARGET_SECONDS, 4),
        "memory_ratio_to_target": round(peak / TARGET_MB, 4),
    }))


if __name__ == "__main__":
    main()
