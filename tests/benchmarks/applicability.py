"""Benchmark: dissimilarity index and area of applicability at map scale.

Features of a fictional 1024 x 1024 landscape (mlsites.synthetic, 10 m cells): 10
continuous terrain layers (height, slope, northness, eastness, ruggedness,
roughness, two curvatures, TPI at 100 and 500 m) and 2 categorical ones
(geomorphon landform, soil). 20 000 training rows drawn at random, 5 random folds.

Measured side by side in one run:

- fitting (mean pairwise distance over all 2e8 pairs, cross-validated training DI);
- the mean pairwise distance kernel against blockwise ``scipy.spatial.distance.cdist``
  on the same one-hot coordinates (both exact, no n x n matrix);
- dissimilarity throughput (cells per second, ``n_jobs`` 1 and 2) of the grouped
  search against one ``cKDTree`` over all one-hot columns and against brute force
  ``cdist``; and of the continuous layers alone;
- the largest difference to brute force (must be rounding only);
- memory of the fit (tracemalloc: NumPy allocations; the numba kernel adds O(n) per
  thread) against the 3.2 GB an n x n distance matrix would take, and the peak
  resident memory of the whole script (mostly the landscape and its layers).

Prints one JSON line. Run: python3 tests/benchmarks/applicability.py
"""

import json
import resource
import time
import tracemalloc

import numpy as np
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist

import mlsites.terrain as t
from mlsites.mapping import ApplicabilityModel
from mlsites.synthetic import make_landscape

N_TRAIN, N_QUERY, N_BRUTE = 20_000, 100_000, 5_000
CATEGORICAL = [10, 11]


def features():
    land = make_landscape((1024, 1024), random_state=3)
    dem = land.dem.astype(np.float64)
    layers = [
        dem, t.slope(dem, 10.0), t.northness(dem, 10.0), t.eastness(dem, 10.0), t.ruggedness(dem),
        t.roughness(dem), t.profile_curvature(dem, 10.0), t.plan_curvature(dem, 10.0),
        t.tpi(dem, 10.0, radius=100.0), t.tpi(dem, 10.0, radius=500.0),
        t.geomorphons(dem, 10.0).astype(float), land.soil.astype(float),
    ]
    f = np.stack([a.ravel() for a in layers], axis=1)
    return f[np.isfinite(f).all(axis=1)]


def one_hot(model, X):
    """The one-hot embedding the model's distances are defined on."""
    zc, codes, _ = model._embed(X)
    blocks = [zc]
    for c, j in enumerate(model._categorical_used):
        block = np.zeros((len(X), model.categories_[int(j)].size + 1))
        block[np.arange(len(X)), codes[:, c]] = model.weights_[j] / np.sqrt(2.0)
        blocks.append(block)
    return np.hstack(blocks)


def blockwise_cdist_mean(z, block=256):
    total, n = 0.0, len(z)
    for s in range(0, n, block):
        d = cdist(z[s : s + block], z[s:])
        total += d.sum() - np.tril(d[:, : min(block, n - s)]).sum()
    return total / (n * (n - 1) / 2)


def rate(fn, n):
    t0 = time.perf_counter()
    out = fn()
    return out, n / (time.perf_counter() - t0)


def main():
    f = features()
    rng = np.random.default_rng(0)
    train = f[rng.choice(len(f), N_TRAIN, replace=False)]
    folds = rng.integers(0, 5, N_TRAIN)
    query = f[rng.choice(len(f), N_QUERY, replace=False)]
    ApplicabilityModel().fit(train[:200], folds[:200], categorical=CATEGORICAL)  # compile kernels

    tracemalloc.start()
    t0 = time.perf_counter()
    model = ApplicabilityModel().fit(train, folds, categorical=CATEGORICAL)
    fit_s = time.perf_counter() - t0
    fit_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()

    z = one_hot(model, train)
    t0 = time.perf_counter()
    d_bar_cdist = blockwise_cdist_mean(z)
    cdist_s = time.perf_counter() - t0
    t0 = time.perf_counter()
    from mlsites.mapping import mean_pairwise_distance

    zc, codes, _ = model._embed(train)
    d_bar_kernel = mean_pairwise_distance(zc, codes, model._penalty)
    kernel_s = time.perf_counter() - t0

    di1, grouped_1 = rate(lambda: model.dissimilarity(query), N_QUERY)
    model.n_jobs = 2
    di2, grouped_2 = rate(lambda: model.dissimilarity(query), N_QUERY)
    model.n_jobs = 1
    zq = one_hot(model, query)
    single = cKDTree(z)
    (d_single, _), single_1 = rate(lambda: single.query(zq, k=1), N_QUERY)
    brute, brute_1 = rate(lambda: cdist(zq[:N_BRUTE], z).min(axis=1), N_BRUTE)
    cont = ApplicabilityModel().fit(train[:, :10], folds)
    _, cont_1 = rate(lambda: cont.dissimilarity(query[:, :10]), N_QUERY)
    cont.n_jobs = 2
    _, cont_2 = rate(lambda: cont.dissimilarity(query[:, :10]), N_QUERY)

    print(json.dumps({
        "benchmark": "applicability",
        "n_train": N_TRAIN, "n_query": N_QUERY, "n_continuous": 10, "n_categorical": 2,
        "one_hot_dims": int(z.shape[1]), "category_groups": len(model.tree_.trees),
        "fit_s": round(fit_s, 2),
        "mean_distance_kernel_s": round(kernel_s, 2), "mean_distance_cdist_blocks_s": round(cdist_s, 2),
        "mean_distance_speedup_vs_cdist": round(cdist_s / kernel_s, 2),
        "mean_distance_rel_diff": float(abs(d_bar_kernel - d_bar_cdist) / d_bar_cdist),
        "di_cells_per_s_jobs1": round(grouped_1), "di_cells_per_s_jobs2": round(grouped_2),
        "di_speedup_vs_one_hot_kdtree": round(grouped_1 / single_1, 2),
        "di_speedup_vs_brute_cdist": round(grouped_1 / brute_1, 2),
        "di_max_abs_diff_vs_brute": float(np.abs(di1[:N_BRUTE] * model.mean_distance_ - brute).max()),
        "di_max_abs_diff_vs_one_hot_kdtree": float(np.abs(di1 * model.mean_distance_ - d_single).max()),
        "jobs_identical": bool(np.array_equal(di1, di2, equal_nan=True)),
        "continuous_only_cells_per_s_jobs1": round(cont_1), "continuous_only_cells_per_s_jobs2": round(cont_2),
        "minutes_for_16M_cells_jobs2": round(16e6 / grouped_2 / 60, 1),
        "fit_peak_traced_mb": round(fit_peak / 2**20, 1),
        "peak_rss_mb_whole_script": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024),
    }))


if __name__ == "__main__":
    main()
