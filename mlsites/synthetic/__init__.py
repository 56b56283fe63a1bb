"""Fictional landscapes and virtual site records for tests, benchmarks and the demo."""

from mlsites.synthetic._landscape import (
    SOIL_CLASSES,
    ZONE_CLASSES,
    Landscape,
    fractal_relief,
    make_landscape,
    write_landscape_dem,
)

__all__ = [
    "SOIL_CLASSES",
    "ZONE_CLASSES",
    "Landscape",
    "fractal_relief",
    "make_landscape",
    "write_landscape_dem",
]
