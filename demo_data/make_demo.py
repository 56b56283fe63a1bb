"""Rebuild the fictional demo study in this folder (deterministic from the seed).

    python3 demo_data/make_demo.py [--out DIR]

Writes, for an invented river valley:

- dem.tif: elevation of the study area, 600 x 600 cells of 10 m (6 x 6 km);
- soil.tif: soil class codes with their names in the metadata, and
  streams.gpkg: the mapped channel lines, both covering the study area and its
  neighbour;
- sites.gpkg: invented site records of five invented phases, placed by known
  preferences that shift over time (early phases near the water, late phases on
  high convex ground), recorded mostly inside the walked strips;
- survey.gpkg: the walked strips;
- later_sites.gpkg: sites nobody recorded, "found later", most of them outside
  the strips (for the external check, [check] sites);
- truth.tif: the true preference surface the sites were drawn from (0-1), for
  the report's comparison ([report] reference_surface);
- neighbour_dem.tif: the DEM of the neighbouring stretch of the valley east of
  the study area (4 x 6 km, overlapping it by 1 km), for mapping a model on a
  new area (mlsites map CARD --dem).

The landscape, the sites and their phases are invented; the CRS only gives the
arrays a place to live.
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
