"""Potential zones: thresholds from site-share targets, zone codes and zone measures.

A potential surface becomes zones by thresholds on its score, from the top: a cell
with ``score >= t_1`` is in the first zone (e.g. "high"), ``t_2 <= score < t_1`` in the
second ("medium"), and everything below the last threshold in the remainder zone
("low"). Thresholds are chosen from targets on the cumulative share of sites each
zone must hold, so the map says "the high zone holds 70 % of the known sites in the
least possible area".
"""

from collections.abc import Mapping

import numpy as np
import pandas as pd

from mlsites.errors import InputError
from mlsites.evaluation._metrics import _check_scores, _check_shares, kvamme_gain

__all__ = [
    "zone_thresholds",
    "assign_zones",
    "zone_table",
    "relative_site_density",
    "zone_gains",
    "zone_density_gini",
    "NODATA_ZONE",
]

#: Zone code for cells whose score is NaN (nodata) in :func:`assign_zones`.
NODATA_ZONE = 0

# A cumulative site share counts as reaching its target up to this rounding error.
_TARGET_TOL = 1e-12
# Zone shares must sum to 1 within this tolerance (shares read from a table).
_SUM_TOL = 1e-6


def _check_targets(targets, remainder):
    """Return targets as a list of (name, share) pairs after checking them."""
    if not isinstance(targets, Mapping) or len(targets) == 0:
        raise InputError(
            f"targets={targets!r}; expected a non-empty mapping of zone name to cumulative "
            f"site share, from the top, e.g. {{'high': 0.70, 'medium': 0.90}}."
        )
    items = list(targets.items())
    previous = 0.0
    for name, share in items:
        if not isinstance(name, str) or not name or name == remainder:
            raise InputError(
                f"zone name {name!r} in targets; expected a non-empty string other than "
                f"{remainder!r}, the remainder zone below the last threshold (rename the zone "
                f"or pass remainder=...)."
            )
        try:
            value = float(share)
        except (TypeError, ValueError):
            value = float("nan")
        if not (0 < value <= 1):
            raise InputError(
                f"target {name!r}: {share!r}; expected a cumulative share of sites in (0, 1], "
                f"e.g. 0.70 for 70 % (not a percentage)."
            )
        if value <= previous:
            raise InputError(
                f"target {name!r}: {value} does not exceed the zone above it ({previous}); "
                f"targets are cumulative from the top, so list them in increasing order."
            )
        previous = value
    return [(name, float(share)) for name, share in items]


def _check_thresholds(thresholds):
    """Return (names or None, thresholds as a descending float array)."""
    if isinstance(thresholds, Mapping):
        names = [str(k) for k in thresholds]
        values = np.asarray(list(thresholds.values()), dtype=np.float64)
    else:
        names = None
        values = np.atleast_1d(np.asarray(thresholds, dtype=np.float64))
    if values.ndim != 1 or values.size == 0 or not np.all(np.isfinite(values)):
        raise InputError(
            f"thresholds={values.tolist()}; expected at least one finite threshold, "
            f"from the top zone down."
        )
    if values.size > 254:
        raise InputError(f"{values.size} thresholds given; at most 254 zones fit in the uint8 codes.")
    if np.any(np.diff(values) > 0):
        raise InputError(
            f"thresholds={values.tolist()} rise; expected them from the top zone down, "
            f"each no higher than the one before."
        )
    return names, values


def zone_thresholds(site_scores, *, targets, site_weight=None, remainder="low"):
    """Thresholds that give each zone its target share of sites in the least area.

    Parameters
    ----------
    site_scores : array-like of shape (n_sites,)
        Predicted potential at the sites used to set the zones (for a map, the
        training sites; for a test, the held-out sites of a fold).
    targets : mapping of str to float
        Zone name to the cumulative share of sites, in (0, 1], that this zone and all
        zones above it must hold, from the top and strictly increasing, e.g.
        ``{"high": 0.70, "medium": 0.90}``.
    site_weight : array-like of shape (n_sites,), optional
        Non-negative weights (e.g. ``1 / n_cells`` per presence cell); default 1.
    remainder : str, default "low"
        Name of the zone below the last threshold; not allowed in ``targets``.

    Returns
    -------
    dict of str to float
        Zone name to its lower threshold (score units), in the order of ``targets``;
        thresholds never rise from one zone to the next.

    Raises
    ------
    InputError
        Targets not a mapping, outside (0, 1], not increasing, or named like the
        remainder; NaN scores.

    Notes
    -----
    For each target the threshold is the highest score t for which the weighted
    share of sites with ``score >= t`` reaches the target (up to rounding of 1e-12).
    A higher threshold can only shrink the zone's area, so this is the least-area
    choice; it is always one of the site scores. Sites tied at t all fall in the
    zone, so the zone may hold more than its target, and two zones get the same
    threshold (the lower one then empty) when one group of ties crosses both targets.
    The landscape plays no part in the choice; :func:`zone_table` reports the area.

    Examples
    --------
    >>> zone_thresholds([0.9, 0.8, 0.7, 0.3, 0.1], targets={"high": 0.6, "medium": 0.8})
    {'high': 0.7, 'medium': 0.3}
    """
    items = _check_targets(targets, remainder)
    s, w = _check_scores(site_scores, "site_scores", site_weight, "site_weight")
    neg_levels, inverse = np.unique(-s, return_inverse=True)
    cum = np.cumsum(np.bincount(inverse, weights=w, minlength=neg_levels.size))
    share = cum / cum[-1]
    out = {}
    for name, target in items:
        k = int(np.argmax(share >= target - _TARGET_TOL))
        out[name] = float(0.0 - neg_levels[k])
    return out


def assign_zones(scores, thresholds):
    """Zone code of each score: ``n_thresholds + 1`` for the top zone down to 1.

    Parameters
    ----------
    scores : array-like of any shape
        Predicted potential, e.g. a raster band; NaN marks nodata.
    thresholds : mapping of str to float or sequence of float
        Lower thresholds of the zones from the top down, as returned by
        :func:`zone_thresholds`.

    Returns
    -------
    numpy.ndarray of uint8, same shape as ``scores``
        With two thresholds (high, medium): 3 = high, 2 = medium, 1 = low (the
        remainder), and ``NODATA_ZONE`` = 0 where the score is NaN.

    Notes
    -----
    A score equal to a threshold belongs to the zone above it (``score >= t``). The
    codes are this package's own; a higher code always means a higher zone.

    Examples
    --------
    >>> assign_zones([0.95, 0.7, 0.5, 0.1, float("nan")], {"high": 0.7, "medium": 0.3})
    array([3, 3, 2, 1, 0], dtype=uint8)
    """
    _, values = _check_thresholds(thresholds)
    arr = np.asarray(scores, dtype=np.float64)
    ascending = values[::-1]
    codes = 1 + np.searchsorted(ascending, np.where(np.isnan(arr), -np.inf, arr), side="right")
    codes = np.where(np.isnan(arr), NODATA_ZONE, codes)
    return codes.astype(np.uint8)


def zone_table(
    site_scores,
    landscape_scores,
    thresholds,
    *,
    site_weight=None,
    landscape_weight=None,
    remainder="low",
):
    """Area share, site share, density ratio and gain of each zone.

    Parameters
    ----------
    site_scores, landscape_scores : array-like of shape (n,)
        Predicted potential at (held-out) sites and at landscape cells.
    thresholds : mapping of str to float
        Zone name to lower threshold, from the top down (see :func:`zone_thresholds`).
    site_weight, landscape_weight : array-like, optional
        Non-negative weights, one per score; default 1.
    remainder : str, default "low"
        Name of the zone below the last threshold.

    Returns
    -------
    pandas.DataFrame
        One row per zone from the top down, the remainder last, with columns
        ``zone``, ``lower_threshold`` and ``upper_threshold`` (the zone holds
        ``lower <= score < upper``; ``-inf`` and ``inf`` at the ends),
        ``area_share``, ``site_share``, ``site_density_ratio`` (Kj, see
        :func:`relative_site_density`), ``gain`` (per zone, ``1 - 1/Kj``),
        ``cumulative_area_share``, ``cumulative_site_share`` and ``cumulative_gain``
        (Kvamme's gain of this zone together with all zones above it). Area and site
        shares each sum to 1.
    """
    if not isinstance(thresholds, Mapping):
        raise InputError(
            f"thresholds={thresholds!r}; expected a mapping of zone name to threshold, "
            f"as returned by zone_thresholds."
        )
    names, values = _check_thresholds(thresholds)
    if remainder in names:
        raise InputError(f"zone name {remainder!r} is also the remainder; rename it or pass remainder=...")
    s, sw = _check_scores(site_scores, "site_scores", site_weight, "site_weight")
    land, lw = _check_scores(landscape_scores, "landscape_scores", landscape_weight, "landscape_weight")
    n_zones = values.size + 1
    site_share = _zone_shares(assign_zones(s, values), sw, n_zones)
    area_share = _zone_shares(assign_zones(land, values), lw, n_zones)
    cum_site = np.minimum(np.cumsum(site_share), 1.0)
    cum_area = np.minimum(np.cumsum(area_share), 1.0)
    return pd.DataFrame(
        {
            "zone": names + [remainder],
            "lower_threshold": np.concatenate((values, [-np.inf])),
            "upper_threshold": np.concatenate(([np.inf], values)),
            "area_share": area_share,
            "site_share": site_share,
            "site_density_ratio": relative_site_density(site_share, area_share),
            "gain": zone_gains(site_share, area_share),
            "cumulative_area_share": cum_area,
            "cumulative_site_share": cum_site,
            "cumulative_gain": kvamme_gain(cum_site, cum_area),
        }
    )


def _zone_shares(codes, weights, n_zones):
    """Share of the total weight in each zone, from the top zone down.

    ``codes`` are zone codes from :func:`assign_zones` (``n_zones`` at the top ..
    1; 0 = nodata is ignored). Shares are divided by the sum of the zone totals
    themselves (summing the weights in another order can put a share a few ulps
    above 1) and clipped to [0, 1].
    """
    totals = np.bincount(codes, weights=weights, minlength=n_zones + 1)[:0:-1]
    return np.clip(totals / totals.sum(), 0.0, 1.0)


def _check_zone_shares(site_shares, area_shares):
    ps = _check_shares(site_shares, "site_shares")
    pa = _check_shares(area_shares, "area_shares")
    if ps.ndim != 1 or ps.shape != pa.shape or ps.size == 0:
        raise InputError(
            f"site_shares has shape {ps.shape} and area_shares {pa.shape}; expected two "
            f"1-D arrays with one share per zone."
        )
    return ps, pa


def relative_site_density(site_shares, area_shares):
    """Relative site density Kj = site share / area share of each zone.

    Parameters
    ----------
    site_shares : array-like of shape (n_zones,)
        Share of sites in each zone, in [0, 1].
    area_shares : array-like of shape (n_zones,)
        Share of the area in each zone, in [0, 1].

    Returns
    -------
    numpy.ndarray of shape (n_zones,)
        Kj; 1 = density as expected by chance. ``inf`` where a zone has sites but no
        area, NaN where it has neither.

    Notes
    -----
    The gain of a single zone is ``1 - 1/Kj`` (:func:`zone_gains`).

    References
    ----------
    Deeben, J., Hallewas, D.P. & Maarleveld, Th.J. (1997), as described by Verhagen,
    P. (2007), Case Studies in Archaeological Predictive Modelling (not checked
    against the original).

    Examples
    --------
    >>> relative_site_density([0.5, 0.3, 0.2], [0.1, 0.3, 0.6]).round(4).tolist()
    [5.0, 1.0, 0.3333]
    """
    ps, pa = _check_zone_shares(site_shares, area_shares)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(pa > 0, ps / np.where(pa > 0, pa, 1.0), np.where(ps > 0, np.inf, np.nan))


def zone_gains(site_shares, area_shares, *, cumulative=False):
    """Kvamme's gain of each zone, or of each zone together with the zones above it.

    Parameters
    ----------
    site_shares, area_shares : array-like of shape (n_zones,)
        Shares of sites and of area per zone, ordered from the highest zone down.
    cumulative : bool, default False
        If True, the gain of zones 1..j together (cumulative shares from the top).

    Returns
    -------
    numpy.ndarray of shape (n_zones,)
        ``1 - area/site`` per zone (``1 - 1/Kj``) or cumulatively; NaN where the
        site share is 0.

    Examples
    --------
    >>> zone_gains([0.5, 0.3, 0.2], [0.1, 0.3, 0.6], cumulative=True).round(4).tolist()
    [0.8, 0.5, 0.0]
    """
    ps, pa = _check_zone_shares(site_shares, area_shares)
    if cumulative:
        ps = np.minimum(np.cumsum(ps), 1.0)
        pa = np.minimum(np.cumsum(pa), 1.0)
    return kvamme_gain(ps, pa)


def zone_density_gini(site_shares, area_shares):
    """Gini coefficient of site density over zones (Lorenz curve).

    Parameters
    ----------
    site_shares, area_shares : array-like of shape (n_zones,)
        Shares of sites and of area per zone; each must sum to 1 (within 1e-6).

    Returns
    -------
    float
        0 when site density is the same in every zone, towards 1 when all sites sit
        in zones with little area.

    Notes
    -----
    Zones are sorted by density ``d_j = site_j / area_j`` ascending; with the
    cumulative area and site shares X_k, Y_k (X_0 = Y_0 = 0),
    ``G = 1 - sum_k (X_k - X_{k-1}) (Y_k + Y_{k-1})``. This equals
    ``sum_i sum_j a_i a_j |d_i - d_j| / (2 d_mean)``. A zone with sites but no area
    (possible with a background sample) has infinite density and closes the curve
    with a vertical step; a zone with neither drops out. Shares are rescaled to sum
    to exactly 1 before use.

    Examples
    --------
    >>> round(zone_density_gini([0.5, 0.5], [0.5, 0.5]), 6)
    0.0
    """
    ps, pa = _check_zone_shares(site_shares, area_shares)
    for name, v in (("site_shares", ps), ("area_shares", pa)):
        if abs(v.sum() - 1.0) > _SUM_TOL:
            raise InputError(
                f"{name} sum to {v.sum():.8g}; expected 1 (one share per zone covering all "
                f"zones). Divide counts by their total."
            )
    with np.errstate(divide="ignore", invalid="ignore"):
        density = np.where(pa > 0, ps / np.where(pa > 0, pa, 1.0), np.where(ps > 0, np.inf, 0.0))
    order = np.argsort(density, kind="stable")
    x = np.concatenate(([0.0], np.cumsum(pa[order])))
    y = np.concatenate(([0.0], np.cumsum(ps[order])))
    x /= x[-1]
    y /= y[-1]
    return float(1.0 - np.sum(np.diff(x) * (y[1:] + y[:-1])))
