"""Time of the explanation stage per learner on the demo study (a benchmark, not a test).

Target: all five learners explained in under 60 s on 2 cores at the default sizes
(``mlsites.explain.EXPLAIN_DEFAULTS``). The numbers are those of the demo run itself
(``mlsites demo``), which explains every learner with its fold models and maps the
best learner's top three layers into ``explain/contributions/``.
Run: ``python tests/benchmarks/explain.py [--demo DIR]``; without ``--demo`` the demo
is built with ``python -m mlsites.cli demo --out DIR`` in a temporary folder; with it,
an earlier demo folder is reused (run again if it has no ``runs/demo/manifest.json``).

Prints one JSON line: seconds of the stage per learner (SHAP, permutation importance,
response curves) and in all, its ratio to the target (below 1 meets it), and the
throughput of the contribution maps (cells per second) relative to the plain map of
the same learner (``map.json``: cells mapped over prediction seconds), when the run
mapped it.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGET_SECONDS = 60.0
ROOT = Path(__file__).resolve().parents[2]


def _demo(folder):
    folder = Path(folder)
    manifest = folder / "runs" / "demo" / "manifest.json"
    seconds = None
    if not manifest.is_file():
        env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "mlsites.cli", "demo", "--out", str(folder), "--quiet", "--fresh"],
                       check=True, env=env, stdout=subprocess.DEVNULL)
        seconds = time.perf_counter() - t0
    return manifest.parent, json.loads(manifest.read_text()), seconds


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--demo", help="folder of an earlier `mlsites demo --out` (reused)")
    args = parser.parse_args()
    folder = Path(args.demo) if args.demo else Path(tempfile.mkdtemp(prefix="mlsites-bench-explain-"))
    run_dir, manifest, demo_seconds = _demo(folder)
    explain = manifest["stages"]["explain"]
    per = {n: v["seconds"] for n, v in explain["learners"].items()}
    totals = {n: round(sum(s.values()), 2) for n, s in per.items()}
    contrib = json.loads((run_dir / "explain" / "contributions" / "contributions.json").read_text())
    best = contrib["learner"]
    throughput = {"learner": best, "shap_method": contrib.get("shap_method"), "resolution": contrib["resolution"],
                  "contribution_cells": contrib["cells"]["explained"], "contribution_seconds": contrib["seconds"],
                  "contribution_cells_per_s": contrib["cells_per_second"]}
    map_json = run_dir / "maps" / best / "map.json"
    if map_json.is_file():
        m = json.loads(map_json.read_text())
        rate = m["cells"]["mapped"] / m["seconds"]["prediction"]
        throughput.update(map_cells=m["cells"]["mapped"], map_prediction_seconds=m["seconds"]["prediction"],
                          map_cells_per_s=round(rate, 1),
                          ratio=round(contrib["cells_per_second"] / rate, 5),
                          note="the map predicts potential, spread (every fold model) and applicability per cell; "
                               "contributions are the three layers' SHAP values per cell")
    print(json.dumps({
        "benchmark": "explanation stage of the demo run, five learners, default sizes",
        "stage_seconds": explain["seconds"], "seconds_ratio": round(explain["seconds"] / TARGET_SECONDS, 3),
        "per_learner_seconds": per, "per_learner_total_seconds": totals,
        "run_stage_seconds": manifest["seconds"], "contributions": throughput,
        "demo_seconds": None if demo_seconds is None else round(demo_seconds, 1), "cpu_count": os.cpu_count(),
    }))


if __name__ == "__main__":
    main()
