"""Spatially cross-validated AUC per learner before and after the issue-7 changes (a benchmark, not a test).

One virtual study (``_virtual_study.py``, seed 11: not one of the seeds the fuzzy
defaults were chosen on), one sample table and its square-block folds; every learner
is cross-validated three times on them:

- ``before``: the weights as they were (each site 1, background balanced to the
  sites' total, so the total grows with the study), the logistic preset as it was
  (scikit-learn's C = 1 on those weights) and the fuzzy baseline as it was (fuzzy
  minimum of P5/25/75/95 trapezoids reaching 0, classes by raw share of sites);
- ``weights``: the same table with the weights rescaled to mean 1 (same ratios) and
  the logistic preset's penalty on the weighted mean log-loss; fuzzy as before;
- ``fuzzy``: as ``weights``, with the fuzzy baseline's new defaults.

random_forest, mlp and gradient_boosting are the current presets in all three, so
their before/weights difference is the effect of the weight scale alone.
Run: ``python tests/benchmarks/science.py [--work DIR] [--jobs N]``.

Prints one JSON line: per learner the mean fold AUC (and sd) in each state.
"""

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _virtual_study import balanced_weights, virtual_samples  # noqa: E402

from mlsites.learners import FuzzySuitability  # noqa: E402

SEED = 11
LEARNERS = ("random_forest", "logistic", "mlp", "gradient_boosting", "fuzzy")


class FormerFuzzy(FuzzySuitability):
    """The fuzzy baseline as it was: classes by their share of sites over the largest share."""

    def fit(self, X, y, sample_weight=None):
        super().fit(X, y, sample_weight)
        Xv = self._validate_X(X, reset=False)
        w = np.ones(len(y)) if sample_weight is None else np.asarray(sample_weight, dtype=float)
        site = (np.asarray(y) == self.classes_[1]) & (w > 0)
        for j in self.category_memberships_:
            share = pd.Series(w[site]).groupby(pd.Series(Xv[site, j], dtype=object).to_numpy()).sum()
            self.category_memberships_[j] = (share / share.max()).to_dict()
        return self


def _factories(state, categorical):
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import Pipeline

    from mlsites.learners import LayerEncoder, make_learner

    out = {name: (lambda name=name: make_learner(name, categorical_features=categorical)) for name in LEARNERS}
    if state == "before":
        out["logistic"] = lambda: Pipeline([("encode", LayerEncoder(categorical, scale=True)),
                                            ("model", LogisticRegression(C=1.0, max_iter=1000))])
    if state in ("before", "weights"):
        out["fuzzy"] = lambda: Pipeline([("model", FormerFuzzy(
            categorical_features=list(categorical) or None, operator="minimum", percentiles=(5, 25, 75, 95),
            membership_floor=0.0))])
    return out


def main():
    from mlsites.evaluation import cross_validate

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--work", type=Path, default=None, help="folder for the virtual study (default: temporary)")
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    work = args.work or Path(tempfile.mkdtemp(prefix="science-"))
    t0 = time.perf_counter()
    table, features, categorical = virtual_samples(work / f"study_{SEED}", SEED)
    before = table.copy()
    before["weight"] = balanced_weights(table)
    result, seconds = {}, {}
    for state, tab in (("before", before), ("weights", table), ("fuzzy", table)):
        t1 = time.perf_counter()
        res = cross_validate(tab, features=features, categorical=categorical,
                             learners=_factories(state, categorical), random_state=SEED, n_jobs=args.jobs)
        seconds[state] = round(time.perf_counter() - t1, 1)
        result[state] = res.summary.set_index("learner")
    table_out = {name: {f"auc_{state}": round(float(result[state].loc[name, "auc_mean"]), 4) for state in result}
                 | {f"auc_sd_{state}": round(float(result[state].loc[name, "auc_sd"]), 4) for state in result}
                 for name in LEARNERS}
    print(json.dumps({
        "benchmark": "mean square-block fold AUC on virtual sites, before/after weight rescaling and fuzzy defaults",
        "seed": SEED, "n_samples": int(len(table)), "n_site_cells": int(table["label"].sum()),
        "n_sites": int(table.loc[table["label"] == 1, "site_id"].nunique()), "features": features,
        "weight_sum_before": round(float(before["weight"].sum()), 2),
        "weight_sum_after": round(float(table["weight"].sum()), 2),
        "learners": table_out, "seconds": seconds, "total_seconds": round(time.perf_counter() - t0, 1),
    }))


if __name__ == "__main__":
    main()
