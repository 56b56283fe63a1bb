"""Colours of the report's maps: ramps, zone colours and fold colours of our own.

Every sequential ramp runs light to dark with its lightness falling steadily, so
its order reads the same for the common colour-vision deficiencies and in
greyscale (tests check the lightness in CAM02-UCS and simulated deficiencies).
The zone colours are those written into ``zones.tif``
(:func:`mlsites.mapping.zone_colours`), so the report and a GIS show one legend.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "POTENTIAL_RAMP",
    "SPREAD_RAMP",
    "DISSIMILARITY_RAMP",
    "CONTRIBUTION_RAMP",
    "FOLD_COLOURS",
    "SITE_COLOUR",
    "ramp_colormap",
    "zone_palette",
]

#: Potential (and percentile) maps: pale sand to near-black brown.
POTENTIAL_RAMP = ("#fbf6e4", "#f0dc9a", "#dcb15c", "#bf8038", "#955224", "#632f17", "#34180c")
#: Spread of the fold models: pale grey-green to deep teal.
SPREAD_RAMP = ("#f3f6f4", "#cfe3dc", "#9cc8bb", "#64a596", "#35806f", "#165a4c", "#073a30")
#: Dissimilarity index: pale lilac to deep indigo.
DISSIMILARITY_RAMP = ("#f6f4f8", "#d9d3e6", "#b3a8cf", "#8a7bb5", "#63519a", "#3f2f78", "#21164f")
#: Contributions (SHAP values): blue below zero, orange above, lightest at zero.
CONTRIBUTION_RAMP = ("#1d4f7a", "#5f8fbd", "#b3cde3", "#f5f2ec", "#f2c08f", "#d6813e", "#8f4513")
#: Folds of the block map, chosen so that every pair stays apart (CAM02-UCS distance
#: of at least 15) with simulated protan, deutan and tritan vision; blocks also carry
#: their fold number, so more folds than colours still read.
FOLD_COLOURS = ("#e8a23c", "#12355b", "#9ec9e8", "#7a7a2a", "#6b5ca5", "#f0c9b0", "#4f9d9a", "#454545")
#: Site symbols (squares of generalised sites, or points with ``show_sites``).
SITE_COLOUR = "#0b2a45"


def ramp_colormap(colours, name="mlsites_ramp", *, bad_alpha=0.0):
    """A matplotlib colormap interpolating ``colours``; NaN transparent."""
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list(name, list(colours), N=256).with_extremes(bad=(0, 0, 0, bad_alpha))


def zone_palette(n_zones: int) -> dict:
    """Zone code -> matplotlib RGBA (0..1) for codes 1..n_zones and 255 (outside).

    The colours of :func:`mlsites.mapping.zone_colours`, the colour table of
    ``zones.tif``.
    """
    from mlsites.mapping import zone_colours

    return {code: tuple(np.asarray(rgba, dtype=float) / 255.0) for code, rgba in zone_colours(n_zones).items()
            if code != 0}
