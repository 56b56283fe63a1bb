"""Fast tree-ensemble predictor against scikit-learn's predict_proba (a benchmark, not a test).

Fits, on one fictional study (:mod:`_virtual_study`), the "random_forest" preset
with its defaults as a run fits it (balanced draws per tree), the same preset as it was before (500 fully grown trees), and
the "gradient_boosting" preset, then predicts the same cells (the study's valid
cells, repeated to at least 1 million) with ``pipeline.predict_proba`` and with
:func:`mlsites.learners.fast_predictor`, side by side, both on all cores.

Run: ``python tests/benchmarks/tree_predict.py [--cells 1200000] [--map-cells 16000000]``.

Prints one JSON line: per model the cells per second of both (the whole pipeline
from the layer table, and the model alone on the encoded matrix), their ratio
(target >= 5), the largest absolute difference of the probabilities over all
cells (target <= 1e-6), and for the default forest the seconds of the predictor
for ``--map-cells`` cells fed in windows of 1 million (target: the whole map
under 120 s).
"""

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from mlsites.learners import balanced_draws_share, fast_predictor, fit_learner, make_learner  # noqa: E402
from _virtual_study import virtual_study  # noqa: E402

MODELS = {
    # as a run fits it: each tree draws about as many rows as there are sites, twice
    "random_forest (defaults)": ("random_forest", {"max_samples": "balanced"}),
    "random_forest (500 fully grown trees)": ("random_forest", dict(n_estimators=500, max_samples=None)),
    "gradient_boosting (defaults)": ("gradient_boosting", {}),
}
TARGET_RATIO = 5.0
TARGET_DIFF = 1e-6
TARGET_MAP_SECONDS = 120.0
WINDOW = 1_000_000


def _timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t0


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--cells", type=int, default=1_200_000, help="cells compared (at least 1e6)")
    parser.add_argument("--map-cells", type=int, default=16_000_000, help="cells of the timed map prediction")
    args = parser.parse_args()
    result = {"benchmark": "tree_predict", "cpu_count": os.cpu_count(), "cells": args.cells, "models": {}}
    with tempfile.TemporaryDirectory(prefix="tree_predict_") as tmp:
        samples, cells = virtual_study(args.seed, Path(tmp))
    table, feats, cat = samples.table, samples.features, samples.categorical
    repeats = -(-args.cells // len(cells))
    X = pd.concat([cells] * repeats, ignore_index=True).iloc[:args.cells]
    for label, (name, params) in MODELS.items():
        if params.get("max_samples") == "balanced":
            n_sites = int(table.loc[table["label"] == 1, "site_id"].nunique())
            params = dict(params, max_samples=balanced_draws_share(table["weight"].to_numpy(), n_sites))
        model = make_learner(name, random_state=args.seed, categorical_features=cat, n_jobs=-1, **params)
        fit_learner(model, table[feats], table["label"], table["weight"])
        predictor, build_s = _timed(lambda: fast_predictor(model))
        predictor.predict_site(X.iloc[:1000])  # compile (or load the cache) outside the timing
        ref, t_sk = _timed(lambda: model.predict_proba(X)[:, 1])
        got, t_fast = _timed(lambda: predictor.predict_site(X))
        Z = model[0].transform(X.iloc[:WINDOW // 4])
        Zf = predictor._encode(X.iloc[:WINDOW // 4])
        _, t_sk_model = _timed(lambda: model[-1].predict_proba(Z))
        _, t_fast_model = _timed(lambda: predictor._run(Zf, np.empty(len(Zf))))
        forest = model[-1]
        nodes = (np.mean([t.tree_.node_count for t in forest.estimators_]) if hasattr(forest, "estimators_")
                 else np.mean([p[0].nodes.shape[0] for p in forest._predictors]))
        entry = {
            "kind": predictor.kind,
            "mean_nodes_per_tree": round(float(nodes), 1),
            "build_seconds": round(build_s, 3),
            "sklearn_cells_per_s": round(len(X) / t_sk),
            "fast_cells_per_s": round(len(X) / t_fast),
            "ratio": round(t_sk / t_fast, 2),
            "model_only_ratio": round(t_sk_model / t_fast_model, 2),
            "max_abs_diff": float(np.abs(got - ref).max()),
            "ratio_vs_target": round(t_sk / t_fast / TARGET_RATIO, 2),
        }
        if label == "random_forest (defaults)":
            window = X.iloc[:WINDOW]
            t0 = time.perf_counter()
            done = 0
            while done < args.map_cells:
                n = min(WINDOW, args.map_cells - done)
                predictor.predict_site(window.iloc[:n])
                done += n
            seconds = time.perf_counter() - t0
            entry["map_cells"] = args.map_cells
            entry["map_predict_seconds"] = round(seconds, 1)
            entry["map_seconds_vs_target"] = round(seconds / TARGET_MAP_SECONDS, 2)
        result["models"][label] = entry
    print(json.dumps(result))


if __name__ == "__main__":
    main()
