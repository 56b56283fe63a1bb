"""Time and size of the run report on the demo (a benchmark, not a test).

Target: the report of the demo run builds in seconds and stays small (a few MB),
whatever the grid size, because maps are drawn from rasters read at most 600
cells per side. Run: ``python tests/benchmarks/report.py [--run RUN_DIR]
[--screenshot PNG]``. Without ``--run`` the demo is run first into a temporary
folder (``mlsites demo``, a few minutes) and its periods written into the run
folder, as the run's periods stage does. ``--screenshot`` saves the top of the
report as seen in headless Chromium (docs/report.png is made this way).

Prints one JSON line: ``seconds`` (building the report in a fresh interpreter,
imports included), ``seconds_in_process`` (as the run's last stage sees it,
libraries already imported), ``size_mb``, ``images``, the sections drawn and left
out, and the CPU count.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))


def _demo_run(folder):
    subprocess.run([sys.executable, "-m", "mlsites.cli", "demo", "--out", str(folder), "--quiet"], check=True,
                   cwd=ROOT, stdout=subprocess.DEVNULL)
    run_dir = folder / "runs" / "demo"
    if not (run_dir / "periods").exists():
        from mlsites.periods import run_periods

        run_periods(folder / "experiments" / "demo.toml", out_dir=run_dir / "periods", quiet=True)
    return run_dir


def _screenshot(page, path, tmp, width=1100):
    """The report's top (title, caution, contents, at a glance) above its potential map."""
    from PIL import Image

    from tests.report.browser import probe, screenshot

    found, _ = probe(page, tmp, width=width)
    sections = {s["id"]: s for s in found["sections"]}
    top_end = int(sections["study"]["top"])
    maps = sections["maps"]
    height = int(maps["top"] + maps["height"]) + 10
    shot = screenshot(page, tmp / "shot.png", tmp, width=width, height=height)
    with Image.open(shot) as im:
        im = im.convert("RGB")
        head = im.crop((0, 0, width, top_end))
        body = im.crop((0, int(maps["top"]), width, int(maps["top"]) + min(int(maps["height"]), 760)))
        canvas = Image.new("RGB", (width, head.height + body.height), "white")
        canvas.paste(head, (0, 0))
        canvas.paste(body, (0, head.height))
        canvas.quantize(256).save(path, optimize=True)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--run", type=Path, help="an existing run folder (default: run the demo first)")
    parser.add_argument("--screenshot", type=Path, help="save the top of the report as a PNG (needs chromium)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        run_dir = args.run if args.run is not None else _demo_run(Path(tmp) / "demo")
        out = Path(tmp) / "report.html"
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "mlsites.cli", "report", str(run_dir), "--out", str(out), "--quiet"],
                       check=True, cwd=ROOT, stdout=subprocess.DEVNULL)
        seconds = time.perf_counter() - t0
        from mlsites.report import build_report

        build_report(run_dir, out=out, fresh=True)  # imports done; the timed build below is the run's case
        result = build_report(run_dir, out=out, fresh=True)
        text = out.read_text()
        if args.screenshot is not None:
            _screenshot(out, args.screenshot, Path(tmp))
        print(json.dumps({"seconds": round(seconds, 2), "seconds_in_process": round(result.seconds, 2),
                          "size_mb": round(result.size_bytes / 1e6, 2), "images": text.count("data:image/png"),
                          "sections": result.sections, "left_out": sorted(result.absent),
                          "cpus": os.cpu_count()}))


if __name__ == "__main__":
    main()
