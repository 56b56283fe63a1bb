"""Random-forest settings against spatially cross-validated AUC and mapping time.

The evidence behind the "random_forest" preset's defaults (a benchmark, not a test).
For each of a few fictional studies (the demo landscape generator with virtual,
clustered, survey-biased sites; background drawn inside the survey strips; 5
square-block folds of 1 km), every setting below is cross-validated through
:func:`mlsites.evaluation.cross_validate` on the same folds, then refitted on all
samples and timed on the study's own feature rasters with
:func:`mlsites.learners.fast_predictor`.

Run: ``python tests/benchmarks/forest_defaults.py [--seeds 7,11] [--table]``.
Prints one JSON line: per setting the mean fold AUC of each study, their mean,
the difference to today's forest (500 fully grown trees) in AUC points with the
number of studies where it is not worse, the mean tree size in nodes and the
prediction seconds per million cells (2 threads, and scikit-learn's
``predict_proba`` on the same cells for the same forest). ``--table`` also prints
the Markdown table of the README.
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

from mlsites.evaluation import cross_validate  # noqa: E402
from mlsites.learners import fast_predictor, fit_learner, make_learner  # noqa: E402
from _virtual_study import virtual_study  # noqa: E402

#: Settings compared (parameters of RandomForestClassifier over the preset's own).
#: With scikit-learn >= 1.9 each tree draws its bootstrap sample with probability
#: proportional to the sample weights, and a float ``max_samples`` counts draws in
#: units of the weight total. The sampling stage weighs every site 1 (spread over
#: its cells) and all background together as much as all sites, so the weight total
#: is twice the number of sites: ``max_samples=1.0`` draws as many times as there
#: are sites, half of them site cells and half background (the down-sampled, or
#: balanced, forest of Valavi et al. 2021), ``None`` draws as many times as there
#: are rows (today's forest).
SETTINGS = {
    "today: 500 trees, fully grown": dict(n_estimators=500, max_samples=None, min_samples_leaf=1),
    "500 trees, leaf 5": dict(n_estimators=500, max_samples=None, min_samples_leaf=5),
    "500 trees, depth 12": dict(n_estimators=500, max_samples=None, max_depth=12),
    "500 trees, 1 x sites per tree": dict(n_estimators=500, max_samples=1.0, min_samples_leaf=1),
    "500 trees, 1 x sites per tree, leaf 2": dict(n_estimators=500, max_samples=1.0, min_samples_leaf=2),
    "500 trees, 2 x sites per tree": dict(n_estimators=500, max_samples=2.0, min_samples_leaf=1),
    "500 trees, 0.5 x sites per tree": dict(n_estimators=500, max_samples=0.5, min_samples_leaf=1),
    "300 trees, 1 x sites per tree": dict(n_estimators=300, max_samples=1.0, min_samples_leaf=1),
    "1000 trees, 1 x sites per tree": dict(n_estimators=1000, max_samples=1.0, min_samples_leaf=1),
    "500 trees, 1 x sites per tree, 1/2 of layers per split": dict(
        n_estimators=500, max_samples=1.0, min_samples_leaf=1, max_features=0.5),
}
BASELINE = "today: 500 trees, fully grown"
MAP_CELLS = 250_000

def _seconds_per_million(fn, n):
    best = np.inf
    for _ in range(2):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best * 1e6 / n


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", default="7,11", help="seeds of the fictional studies")
    parser.add_argument("--table", action="store_true", help="also print the README table")
    parser.add_argument("--sklearn-timing", action="store_true",
                        help="also time scikit-learn's predict_proba per setting (slow)")
    args = parser.parse_args()
    seeds = [int(s) for s in args.seeds.split(",")]
    rows = {name: {"auc": [], "nodes": [], "fast_s_per_mcell": [], "sklearn_s_per_mcell": []}
            for name in SETTINGS}
    with tempfile.TemporaryDirectory(prefix="forest_defaults_") as tmp:
        work = Path(tmp)
        for seed in seeds:
            samples, cells = virtual_study(seed, work)
            table, feats, cat = samples.table, samples.features, samples.categorical
            cells = cells.sample(n=min(MAP_CELLS, len(cells)), random_state=0).sort_index()

            def factory(params):
                return lambda: make_learner("random_forest", random_state=seed, categorical_features=cat,
                                            n_jobs=2, **params)

            result = cross_validate(table, features=feats, categorical=cat, random_state=seed,
                                    learners={name: factory(p) for name, p in SETTINGS.items()})
            fold_rows = result.by_fold[result.by_fold["fold"] != "all"]
            for name, params in SETTINGS.items():
                rows[name]["auc"].append(float(fold_rows.loc[fold_rows["learner"] == name, "auc"].mean()))
                model = fit_learner(factory(params)(), table[feats], table["label"], table["weight"])
                forest = model[-1]
                rows[name]["nodes"].append(float(np.mean([t.tree_.node_count for t in forest.estimators_])))
                predictor = fast_predictor(model)
                predictor.predict_site(cells.iloc[:100])  # compile outside the timing
                rows[name]["fast_s_per_mcell"].append(
                    _seconds_per_million(lambda: predictor.predict_site(cells), len(cells)))
                if args.sklearn_timing or name == BASELINE:
                    rows[name]["sklearn_s_per_mcell"].append(
                        _seconds_per_million(lambda: model.predict_proba(cells), len(cells)))
    base = np.array(rows[BASELINE]["auc"])
    out = {"benchmark": "forest_defaults", "seeds": seeds, "cpu_count": os.cpu_count(), "settings": {}}
    for name, r in rows.items():
        auc = np.array(r["auc"])
        out["settings"][name] = {
            "params": SETTINGS[name],
            "auc_by_study": [round(a, 4) for a in auc],
            "auc_mean": round(float(auc.mean()), 4),
            "auc_diff_vs_today": round(float((auc - base).mean()), 4),
            "studies_not_worse": int((auc >= base - 1e-12).sum()),
            "mean_nodes_per_tree": round(float(np.mean(r["nodes"])), 1),
            "fast_seconds_per_million_cells": round(float(np.mean(r["fast_s_per_mcell"])), 3),
            "sklearn_seconds_per_million_cells": (round(float(np.mean(r["sklearn_s_per_mcell"])), 3)
                                                  if r["sklearn_s_per_mcell"] else None),
        }
    print(json.dumps(out))
    if args.table:
        print("\n| setting | fold AUC by study | mean | vs today | nodes per tree | s per million cells |")
        print("|---|---|---|---|---|---|")
        for name, r in out["settings"].items():
            print(f"| {name} | {', '.join(f'{a:.3f}' for a in r['auc_by_study'])} | {r['auc_mean']:.3f} | "
                  f"{r['auc_diff_vs_today']:+.3f} | {r['mean_nodes_per_tree']:.0f} | "
                  f"{r['fast_seconds_per_million_cells']:.2f} |")


if __name__ == "__main__":
    main()
