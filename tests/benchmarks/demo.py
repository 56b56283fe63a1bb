"""Wall time and memory of the whole demo, every stage (a benchmark, not a test).

Target (issue 11): the README's first command, ``mlsites demo``, finishes in under
5 minutes on 2 cores and under 2 GB of memory, from scratch: the demo folder is
laid out in a new temporary folder and the run uses ``--fresh`` (terrain layers and
samples recomputed, nothing taken from a cache), so it measures the samples, the
cross-validation of five learners, the models, maps, check on later-found sites,
explanations and period models where the run has them, and the report.
Run: ``python tests/benchmarks/demo.py [--jobs N] [--keep DIR]``.

Prints one JSON line: ``seconds`` (wall time of the whole command, interpreter
start included), ``peak_mb`` (largest resident set of any finished child process,
``getrusage(RUSAGE_CHILDREN)``), ``peak_tree_mb`` (largest sum of resident sets
over the command and its worker processes, sampled every 0.1 s from /proc, so a
short spike between samples can be missed), the ratios to the targets (below 1
meets them), the seconds per stage from the run's manifest, the stage folders the
run wrote, the CPU count and the load average when it started (other work on the
machine slows the demo down; quote the load with the numbers).
"""

import argparse
import json
import os
import resource
import subprocess
import sys
import threading
import time
from pathlib import Path

TARGET_SECONDS = 300.0
TARGET_MB = 2048.0
ROOT = Path(__file__).resolve().parents[2]


def _tree_rss_mb(pid):
    """Sum of VmRSS over ``pid`` and its descendants (Linux /proc), in MB."""
    children = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
                children.setdefault(int(fields[1]), []).append(int(entry.name))
            except (OSError, IndexError):
                continue
    total, todo = 0.0, [pid]
    while todo:
        p = todo.pop()
        todo += children.get(p, [])
        try:
            for line in Path(f"/proc/{p}/status").read_text().splitlines():
                if line.startswith("VmRSS:"):
                    total += int(line.split()[1]) / 1024.0
        except OSError:
            continue
    return total


def run_watched(cmd, env=None, interval=0.1):
    """Run ``cmd``; return (returncode, stderr, seconds, peak summed RSS of its process tree in MB)."""
    peak = [0.0]
    t0 = time.perf_counter()
    # the command's own table goes nowhere, so this script prints one JSON line only
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)

    def watch():
        while proc.poll() is None:
            peak[0] = max(peak[0], _tree_rss_mb(proc.pid))
            time.sleep(interval)

    watcher = threading.Thread(target=watch, daemon=True)
    watcher.start()
    _, stderr = proc.communicate()
    seconds = time.perf_counter() - t0
    watcher.join()
    return proc.returncode, stderr, seconds, peak[0]


def main():
    import tempfile

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=None, help="passed to mlsites demo --jobs")
    parser.add_argument("--keep", default=None, help="demo folder to keep (default: a temporary one)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="mlsites-demo-") as tmp:
        out = Path(args.keep) if args.keep else Path(tmp) / "demo"
        cmd = [sys.executable, "-m", "mlsites.cli", "demo", "--out", str(out), "--fresh", "--quiet"]
        if args.jobs:
            cmd += ["--jobs", str(args.jobs)]
        env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
        load = os.getloadavg()
        returncode, stderr, seconds, peak_tree = run_watched(cmd, env)
        if returncode != 0:
            sys.exit(f"demo failed with status {returncode}:\n{stderr[-2000:]}")
        peak_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
        run_dir = out / "runs" / "demo"
        manifest = json.loads((run_dir / "manifest.json").read_text())
        stages = sorted(p.name for p in run_dir.iterdir() if p.is_dir())
        print(json.dumps({
            "benchmark": "mlsites demo --fresh (every stage)",
            "seconds": round(seconds, 1), "peak_mb": round(peak_mb, 1), "peak_tree_mb": round(peak_tree, 1),
            "seconds_ratio": round(seconds / TARGET_SECONDS, 3),
            "memory_ratio": round(max(peak_mb, peak_tree) / TARGET_MB, 3),
            "stages": manifest.get("seconds"), "learners": manifest.get("learners"), "folders": stages,
            "report": (run_dir / "report.html").is_file(), "cpu_count": os.cpu_count(),
            "load_average_at_start": [round(v, 2) for v in load],
        }))


if __name__ == "__main__":
    main()
