"""Colours and map furniture of the report: ramps, zone and fold colours, scale bars.

Lightness and colour differences are measured in CAM02-UCS and colour-vision
deficiencies simulated (Machado et al. 2009, severity 100) with colorspacious,
the reference library for both.
"""

import itertools
import math

import numpy as np
import pytest
from matplotlib.colors import to_rgb

from mlsites.report._figures import nice_length
from mlsites.report._style import (
    CONTRIBUTION_RAMP,
    DISSIMILARITY_RAMP,
    FOLD_COLOURS,
    POTENTIAL_RAMP,
    SPREAD_RAMP,
    ramp_colormap,
    zone_palette,
)

cs = pytest.importorskip("colorspacious", reason="colorspacious (test extra) measures lightness and simulates "
                                                 "colour-vision deficiencies")
DEFICIENCIES = ("protanomaly", "deuteranomaly", "tritanomaly")
# CAM02-UCS distance two map colours keep at least, with any deficiency (common practice: about 10 units
# are told apart at a glance on a map; our fold colours are chosen for 15)
MIN_ZONE_DISTANCE = 10.0
MIN_FOLD_DISTANCE = 15.0


def _jab(rgb, deficiency=None):
    rgb = np.asarray(rgb, dtype=float)
    if deficiency is not None:
        rgb = np.clip(cs.cspace_convert(rgb, {"name": "sRGB1+CVD", "cvd_type": deficiency, "severity": 100},
                                        "sRGB1"), 0, 1)
    return cs.cspace_convert(rgb, "sRGB1", "CAM02-UCS")


def _lightness_along(colours, n=64):
    cmap = ramp_colormap(colours)
    rgb = cmap(np.linspace(0, 1, n))[:, :3]
    return _jab(rgb)[:, 0]


@pytest.mark.parametrize("ramp", [POTENTIAL_RAMP, SPREAD_RAMP, DISSIMILARITY_RAMP], ids=["potential", "spread",
                                                                                        "dissimilarity"])
@pytest.mark.parametrize("deficiency", [None, *DEFICIENCIES])
def test_sequential_ramps_fall_in_lightness(ramp, deficiency):
    # along the whole interpolated ramp, and seen with each deficiency, lightness only falls
    cmap = ramp_colormap(ramp)
    rgb = cmap(np.linspace(0, 1, 64))[:, :3]
    light = _jab(rgb, deficiency)[:, 0]
    assert np.all(np.diff(light) < 0)
    assert light[0] - light[-1] > 70  # light to dark: reads in greyscale too


def test_contribution_ramp_is_lightest_at_zero():
    light = _lightness_along(CONTRIBUTION_RAMP, n=65)
    mid = 32
    assert np.all(np.diff(light[: mid + 1]) > 0) and np.all(np.diff(light[mid:]) < 0)
    # the two signs differ in hue for every deficiency: blue against orange at equal distance from zero
    low, high = _jab(to_rgb(CONTRIBUTION_RAMP[1])), _jab(to_rgb(CONTRIBUTION_RAMP[-2]))
    for deficiency in DEFICIENCIES:
        a, b = _jab(to_rgb(CONTRIBUTION_RAMP[1]), deficiency), _jab(to_rgb(CONTRIBUTION_RAMP[-2]), deficiency)
        assert np.linalg.norm(a[1:] - b[1:]) > 20
    assert np.linalg.norm(low[1:] - high[1:]) > 20


@pytest.mark.parametrize("n_zones", [2, 3, 4, 5])
@pytest.mark.parametrize("deficiency", [None, *DEFICIENCIES])
def test_zone_colours_stay_apart_and_ordered(n_zones, deficiency):
    palette = zone_palette(n_zones)
    assert set(palette) == set(range(1, n_zones + 1)) | {255}
    jab = {code: _jab(rgba[:3], deficiency) for code, rgba in palette.items()}
    for a, b in itertools.combinations(jab, 2):
        assert np.linalg.norm(jab[a] - jab[b]) >= MIN_ZONE_DISTANCE, (a, b)
    # higher zones darker, whatever the colour vision
    light = [jab[c][0] for c in range(1, n_zones + 1)]
    assert all(x > y for x, y in zip(light, light[1:]))


@pytest.mark.parametrize("deficiency", [None, *DEFICIENCIES])
def test_fold_colours_stay_apart(deficiency):
    jab = [_jab(to_rgb(c), deficiency) for c in FOLD_COLOURS]
    distances = [np.linalg.norm(a - b) for a, b in itertools.combinations(jab, 2)]
    assert min(distances) >= MIN_FOLD_DISTANCE


@pytest.mark.parametrize("span", [1.0, 7.3, 250.0, 999.0, 6000.0, 43000.0, 1.2e6])
def test_scale_bar_lengths_are_round_and_fit(span):
    # a round length (1, 2 or 5 times a power of ten) between a tenth and a quarter of the map
    length = nice_length(span)
    mantissa = length / 10 ** math.floor(math.log10(length))
    assert min(abs(mantissa - m) for m in (1.0, 2.0, 5.0)) < 1e-9
    assert span / 10 < length <= span / 4 + 1e-9
