"""Time of the explanation stage per learner on the demo study (a benchmark, not a test).

Target: all five learners explained in under 60 s on 2 cores at the default sizes
(``mlsites.explain.EXPLAIN_DEFAULTS``), fold models given. Runs do not keep their fold
models yet, so this script fits them itself (not timed as part of the stage).
Run: ``python tests/benchmarks/explain.py [--demo DIR]``; without ``--demo`` the demo
is built with ``python -m mlsites.cli demo --out DIR`` in a temporary folder.

Prints one JSON line: seconds of the stage per learner (SHAP, permutation importance,
response curves), the total and its ratio to the target (below 1 meets it), seconds
spent fitting fold models, and the throughput of per-layer contributions
(:func:`mlsites.explain.layer_contributions`) relative to plain prediction of the
same cells, per learner (cells per second of each, measured side by side).
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

TARGET_SECONDS = 60.0
ROOT = Path(__file__).resolve().parents[2]


def _demo(folder):
    folder = Path(folder)
    samples = next(iter(sorted(folder.glob("runs/*/samples/samples.parquet"))), None)
    if samples is None:
        env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
        subprocess.run([sys.executable, "-m", "mlsites.cli", "demo", "--out", str(folder), "--quiet"], check=True,
                       env=env, stdout=subprocess.DEVNULL)
        samples = next(iter(sorted(folder.glob("runs/*/samples/samples.parquet"))))
    return samples.parent, folder / "experiments" / "demo.toml"


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--demo", help="folder of an earlier `mlsites demo --out` (reused)")
    parser.add_argument("--contribution-cells", type=int, default=100)
    args = parser.parse_args()
    sys.path.insert(0, str(ROOT))
    from mlsites.experiment import load_experiment
    from mlsites.explain import LayerExplainer, explain_learners, layer_contributions, predicted_score
    from mlsites.learners import fit_learner, make_learner

    folder = Path(args.demo) if args.demo else Path(tempfile.mkdtemp(prefix="mlsites-bench-explain-"))
    samples_dir, toml = _demo(folder)
    exp = load_experiment(toml)
    summary = json.loads((samples_dir / "sampling.json").read_text())
    features, categorical = summary["features"], summary["categorical"]
    table = pd.read_parquet(samples_dir / "samples.parquet")
    X, y, w = table[features], table["label"].to_numpy(), table["weight"].to_numpy()
    fold = table["fold"].to_numpy()
    seed = exp["study"]["seed"]
    t0 = time.perf_counter()
    models, folds = {}, {}
    for name in exp["learners"]["use"]:
        params = {k: tuple(v) if isinstance(v, list) else v for k, v in exp["learners"]["settings"].get(name, {}).items()}

        def make():
            return make_learner(name, random_state=seed, categorical_features=categorical, **params)

        models[name] = fit_learner(make(), X, y, w)
        folds[name] = []
        for k in np.unique(fold):
            train, test = np.flatnonzero(fold != k), np.flatnonzero(fold == k)
            est = fit_learner(make(), X.iloc[train], y[train], w[train])
            sites = test[y[test] == 1]
            folds[name].append((est, sites, w[sites], test[y[test] == 0]))
    fit_seconds = time.perf_counter() - t0
    out = Path(tempfile.mkdtemp(prefix="mlsites-bench-explain-out-")) / "explain"
    t0 = time.perf_counter()
    result = explain_learners(models, table, features=features, categorical=categorical, fold_models=folds,
                              out_dir=out, random_state=seed, quiet=True)
    stage_seconds = time.perf_counter() - t0
    per = {n: result.settings["per_learner"][n]["seconds"] for n in models}
    land = X[y == 0]
    throughput = {}
    for name, est in models.items():
        explainer = LayerExplainer(est, background=land.iloc[:50], random_state=seed)
        cells = land.iloc[: args.contribution_cells]
        layer_contributions(explainer, cells.iloc[:5])  # compile / warm up outside the timing
        t0 = time.perf_counter()
        layer_contributions(explainer, cells, result.top_layers(name, 3))
        t_contrib = time.perf_counter() - t0
        many = pd.concat([land] * max(1, 20000 // len(land) + 1), ignore_index=True).iloc[:20000]
        t0 = time.perf_counter()
        predicted_score(est, many)
        t_pred = time.perf_counter() - t0
        c_rate, p_rate = len(cells) / t_contrib, len(many) / t_pred
        throughput[name] = {"contribution_cells_per_s": round(c_rate, 1), "predict_cells_per_s": round(p_rate, 1),
                            "ratio": round(c_rate / p_rate, 5)}
    print(json.dumps({
        "benchmark": "explanation stage on the demo, five learners, default sizes",
        "stage_seconds": round(stage_seconds, 1), "seconds_ratio": round(stage_seconds / TARGET_SECONDS, 3),
        "per_learner_seconds": per, "fold_model_fit_seconds": round(fit_seconds, 1),
        "contribution_throughput": throughput, "n_rows": len(table), "n_layers": len(features),
        "cpu_count": os.cpu_count(),
    }))


if __name__ == "__main__":
    main()
