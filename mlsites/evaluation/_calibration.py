"""Zones calibrated on held-out sites: area shares from cross-validation, cuts of a map.

A zone threshold chosen so that the *training* sites reach a target share is
optimistic for any learner that fits its training sites closely. Here the zones
are calibrated on the cross-validation instead (METHODS.md §13): every held-out
site is placed on the area axis of its own fold (the share of that fold's
landscape scoring at least as high), the least area share ``a(t)`` holding a share
``t`` of the held-out sites is read off, and a map is then cut at its own top
``a(t)`` of cells. The zones are defined by area, so they carry over from the fold
models to the final model whatever the scale of each model's scores.
"""

from __future__ import annotations

import numpy as np

from mlsites.errors import InputError
from mlsites.evaluation._metrics import _check_scores, _check_shares
from mlsites.evaluation._zones import _check_targets, zone_thresholds

__all__ = ["area_ranks", "calibrate_zone_areas", "cut_for_area_share", "nearest_tie_cut"]


def area_ranks(site_scores, landscape_scores):
    """Share of the landscape scoring at least as high as each site.

    Parameters
    ----------
    site_scores : array-like of shape (n_sites,)
        Scores of held-out site cells of one fold.
    landscape_scores : array-like of shape (n_landscape,)
        Scores of the same fold's landscape cells (held-out background), weight 1.

    Returns
    -------
    numpy.ndarray of float64, shape (n_sites,)
        ``#(landscape >= s) / n_landscape`` for each site score ``s``: the least
        area share of a zone ``score >= t`` that still holds the site.

    Examples
    --------
    >>> area_ranks([0.9, 0.5, 0.2], [0.8, 0.6, 0.5, 0.3]).tolist()
    [0.0, 0.75, 1.0]
    """
    s, _ = _check_scores(site_scores, "site_scores")
    land, _ = _check_scores(landscape_scores, "landscape_scores")
    ordered = np.sort(land)
    return (land.size - np.searchsorted(ordered, s, side="left")) / land.size


def calibrate_zone_areas(site_area_ranks, *, targets, site_weight=None, remainder="low"):
    """Least area share whose top cells hold each target share of held-out sites.

    Parameters
    ----------
    site_area_ranks : array-like of shape (n_sites,)
        Per held-out site cell, the share of its fold's landscape scoring at least
        as high (:func:`area_ranks`), pooled over folds.
    targets : mapping of str to float
        Zone name to cumulative site share from the top, e.g.
        ``{"high": 0.70, "medium": 0.90}`` (as in :func:`zone_thresholds`).
    site_weight : array-like of shape (n_sites,), optional
        Weights of the site cells (``1 / n_cells`` of their site, so each site
        counts once); default 1.
    remainder : str, default "low"
        Name of the zone below the last target; not allowed in ``targets``.

    Returns
    -------
    dict of str to float
        Zone name to the cumulative area share ``a(t)`` of that zone and all
        zones above it, in the order of ``targets``; never decreasing.

    Notes
    -----
    ``a(t)`` is the least ``a`` for which the weighted share of site cells with
    rank ``<= a`` reaches ``t`` (up to rounding of 1e-12): the threshold
    :func:`zone_thresholds` finds for the negated ranks. It is always one of the
    ranks, and the share it holds may exceed ``t`` when sites tie on it.

    Examples
    --------
    >>> calibrate_zone_areas([0.05, 0.1, 0.2, 0.4, 0.8], targets={"high": 0.6, "medium": 0.8})
    {'high': 0.2, 'medium': 0.4}
    """
    _check_targets(targets, remainder)
    r = _check_shares(site_area_ranks, "site_area_ranks")
    cut = zone_thresholds(-np.asarray(r, dtype=np.float64).ravel(), targets=targets, site_weight=site_weight,
                          remainder=remainder)
    return {name: float(0.0 - value) for name, value in cut.items()}


def nearest_tie_cut(n_above, n_including, target_count):
    """Whether the tie group at the boundary joins a zone of ``target_count`` cells.

    Parameters
    ----------
    n_above : int
        Cells scoring strictly above the boundary value.
    n_including : int
        Cells scoring at least the boundary value (``n_above`` plus the ties).
    target_count : float
        Wanted number of cells (area share times the number of cells).

    Returns
    -------
    bool
        True when ``n_including`` is at least as near to ``target_count`` as
        ``n_above`` (the zone is then ``score >= boundary``), else False (``score >
        boundary``). Ties between the two go to the larger zone, which holds more
        sites: erring that way keeps more ground in the zone that asks for survey.
    """
    return abs(n_including - target_count) <= abs(n_above - target_count)


def cut_for_area_share(scores, area_share):
    """Threshold ``t`` such that cells with ``score >= t`` cover ``area_share`` of the cells.

    Parameters
    ----------
    scores : array-like of shape (n,)
        Finite scores of every cell (or of a landscape sample, weight 1).
    area_share : float
        Wanted share of the cells in [0, 1].

    Returns
    -------
    float
        The threshold. A tie group at the boundary is kept whole, in or out,
        whichever leaves the count nearer ``area_share * n`` (:func:`nearest_tie_cut`);
        without ties at the boundary the zone holds ``round(area_share * n)``
        cells, within half a cell of the wanted area. An ``area_share`` of 0 gives
        a threshold above every score (an empty zone).

    Examples
    --------
    >>> cut_for_area_share([0.9, 0.8, 0.7, 0.6], 0.5)
    0.8
    >>> scores = [0.9, 0.8, 0.8, 0.8, 0.1]
    >>> t = cut_for_area_share(scores, 0.4)  # 2 cells wanted: 1 (0.9 alone) is nearer than 4
    >>> sum(v >= t for v in scores)
    1
    """
    s, _ = _check_scores(scores, "scores")
    a = float(_check_shares(area_share, "area_share"))
    ordered = np.sort(s)[::-1]
    want = a * s.size
    if want <= 0:
        return float(np.nextafter(ordered[0], np.inf))
    # the cell that crosses the wanted count decides which tie group is the boundary
    boundary = ordered[min(s.size, int(np.ceil(want - 1e-9))) - 1]
    n_above = int(np.count_nonzero(s > boundary))
    n_including = int(np.count_nonzero(s >= boundary))
    if nearest_tie_cut(n_above, n_including, want):
        return float(boundary)
    return float(np.nextafter(boundary, np.inf))

