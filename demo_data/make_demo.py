"""Rebuild the fictional demo study in this folder (deterministic from the seed).

    python3 demo_data/make_demo.py [--out DIR]

Writes dem.tif (600 x 600 cells of 10 m), soil.tif (class codes with names in the
metadata), streams.gpkg (channel lines), sites.gpkg (invented site records drawn
from a known preference for gentle slopes near streams, recorded mostly inside
the walked strips) and survey.gpkg (the strips). The landscape, the sites and
their phases are invented; the CRS only gives the arrays a place to live.
"""

import argparse
import sys
from pathlib import Path

try:
    from mlsites.experiment._demo import DEMO_SETTINGS, write_demo_data
except ImportError:  # run from a source checkout without installing
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    from mlsites.experiment._demo import DEMO_SETTINGS, write_demo_data

if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(Path(__file__).resolve().parent), help="output folder")
    args = parser.parse_args()
    paths = write_demo_data(args.out, overwrite=True, **DEMO_SETTINGS)
    for name, path in paths.items():
        print(f"{name}: {path}")
