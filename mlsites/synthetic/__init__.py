"""Fictional landscapes and virtual site records for tests, benchmarks and the demo."""

from mlsites.synthetic._landscape import (
    SOIL_CLASSES,
    ZONE_CLASSES,
    Landscape,
    fractal_relief,
    make_landscape,
    write_landscape_dem,
)
from mlsites.synthetic._phases import (
    PHASE_PREFERENCES,
    PHASED_CATEGORIES,
    TWO_PHASES,
    PhasedSites,
    make_phased_sites,
)
from mlsites.synthetic._virtual_sites import (
    DEFAULT_PREFERENCE,
    PHASES,
    VirtualSites,
    make_virtual_sites,
    preference_surface,
)

__all__ = [
    "SOIL_CLASSES",
    "ZONE_CLASSES",
    "Landscape",
    "fractal_relief",
    "make_landscape",
    "write_landscape_dem",
    "DEFAULT_PREFERENCE",
    "PHASES",
    "VirtualSites",
    "make_virtual_sites",
    "preference_surface",
    "TWO_PHASES",
    "PHASE_PREFERENCES",
    "PHASED_CATEGORIES",
    "PhasedSites",
    "make_phased_sites",
]
