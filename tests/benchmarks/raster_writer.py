"""What each GeoTIFF writing choice costs and buys: codec, level, predictor, tile size, overviews.

Prints one JSON line. For each candidate set of creation options it writes the same
layers (slope and aspect of a generated DEM, the DEM itself as a smooth layer, and its
geomorphon classes as a uint8 class layer) as tiled GeoTIFFs with nodata and overviews
(average; nearest for the classes), and reports per layer:

- ``write_cpu_s``: CPU seconds (all threads) to write the file and build its overviews
  with GDAL, on one thread (``NUM_THREADS=1``), so the figure does not depend on how
  busy the machine is;
- ``read_cpu_s``: CPU seconds to read the whole band back (what every later stage pays);
- ``mb``: file size with overviews;
- ``overview_share``: the part of ``write_cpu_s`` spent on the overviews.

Two extra rows per layer: ``incremental_overviews_estimate`` (the chosen codec, the
overview levels decimated by a numba 2 x 2 mean and written as separate arrays: the
cost a writer would have if it wrote each overview level while the base is written;
rasterio offers no way to write into the overview levels of an open file) and the
chosen options on all cores (``threads_wall_s``, wall seconds; noisy on a shared
machine). Run: ``python tests/benchmarks/raster_writer.py [--size 4000]``.
"""

import argparse
import json
import os
import time

import numba
import numpy as np
import rasterio
from rasterio.enums import Resampling

from terrain import best_of, generated_dem  # the sibling script in this folder

CANDIDATES = {
    "deflate1": dict(compress="deflate", ZLEVEL=1),
    "deflate1_pred3": dict(compress="deflate", ZLEVEL=1, predictor=3),
    "deflate6_pred3": dict(compress="deflate", ZLEVEL=6, predictor=3),
    "deflate1_tile512": dict(compress="deflate", ZLEVEL=1, blockxsize=512, blockysize=512),
    "lzw_pred3": dict(compress="lzw", predictor=3),
    "zstd1": dict(compress="zstd", ZSTD_LEVEL=1),
    "zstd1_pred3": dict(compress="zstd", ZSTD_LEVEL=1, predictor=3),
    "zstd1_pred2": dict(compress="zstd", ZSTD_LEVEL=1, predictor=2),
    "none": dict(compress="none"),
}
CHOSEN = "zstd1"


def _factors(shape):
    out, f = [], 2
    while max(shape) / f >= 256:
        out.append(f)
        f *= 2
    return out


def _cpu(fn):
    return best_of(fn, repeat=2, clock=time.process_time)


@numba.njit(cache=True, nogil=True)
def _block_mean(a):
    """2 x 2 mean over valid cells (a trailing odd row or column averaged alone)."""
    out = np.empty(((a.shape[0] + 1) // 2, (a.shape[1] + 1) // 2), np.float32)
    for i in range(out.shape[0]):
        for j in range(out.shape[1]):
            total, n = 0.0, 0
            for r in range(2 * i, min(2 * i + 2, a.shape[0])):
                for c in range(2 * j, min(2 * j + 2, a.shape[1])):
                    if not np.isnan(a[r, c]):
                        total += a[r, c]
                        n += 1
            out[i, j] = total / n if n else np.nan
    return out


def _profile(grid_like, options, threads="1", dtype="float32"):
    prof = dict(driver="GTiff", width=grid_like["width"], height=grid_like["height"], count=1, dtype=dtype,
                crs=grid_like["crs"], transform=grid_like["transform"],
                nodata=np.nan if dtype == "float32" else 0, tiled=True,
                blockxsize=256, blockysize=256, BIGTIFF="IF_SAFER", NUM_THREADS=threads)
    prof.update(options)
    return prof


def _write(path, array, prof, overviews=True):
    with rasterio.open(path, "w", **prof) as ds:
        ds.write(array, 1)
        if overviews:
            categorical = array.dtype.kind != "f"
            ds.build_overviews(_factors(array.shape), Resampling.nearest if categorical else Resampling.average)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=4000)
    ap.add_argument("--workdir", default=None)
    args = ap.parse_args()


    from mlsites import terrain
    from mlsites.grid import read_array

    n = args.size
    work, dem_path = generated_dem(args.workdir, n, prefix="mlsites-writer-")
    dem = read_array(dem_path)
    slope, aspect = terrain.slope_aspect(dem, 10.0)
    layers = {"slope": slope.astype(np.float32), "aspect": aspect.astype(np.float32), "dem": dem,
              "landform": terrain.geomorphons(dem, 10.0, lookup_cells=20).astype(np.uint8)}
    del slope, aspect
    with rasterio.open(dem_path) as src:
        grid_like = {"width": src.width, "height": src.height, "crs": src.crs, "transform": src.transform}

    result = {"benchmark": "raster_writer", "cells": n * n, "cores": os.cpu_count(), "chosen": CHOSEN, "layers": {}}
    path = work / "candidate.tif"
    with rasterio.Env(GDAL_CACHEMAX=128, GDAL_NUM_THREADS="1"):
        for lname, arr in layers.items():
            rows = {}
            for cname, options in CANDIDATES.items():
                if options.get("predictor") == (2 if arr.dtype.kind == "f" else 3):
                    continue  # predictor 3 is for floats; 2 is measured on the class layer
                prof = _profile(grid_like, options, dtype=arr.dtype.name)
                base = _cpu(lambda: _write(path, arr, prof, overviews=False))
                full = _cpu(lambda: _write(path, arr, prof))

                def read():
                    with rasterio.open(path) as ds:
                        ds.read(1)

                rows[cname] = {"write_cpu_s": round(full, 3), "read_cpu_s": round(_cpu(read), 3),
                               "mb": round(os.path.getsize(path) / 2**20, 1),
                               "overview_share": round(1 - base / full, 2)}
            prof = _profile(grid_like, CANDIDATES[CHOSEN], dtype=arr.dtype.name)
            if arr.dtype.kind != "f":
                result["layers"][lname] = rows
                continue

            def incremental():
                _write(path, arr, prof, overviews=False)
                level = arr
                for _ in _factors(arr.shape):
                    level = _block_mean(level)
                    _write(work / "level.tif", level, dict(prof, width=level.shape[1], height=level.shape[0]),
                           overviews=False)

            rows["incremental_overviews_estimate"] = {"write_cpu_s": round(_cpu(incremental), 3)}
            with rasterio.Env(GDAL_NUM_THREADS="ALL_CPUS"):
                prof_all = _profile(grid_like, CANDIDATES[CHOSEN], threads="ALL_CPUS", dtype=arr.dtype.name)
                best = best_of(lambda: _write(path, arr, prof_all))
                one = best_of(lambda: _write(path, arr, prof))
            rows[CHOSEN + "_threads"] = {"one_thread_wall_s": round(one, 3), "all_cores_wall_s": round(best, 3)}
            result["layers"][lname] = rows
    print(json.dumps(result))


if __name__ == "__main__":
    main()
