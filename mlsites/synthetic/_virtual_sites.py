"""Virtual site records: fictional sites placed by a known preference surface.

The generator is the project's ground truth for honest testing: sites are drawn
from a preference function of terrain layers that we choose, so any model can be
compared with the truth. Records are clustered (settlements come in groups) and
survey-biased (records concentrate in the strips that were walked), as real
records are, and carry invented date ranges over invented phases.
"""

from __future__ import annotations

from dataclasses import dataclass

import geopandas as gpd
import numpy as np
from shapely.geometry import box
from shapely.affinity import rotate

from mlsites._validation import check_cell_pair
from mlsites.errors import InputError
from mlsites.grid import GridSpec

__all__ = ["PHASES", "DEFAULT_PREFERENCE", "VirtualSites", "preference_surface", "make_virtual_sites"]

#: Invented phases of a fictional chronology: name -> [start, end) years (negative = BCE).
PHASES = {
    "Reedbank phase": (-3200, -2500),
    "Tallow Hill phase": (-2500, -1700),
    "Copperlane phase": (-1700, -900),
    "Quernstone phase": (-900, -100),
    "Lantern Road phase": (-100, 500),
}

#: Default preference: layer -> (kind, parameters). Log-intensity terms that add up.
#: "near": exp(-value / scale); "below": logistic fall above a threshold;
#: "linear": coefficient * value; "category": log-weight per class code.
DEFAULT_PREFERENCE = {
    "stream_distance": ("near", {"scale_m": 250.0, "weight": 2.5}),
    "slope": ("below", {"threshold": 8.0, "width": 2.0, "weight": 2.0}),
    "northness": ("linear", {"coefficient": -0.8}),
    "tpi": ("linear", {"coefficient": 0.08}),
}


@dataclass(frozen=True)
class VirtualSites:
    """Result of :func:`make_virtual_sites`.

    Attributes
    ----------
    sites : GeoDataFrame
        The recorded sites (after survey bias): ``site_id``, ``start_year``,
        ``end_year``, ``phase``, ``kind``, ``certainty``, point geometry.
    all_sites : GeoDataFrame
        Every site placed, recorded or not, with a ``recorded`` column.
    truth : ndarray of float64
        The true preference surface (relative intensity, max 1, NaN off the study area).
    survey : GeoDataFrame
        Surveyed strips (polygons) with an ``effort`` column.
    """

    sites: gpd.GeoDataFrame
    all_sites: gpd.GeoDataFrame
    truth: np.ndarray
    survey: gpd.GeoDataFrame


def preference_surface(layers: dict, preference: dict | None = None) -> np.ndarray:
    """Relative site intensity from layer arrays (max 1; NaN where any layer is NaN).

    Parameters
    ----------
    layers : dict of str to ndarray
        Layer arrays of one grid shape; must hold every layer ``preference`` names.
    preference : dict, optional
        Terms as in :data:`DEFAULT_PREFERENCE`.
    """
    preference = DEFAULT_PREFERENCE if preference is None else preference
    log_i = None
    for name, (kind, p) in preference.items():
        if name not in layers:
            raise InputError(f"preference names layer {name!r}, not among {sorted(layers)}")
        v = np.asarray(layers[name], dtype=np.float64)
        if kind == "near":
            term = -p["weight"] * (1.0 - np.exp(-v / p["scale_m"]))
        elif kind == "below":
            term = -p["weight"] / (1.0 + np.exp(-(v - p["threshold"]) / p["width"]))
        elif kind == "linear":
            term = p["coefficient"] * v
        elif kind == "category":
            term = np.vectorize(lambda c: p["log_weights"].get(int(c), 0.0) if c == c else np.nan,
                                otypes=[float])(v)
        else:
            raise InputError(f"unknown preference term kind {kind!r} for layer {name!r}")
        log_i = term if log_i is None else log_i + term
    return np.exp(log_i - np.nanmax(log_i))


def _survey_strips(grid: GridSpec, rng, n_strips, strip_width_m, coverage_effort):
    left, bottom, right, top = grid.bounds
    diag = float(np.hypot(right - left, top - bottom))
    strips, effort = [], []
    for _ in range(n_strips):
        cx, cy = rng.uniform(left, right), rng.uniform(bottom, top)
        angle = rng.uniform(0, 180)
        g = rotate(box(cx - diag / 2, cy - strip_width_m / 2, cx + diag / 2, cy + strip_width_m / 2),
                   angle, origin=(cx, cy))
        strips.append(g.intersection(box(left, bottom, right, top)))
        effort.append(float(rng.choice(coverage_effort)))
    return gpd.GeoDataFrame({"strip": np.arange(n_strips), "effort": effort}, geometry=strips, crs=grid.crs)


def make_virtual_sites(layers: dict, grid: GridSpec, *, n_sites: int = 300, preference=None,
                       cluster_size: float = 3.0, cluster_radius_m: float = 150.0,
                       n_survey_strips: int = 6, strip_width_m: float = 600.0,
                       detect_inside: float = 0.85, detect_outside: float = 0.05,
                       random_state=0) -> VirtualSites:
    """Place fictional sites by a known preference surface, clustered and survey-biased.

    Parameters
    ----------
    layers : dict of str to ndarray
        Layers the preference uses (grid shape; NaN = off the study area).
    grid : GridSpec
    n_sites : int
        Sites placed before survey bias (parents and their offspring).
    preference : dict, optional
        Log-intensity terms (see :data:`DEFAULT_PREFERENCE`).
    cluster_size : float
        Mean number of sites per cluster (1 = no clustering).
    cluster_radius_m : float
        Standard deviation of offspring displacement around a cluster centre.
    n_survey_strips, strip_width_m : int, float
        Surveyed strips: random straight bands across the study area.
    detect_inside, detect_outside : float
        Probability that a site inside / outside the surveyed strips is recorded.
    random_state : int or numpy Generator

    Returns
    -------
    VirtualSites

    Notes
    -----
    Cluster centres are drawn from the cells with probability proportional to the
    truth surface; offspring are displaced by an isotropic Gaussian and kept with
    probability equal to the truth at their cell (a thinned Thomas process), so the
    intensity of all sites follows the truth while sites cluster. Dates: each site
    gets an invented phase; one in three is dated only to a span of two adjacent
    phases (uncertain dating).
    """
    rng = np.random.default_rng(random_state)
    truth = preference_surface(layers, preference)
    if truth.shape != grid.shape:
        raise InputError(f"layers have shape {truth.shape}, the grid {grid.shape}")
    flat = np.nan_to_num(truth, nan=0.0).ravel()
    if flat.sum() <= 0:
        raise InputError("the preference surface is zero everywhere; check the layers")
    p = flat / flat.sum()
    rows, cols, cluster = [], [], []
    res = np.array(grid.res)  # CRS units, for the jitter within a cell
    metres = np.array(check_cell_pair(grid.cellsize()))  # (dx, dy) in metres, for the cluster radius
    n_clusters = 0
    while len(rows) < n_sites:
        centre = rng.choice(flat.size, p=p)
        r0, c0 = divmod(int(centre), grid.width)
        n_off = max(1, rng.poisson(cluster_size))
        for k in range(n_off):
            if k == 0:
                r, c = r0, c0
            else:
                dr, dc = rng.normal(0.0, cluster_radius_m, 2) / metres[::-1]
                r, c = int(round(r0 + dr)), int(round(c0 + dc))
                if not grid.contains(r, c):
                    continue
                if rng.random() >= np.nan_to_num(truth[r, c]):
                    continue
            rows.append(r)
            cols.append(c)
            cluster.append(n_clusters)
            if len(rows) == n_sites:
                break
        n_clusters += 1
    rows, cols = np.array(rows), np.array(cols)
    x, y = grid.xy(rows, cols)
    # Jitter within the cell so sites are points, not cell centres.
    x = x + rng.uniform(-0.5, 0.5, x.size) * res[0]
    y = y + rng.uniform(-0.5, 0.5, y.size) * res[1]
    survey = _survey_strips(grid, rng, n_survey_strips, strip_width_m, (1.0, 2.0, 3.0))
    pts = gpd.GeoSeries(gpd.points_from_xy(x, y), crs=grid.crs)
    inside = pts.within(survey.union_all()).to_numpy()
    recorded = rng.random(x.size) < np.where(inside, detect_inside, detect_outside)
    names = list(PHASES)
    phase_idx = rng.integers(0, len(names), x.size)
    span2 = (rng.random(x.size) < 1 / 3) & (phase_idx < len(names) - 1)
    start = np.array([PHASES[names[i]][0] for i in phase_idx], dtype=float)
    end = np.array([PHASES[names[i + s]][1] for i, s in zip(phase_idx, span2.astype(int))], dtype=float)
    phase = [names[i] if not s else f"{names[i]} to {names[i + 1]}" for i, s in zip(phase_idx, span2)]
    kinds = rng.choice(["settlement", "burial mound", "find scatter", "enclosure"], x.size, p=[0.4, 0.2, 0.3, 0.1])
    certainty = rng.choice(["certain", "probable", "possible"], x.size, p=[0.5, 0.3, 0.2])
    all_sites = gpd.GeoDataFrame(
        {
            "site_id": [f"VS{i:04d}" for i in range(x.size)],
            "start_year": start,
            "end_year": end,
            "phase": phase,
            "kind": kinds,
            "certainty": certainty,
            "cluster": cluster,
            "in_survey": inside,
            "recorded": recorded,
        },
        geometry=pts.to_numpy(),
        crs=grid.crs,
    )
    sites = all_sites[all_sites["recorded"]].drop(columns=["recorded", "cluster", "in_survey"]).reset_index(drop=True)
    return VirtualSites(sites=sites, all_sites=all_sites, truth=truth, survey=survey)
