"""Virtual sites of two invented phases whose settlement preferences differ.

The earlier phase keeps to low ground near the streams (low terraces by the
water), the later one to high, convex ground (spurs and crests). Both are placed
by known preference surfaces with :func:`make_virtual_sites`, then dated the way
surface finds are: some records only to a phase, some to its early or late half,
some only to the span of both phases. A per-period model should find a different
leading layer in each phase; the truth is kept for checking.
"""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pandas as pd

from mlsites.errors import InputError
from mlsites.grid import GridSpec
from mlsites.synthetic._virtual_sites import make_virtual_sites

__all__ = ["TWO_PHASES", "PHASE_PREFERENCES", "PHASED_CATEGORIES", "PhasedSites", "make_phased_sites"]

#: Invented phases of a fictional chronology: name -> [start, end) years.
TWO_PHASES = {"Mirewalk phase": (-2600.0, -1800.0), "Spurfire phase": (-1800.0, -1000.0)}
#: Preference of each phase (terms as in DEFAULT_PREFERENCE): near water vs. high spurs.
PHASE_PREFERENCES = {
    "Mirewalk phase": {
        "stream_distance": ("near", {"scale_m": 150.0, "weight": 4.0}),
        "slope": ("below", {"threshold": 6.0, "width": 1.5, "weight": 1.0}),
    },
    "Spurfire phase": {
        "tpi": ("linear", {"coefficient": 0.25}),
        "slope": ("below", {"threshold": 15.0, "width": 2.0, "weight": 1.0}),
    },
}
#: Dating categories of the records -> [start, end) years (a table for [periods.categories]).
PHASED_CATEGORIES = {
    "Mirewalk phase": (-2600.0, -1800.0),
    "early Mirewalk": (-2600.0, -2200.0),
    "late Mirewalk": (-2200.0, -1800.0),
    "Spurfire phase": (-1800.0, -1000.0),
    "early Spurfire": (-1800.0, -1400.0),
    "late Spurfire": (-1400.0, -1000.0),
    "Mirewalk to Spurfire": (-2600.0, -1000.0),
}
#: How records are dated: to the whole phase, to its half holding the true date, to both phases.
_DATING_SHARES = (0.4, 0.35, 0.25)


@dataclass(frozen=True)
class PhasedSites:
    """Result of :func:`make_phased_sites`.

    Attributes
    ----------
    sites : GeoDataFrame
        ``site_id``, ``phase`` (true phase), ``true_year``, ``dating`` (the
        recorded category, a key of :data:`PHASED_CATEGORIES`), ``start_year``,
        ``end_year`` (the category's range), point geometry.
    truth : dict of str to ndarray
        Preference surface of each phase (max 1, NaN off the study area).
    """

    sites: gpd.GeoDataFrame
    truth: dict


def make_phased_sites(layers: dict, grid: GridSpec, *, n_sites: int = 300, share_early: float = 0.5,
                      cluster_size: float = 2.0, cluster_radius_m: float = 100.0, random_state=0) -> PhasedSites:
    """Place fictional sites of two phases with different preferences, with uncertain dates.

    Parameters
    ----------
    layers : dict of str to ndarray
        Must hold ``stream_distance`` (m), ``slope`` (degrees) and ``tpi`` (m)
        on the grid (NaN off the study area).
    grid : GridSpec
    n_sites : int, default 300
        Sites of both phases together.
    share_early : float, default 0.5
        Share of the sites in the earlier phase.
    cluster_size, cluster_radius_m : float
        Clustering, as in :func:`make_virtual_sites`.
    random_state : int or numpy Generator

    Returns
    -------
    PhasedSites

    Notes
    -----
    Every site placed is recorded (no survey bias), so the two phases differ
    only in their preferences and numbers. A site's true year is uniform within
    its phase; its record names the whole phase (40 %), the half of the phase
    holding the true year (35 %), or only the span of both phases (25 %).
    """
    if not 0 < share_early < 1:
        raise InputError(f"share_early {share_early!r}; expected a share in (0, 1)")
    if n_sites < 2:
        raise InputError(f"n_sites {n_sites!r}; expected at least 2")
    rng = np.random.default_rng(random_state)
    names = list(TWO_PHASES)
    counts = {names[0]: max(1, round(n_sites * share_early))}
    counts[names[1]] = max(1, n_sites - counts[names[0]])
    frames, truth = [], {}
    for name in names:
        seed = int(rng.integers(0, 2**63 - 1))
        placed = make_virtual_sites(layers, grid, n_sites=counts[name], preference=PHASE_PREFERENCES[name],
                                    cluster_size=cluster_size, cluster_radius_m=cluster_radius_m,
                                    n_survey_strips=1, detect_inside=1.0, detect_outside=1.0, random_state=seed)
        truth[name] = placed.truth
        a, b = TWO_PHASES[name]
        year = rng.uniform(a, b, len(placed.sites))
        how = rng.choice(3, len(placed.sites), p=_DATING_SHARES)
        word = name.split()[0]
        half = np.where(year < 0.5 * (a + b), f"early {word}", f"late {word}")
        dating = np.where(how == 0, name, np.where(how == 1, half, "Mirewalk to Spurfire"))
        frames.append(pd.DataFrame({"phase": name, "true_year": year, "dating": dating,
                                    "geometry": placed.sites.geometry.to_numpy()}))
    table = pd.concat(frames, ignore_index=True)
    table.insert(0, "site_id", [f"PH{i:04d}" for i in range(len(table))])
    table["start_year"] = [PHASED_CATEGORIES[d][0] for d in table["dating"]]
    table["end_year"] = [PHASED_CATEGORIES[d][1] for d in table["dating"]]
    sites = gpd.GeoDataFrame(table, geometry="geometry", crs=grid.crs)
    return PhasedSites(sites=sites[["site_id", "phase", "true_year", "dating", "start_year", "end_year",
                                    "geometry"]], truth=truth)
