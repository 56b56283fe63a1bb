"""Validation measures for a site-potential surface.

Every measure compares two sets of predicted potential:

- ``site_scores``: potential at held-out site locations, one value per site, or one
  value per presence cell with ``site_weight`` chosen so that each site counts once
  (for example ``1 / n_cells`` of its site);
- ``landscape_scores``: potential at landscape cells, either every cell of the study
  area or a large random background sample, optionally with ``landscape_weight``
  (cell area or sampling weight).

Shares of *area* are weighted shares of the landscape cells, shares of *sites* are
weighted shares of the site scores. Inputs are 1-D, finite and non-empty; NaN is
refused (never dropped here), so the caller filters nodata and says how much it
dropped.
"""

import numbers
import re
from types import MappingProxyType

import numpy as np
import pandas as pd
from scipy import stats

from mlsites.errors import InputError, InsufficientDataError

__all__ = [
    "roc_auc",
    "capture_curve",
    "area_under_capture_curve",
    "site_share_in_top_area",
    "kvamme_gain",
    "boyce_curve",
    "boyce_index",
    "evaluate_scores",
    "DEFAULT_TOP_AREA_SHARES",
    "DEFAULT_ZONE_TARGETS",
]

#: Area shares at which :func:`evaluate_scores` reads the captured share of sites.
DEFAULT_TOP_AREA_SHARES = (0.10, 0.20, 0.33)

#: Cumulative site shares that define the zones in :func:`evaluate_scores`: the high
#: zone holds at least 70 % of the sites, high + medium at least 90 %, the rest is low.
DEFAULT_ZONE_TARGETS = MappingProxyType({"high": 0.70, "medium": 0.90})


# --------------------------------------------------------------------- validation


def _check_scores(values, name, weight=None, weight_name=None):
    """Return ``values`` and ``weight`` as 1-D float64 arrays after checking them."""
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim != 1:
        raise InputError(
            f"{name} has shape {arr.shape}; expected a 1-D array of scores. "
            f"For a raster pass values[np.isfinite(values)] after counting the nodata cells."
        )
    if arr.size == 0:
        raise InsufficientDataError(
            f"{name} is empty; at least one score is needed. Check that the fold has "
            f"{'held-out sites' if name.startswith('site') else 'landscape cells'}."
        )
    bad = ~np.isfinite(arr)
    if bad.any():
        n_nan = int(np.isnan(arr).sum())
        raise InputError(
            f"{name} holds {n_nan} NaN and {int(bad.sum()) - n_nan} infinite value(s) out of "
            f"{arr.size}; scores must be finite. Drop those entries (and report how many) first."
        )
    if weight is None:
        return arr, np.ones(arr.size)
    w = np.asarray(weight, dtype=np.float64)
    if w.shape != arr.shape:
        raise InputError(
            f"{weight_name} has shape {w.shape} but {name} has shape {arr.shape}; "
            f"pass one weight per score."
        )
    if not np.all(np.isfinite(w)) or np.any(w < 0):
        raise InputError(
            f"{weight_name} holds {int((~np.isfinite(w) | (w < 0)).sum())} negative or "
            f"non-finite value(s); weights must be finite and >= 0."
        )
    if not w.sum() > 0:
        raise InputError(f"{weight_name} sums to 0; at least one weight must be positive.")
    return arr, w


def _check_shares(values, name):
    """Return shares as a float64 array (any shape) after checking they lie in [0, 1]."""
    arr = np.asarray(values, dtype=np.float64)
    bad = ~(np.isfinite(arr) & (arr >= 0) & (arr <= 1))
    if bad.any():
        raise InputError(
            f"{name} holds {np.atleast_1d(arr)[np.atleast_1d(bad)][:5].tolist()} outside "
            f"[0, 1]; pass shares (fractions), not percentages or counts."
        )
    return arr


def _check_window(value, name):
    """Check a share-of-range parameter lies in (0, 1]."""
    if not isinstance(value, numbers.Real) or not (0 < value <= 1):
        raise InputError(f"{name}={value!r}; expected a number in (0, 1] (a share of the score range).")
    return float(value)


# --------------------------------------------------------------------- ROC / capture


def roc_auc(site_scores, landscape_scores, *, site_weight=None, landscape_weight=None):
    """Area under the ROC curve of sites against the landscape (Mann-Whitney).

    Parameters
    ----------
    site_scores : array-like of shape (n_sites,)
        Predicted potential at held-out site locations.
    landscape_scores : array-like of shape (n_landscape,)
        Predicted potential at landscape cells (all cells or a background sample).
    site_weight, landscape_weight : array-like, optional
        Non-negative weights, one per score; default 1.

    Returns
    -------
    float
        Probability that a random site scores higher than a random landscape cell,
        ties counted one half. 0.5 = no better than chance.

    Raises
    ------
    InputError
        NaN or infinite scores, wrong shapes, negative weights.
    InsufficientDataError
        An empty input.

    Notes
    -----
    Weighted Mann-Whitney statistic
    ``sum_i sum_j w_i v_j ([s_i > l_j] + [s_i = l_j] / 2) / (sum w * sum v)``,
    computed by sorting the landscape scores once. It equals
    ``sklearn.metrics.roc_auc_score`` on the pooled scores with label 1 for sites
    and 0 for landscape cells. With presence-background data the landscape also
    contains unrecorded sites, so the attainable maximum is below 1.

    References
    ----------
    Hanley, J.A. & McNeil, B.J. (1982). The meaning and use of the area under a
    receiver operating characteristic (ROC) curve. Radiology 143:29-36.
    doi:10.1148/radiology.143.1.7063747

    Examples
    --------
    >>> roc_auc([0.9, 0.6, 0.4], [0.6, 0.3, 0.2, 0.1])
    0.875
    """
    s, sw = _check_scores(site_scores, "site_scores", site_weight, "site_weight")
    land, lw = _check_scores(landscape_scores, "landscape_scores", landscape_weight, "landscape_weight")
    order = np.argsort(land, kind="stable")
    land_sorted = land[order]
    cum = np.concatenate(([0.0], np.cumsum(lw[order])))
    below = cum[np.searchsorted(land_sorted, s, side="left")]
    up_to = cum[np.searchsorted(land_sorted, s, side="right")]
    wins = below + 0.5 * (up_to - below)
    return float(np.dot(sw, wins) / (sw.sum() * cum[-1]))


def _capture_points(site_scores, landscape_scores, site_weight, landscape_weight):
    """Thresholds (descending, +inf first) and cumulative area and site shares."""
    s, sw = _check_scores(site_scores, "site_scores", site_weight, "site_weight")
    land, lw = _check_scores(landscape_scores, "landscape_scores", landscape_weight, "landscape_weight")
    neg_levels, inverse = np.unique(-np.concatenate((s, land)), return_inverse=True)
    n = neg_levels.size
    site_w = np.bincount(inverse[: s.size], weights=sw, minlength=n)
    land_w = np.bincount(inverse[s.size :], weights=lw, minlength=n)
    y = np.cumsum(site_w)
    x = np.cumsum(land_w)
    # dividing by the last element makes the final point exactly (1, 1)
    x = np.concatenate(([0.0], x / x[-1]))
    y = np.concatenate(([0.0], y / y[-1]))
    thresholds = np.concatenate(([np.inf], 0.0 - neg_levels))
    return thresholds, x, y


def capture_curve(site_scores, landscape_scores, *, site_weight=None, landscape_weight=None):
    """Share of sites captured against share of area, from the highest potential down.

    Parameters
    ----------
    site_scores : array-like of shape (n_sites,)
        Predicted potential at held-out site locations.
    landscape_scores : array-like of shape (n_landscape,)
        Predicted potential at landscape cells.
    site_weight, landscape_weight : array-like, optional
        Non-negative weights, one per score; default 1.

    Returns
    -------
    pandas.DataFrame
        One row per distinct score of sites and landscape pooled, plus an origin row,
        with columns ``threshold`` (potential; ``inf`` on the origin row),
        ``area_share`` and ``site_share``: the weighted shares of landscape cells and
        of sites with score >= threshold. Rows run from (0, 0) to (1, 1).

    Notes
    -----
    Cells with the same score enter the area together, so a group of ties is one
    straight segment. A site score that no landscape cell shares makes a vertical
    step. The curve is the ROC curve of sites against the landscape (area share =
    false positive rate, site share = true positive rate); the area under it,
    :func:`area_under_capture_curve`, equals :func:`roc_auc`, and ``2 A - 1`` is its
    Gini coefficient (Somers' D). All distinct scores are kept, so the table has as
    many rows as distinct scores; for full rasters consider a background sample.

    Examples
    --------
    >>> curve = capture_curve([0.9, 0.5], [0.9, 0.7, 0.5, 0.1])
    >>> curve[["area_share", "site_share"]].to_numpy().tolist()
    [[0.0, 0.0], [0.25, 0.5], [0.5, 0.5], [0.75, 1.0], [1.0, 1.0]]
    """
    thresholds, x, y = _capture_points(site_scores, landscape_scores, site_weight, landscape_weight)
    return pd.DataFrame({"threshold": thresholds, "area_share": x, "site_share": y})


def area_under_capture_curve(site_scores, landscape_scores, *, site_weight=None, landscape_weight=None):
    """Area under the sites-captured vs area curve (trapezoids).

    Parameters
    ----------
    site_scores, landscape_scores, site_weight, landscape_weight
        As in :func:`capture_curve`.

    Returns
    -------
    float
        Area under :func:`capture_curve`, in [0, 1]; equals :func:`roc_auc`.

    Notes
    -----
    Computed by the trapezoid rule over the curve points, independently of the
    rank-sum formula in :func:`roc_auc`; the two agree to rounding error.
    """
    _, x, y = _capture_points(site_scores, landscape_scores, site_weight, landscape_weight)
    return float(np.sum(np.diff(x) * (y[1:] + y[:-1])) / 2.0)


def site_share_in_top_area(
    site_scores,
    landscape_scores,
    area_shares=DEFAULT_TOP_AREA_SHARES,
    *,
    site_weight=None,
    landscape_weight=None,
):
    """Share of held-out sites that fall in the top x of the area.

    Parameters
    ----------
    site_scores, landscape_scores : array-like of shape (n,)
        Predicted potential at held-out sites and at landscape cells.
    area_shares : float or sequence of float, default (0.10, 0.20, 0.33)
        Shares of the area, each in (0, 1], taken from the highest potential down.
    site_weight, landscape_weight : array-like, optional
        Non-negative weights, one per score; default 1.

    Returns
    -------
    float or numpy.ndarray
        Share of sites captured by exactly that share of the area; a float for a
        scalar ``area_shares``, else an array in the same order.

    Notes
    -----
    The boundary of the top area is the weighted (1 - x) quantile of the landscape
    scores. When several cells share the boundary score, only part of them fits into
    the top area; we admit that part of the tied cells and credit the sites tied with
    them in the same proportion, i.e. we interpolate linearly along the tie segment of
    :func:`capture_curve`. This is the expected capture if the ties were broken at
    random, and it makes the area exactly x. Sites scoring above every cell left
    outside the top area count in full. A site score that no landscape cell shares
    makes a vertical step in the curve; when x falls exactly on such a step, the
    upper end is used, because the sites on the step add no area.

    Examples
    --------
    >>> site_share_in_top_area([0.9, 0.5], [0.9, 0.7, 0.5, 0.1], 0.5)
    0.5
    >>> site_share_in_top_area([0.9, 0.5], [0.9, 0.7, 0.5, 0.1], [0.6, 0.75])
    array([0.7, 1. ])
    """
    scalar = np.ndim(area_shares) == 0
    xs = np.atleast_1d(np.asarray(area_shares, dtype=np.float64))
    if xs.ndim != 1 or xs.size == 0 or not np.all(np.isfinite(xs) & (xs > 0) & (xs <= 1)):
        raise InputError(
            f"area_shares={np.asarray(area_shares).tolist()}; expected shares in (0, 1] "
            f"such as (0.10, 0.20, 0.33), not percentages."
        )
    _, x, y = _capture_points(site_scores, landscape_scores, site_weight, landscape_weight)
    k = np.searchsorted(x, xs, side="right") - 1  # last point with x[k] <= share
    on_point = x[k] == xs
    k1 = np.minimum(k + 1, x.size - 1)
    span = np.where(on_point, 1.0, x[k1] - x[k])
    frac = np.where(on_point, 0.0, (xs - x[k]) / span)
    out = np.where(on_point, y[k], y[k] + frac * (y[k1] - y[k]))
    return float(out[0]) if scalar else out


def kvamme_gain(site_share, area_share):
    """Kvamme's gain ``1 - area_share / site_share``.

    Parameters
    ----------
    site_share : float or array-like
        Share of (held-out) sites in the zone(s) called high, in [0, 1].
    area_share : float or array-like
        Share of the study area in the same zone(s), in [0, 1]; broadcast against
        ``site_share``.

    Returns
    -------
    float or numpy.ndarray
        Gain: 0 = no better than chance, < 0 worse, towards 1 = sites concentrated in
        little area. NaN where ``site_share`` is 0 (undefined).

    Notes
    -----
    Compute it on held-out sites (spatial folds), not on the training sites. Note the
    argument order: sites first, as in "85 % of the sites in 33 % of the area".

    References
    ----------
    Kvamme, K.L. (1988). Development and testing of quantitative models. In Judge,
    W.J. & Sebastian, L. (eds.), Quantifying the Present and Predicting the Past,
    pp. 325-428. U.S. Department of the Interior, Bureau of Land Management.

    Examples
    --------
    >>> round(kvamme_gain(0.85, 0.33), 6)
    0.611765
    """
    ps = _check_shares(site_share, "site_share")
    pa = _check_shares(area_share, "area_share")
    ps, pa = np.broadcast_arrays(ps, pa)
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = np.where(ps > 0, 1.0 - pa / np.where(ps > 0, ps, 1.0), np.nan)
    return float(gain) if gain.ndim == 0 else gain


# --------------------------------------------------------------------- Boyce


def boyce_curve(
    site_scores,
    landscape_scores,
    *,
    site_weight=None,
    landscape_weight=None,
    window=0.1,
    n_windows=100,
    window_starts=None,
    score_range=None,
):
    """Predicted-to-expected ratio of sites in moving windows of potential.

    Parameters
    ----------
    site_scores, landscape_scores : array-like of shape (n,)
        Predicted potential at held-out sites and at landscape cells.
    site_weight, landscape_weight : array-like, optional
        Non-negative weights, one per score; default 1.
    window : float, default 0.1
        Window width as a share of the score range, in (0, 1].
    n_windows : int, default 100
        Number of evenly spaced windows from the bottom of the range (first window
        ``[lo, lo + w]``) to its top (last window ``[hi - w, hi]``); at least 2.
    window_starts : array-like, optional
        Explicit window starts as shares of the score range (0 = ``lo``, 1 = ``hi``),
        strictly increasing; replaces ``n_windows``.
    score_range : (float, float), optional
        ``(lo, hi)`` in score units; default the minimum and maximum of
        ``landscape_scores`` (the mapped surface). Pass ``(0, 1)`` for probabilities.

    Returns
    -------
    pandas.DataFrame
        One row per window with columns ``window_start``, ``window_end``,
        ``window_centre`` (score units), ``site_share`` (P), ``area_share`` (E) and
        ``site_density_ratio`` (F = P / E; NaN where E = 0).

    Notes
    -----
    Windows are closed, ``[a, a + w]``: a score on an edge counts in both windows
    that share it. Starts are computed as ``lo + (hi - lo) * k * (1 - window) /
    (n_windows - 1)`` (a multiple of k, not a running sum, so rounding does not
    drift).

    References
    ----------
    Hirzel, A.H., Le Lay, G., Helfer, V., Randin, C. & Guisan, A. (2006). Evaluating
    the ability of habitat suitability models to predict species presences.
    Ecological Modelling 199:142-152. doi:10.1016/j.ecolmodel.2006.05.017
    """
    s, sw = _check_scores(site_scores, "site_scores", site_weight, "site_weight")
    land, lw = _check_scores(landscape_scores, "landscape_scores", landscape_weight, "landscape_weight")
    window = _check_window(window, "window")
    if score_range is None:
        lo, hi = float(land.min()), float(land.max())
    else:
        try:
            lo, hi = (float(v) for v in score_range)
        except (TypeError, ValueError):
            raise InputError(f"score_range={score_range!r}; expected two numbers (lo, hi).") from None
        if not (np.isfinite(lo) and np.isfinite(hi) and hi > lo):
            raise InputError(f"score_range=({lo}, {hi}); expected finite lo < hi, e.g. (0, 1).")
    if window_starts is None:
        if isinstance(n_windows, bool) or not isinstance(n_windows, numbers.Integral) or n_windows < 2:
            raise InputError(f"n_windows={n_windows!r}; expected an integer >= 2 (100 is usual).")
        starts = np.arange(n_windows) * (1.0 - window) / (n_windows - 1)
    else:
        starts = np.asarray(window_starts, dtype=np.float64)
        if starts.ndim != 1 or starts.size < 2 or not np.all(np.isfinite(starts)) or np.any(np.diff(starts) <= 0):
            raise InputError(
                f"window_starts={np.asarray(window_starts).tolist()[:6]}...; expected at least two "
                f"strictly increasing finite shares of the score range."
            )
    span = hi - lo
    a = lo + span * starts
    b = a + span * window

    def share_in(values, weights):
        order = np.argsort(values, kind="stable")
        cum = np.concatenate(([0.0], np.cumsum(weights[order])))
        v = values[order]
        inside = cum[np.searchsorted(v, b, side="right")] - cum[np.searchsorted(v, a, side="left")]
        return inside / cum[-1]

    p = share_in(s, sw)
    e = share_in(land, lw)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(e > 0, p / np.where(e > 0, e, 1.0), np.nan)
    return pd.DataFrame(
        {
            "window_start": a,
            "window_end": b,
            "window_centre": a + span * window / 2.0,
            "site_share": p,
            "area_share": e,
            "site_density_ratio": f,
        }
    )


def boyce_index(
    site_scores,
    landscape_scores,
    *,
    site_weight=None,
    landscape_weight=None,
    window=0.1,
    n_windows=100,
    window_starts=None,
    score_range=None,
    drop_repeated=False,
):
    """Continuous Boyce index (Hirzel et al. 2006).

    Parameters
    ----------
    site_scores, landscape_scores, site_weight, landscape_weight, window, n_windows, \
window_starts, score_range
        As in :func:`boyce_curve`.
    drop_repeated : bool, default False
        If True, of each run of consecutive windows with the same ratio F keep only the
        first before correlating (removes the plateaus of windows with equal counts).

    Returns
    -------
    float
        Spearman rank correlation between F and the window centre, in [-1, 1]:
        near 1 when site density rises steadily with potential, 0 for a random
        model, negative for a model that points away from the sites. NaN when fewer
        than two windows have E > 0 or when F is constant there.

    Notes
    -----
    Windows with E = 0 (no landscape cell) are skipped. Closed windows and
    ``drop_repeated`` change the value; both are fixed here (closed, off by
    default). Spearman's rho is taken from :func:`scipy.stats.spearmanr` (average
    ranks for ties).

    References
    ----------
    Hirzel, A.H., Le Lay, G., Helfer, V., Randin, C. & Guisan, A. (2006). Evaluating
    the ability of habitat suitability models to predict species presences.
    Ecological Modelling 199:142-152. doi:10.1016/j.ecolmodel.2006.05.017

    Boyce, M.S., Vernier, P.R., Nielsen, S.E. & Schmiegelow, F.K.A. (2002).
    Evaluating resource selection functions. Ecological Modelling 157:281-300.
    doi:10.1016/S0304-3800(02)00200-4
    """
    curve = boyce_curve(
        site_scores,
        landscape_scores,
        site_weight=site_weight,
        landscape_weight=landscape_weight,
        window=window,
        n_windows=n_windows,
        window_starts=window_starts,
        score_range=score_range,
    )
    kept = curve[curve["area_share"] > 0]
    f = kept["site_density_ratio"].to_numpy()
    centre = kept["window_centre"].to_numpy()
    if drop_repeated and f.size:
        first_of_run = np.concatenate(([True], f[1:] != f[:-1]))
        f, centre = f[first_of_run], centre[first_of_run]
    if f.size < 2 or np.all(f == f[0]):
        return float("nan")
    return float(stats.spearmanr(f, centre).statistic)


# --------------------------------------------------------------------- one fold


def _percent_key(share):
    """'captured_top_10' style suffix for an area share (0.125 -> '12_5')."""
    pct = round(100.0 * share, 6)
    text = f"{pct:.6f}".rstrip("0").rstrip(".")
    return text.replace(".", "_")


_KEY_NAME = re.compile(r"^[a-z][a-z0-9_]*$")


def evaluate_scores(
    site_scores,
    landscape_scores,
    *,
    site_weight=None,
    landscape_weight=None,
    zone_targets=None,
    thresholds=None,
    top_area_shares=DEFAULT_TOP_AREA_SHARES,
    boyce_window=0.1,
    boyce_n_windows=100,
    score_range=None,
    remainder="low",
):
    """All validation measures for one fold (or for all folds pooled) in one call.

    Parameters
    ----------
    site_scores, landscape_scores : array-like of shape (n,)
        Predicted potential at held-out sites and at landscape cells of the fold.
    site_weight, landscape_weight : array-like, optional
        Non-negative weights, one per score; default 1.
    zone_targets : mapping of str to float, optional
        Cumulative share of sites each zone must hold, from the top (see
        :func:`mlsites.evaluation.zone_thresholds`); default
        ``{"high": 0.70, "medium": 0.90}``. Ignored when ``thresholds`` is given.
    thresholds : mapping of str to float, optional
        Zone thresholds chosen elsewhere, e.g. from the training sites of the fold
        with :func:`mlsites.evaluation.zone_thresholds`. Default: chosen from these
        held-out sites, which reads the capture curve at the target shares.
    top_area_shares : sequence of float, default (0.10, 0.20, 0.33)
        Area shares for the ``captured_top_*`` and ``gain_top_*`` entries.
    boyce_window, boyce_n_windows, score_range
        Passed to :func:`boyce_index` as ``window``, ``n_windows``, ``score_range``.
    remainder : str, default "low"
        Name of the zone below the last threshold.

    Returns
    -------
    dict
        ``n_sites`` and ``n_landscape`` (number of scores), ``auc``, ``boyce``,
        ``captured_top_<pct>`` and ``gain_top_<pct>`` for each area share (e.g.
        ``captured_top_10``; 0.125 gives ``captured_top_12_5``), then per zone
        ``threshold_<zone>`` (not for the remainder), ``area_share_<zone>``,
        ``site_share_<zone>`` and ``gain_<zone>`` (per-zone gain, which for the top
        zone is Kvamme's gain of the high zone), and ``gini_zones`` (Gini coefficient
        of site density over the zones). ``n_sites`` counts score entries, not the
        sum of ``site_weight``.

    Raises
    ------
    InputError
        NaN or infinite scores, bad weights, targets, thresholds or shares.
    InsufficientDataError
        No site or no landscape score.

    Notes
    -----
    With thresholds chosen from the held-out sites themselves the top zone holds at
    least its target share by construction, so ``gain_high`` then measures how little
    area the surface needs for that share (a point on the capture curve). Thresholds
    chosen from the training sites test the zones as they would be mapped; then the
    held-out share may fall short of the target.

    Examples
    --------
    >>> out = evaluate_scores([0.9, 0.8, 0.4], [0.9, 0.8, 0.6, 0.4, 0.2, 0.1])
    >>> round(out["auc"], 4), round(out["gain_high"], 4)
    (0.6944, 0.3333)
    """
    # imported here because _zones builds on the checks in this module
    from mlsites.evaluation._zones import zone_density_gini, zone_table, zone_thresholds

    if thresholds is None:
        targets = DEFAULT_ZONE_TARGETS if zone_targets is None else zone_targets
        thresholds = zone_thresholds(site_scores, targets=targets, site_weight=site_weight, remainder=remainder)
    shares = np.atleast_1d(np.asarray(top_area_shares, dtype=np.float64))
    captured = np.atleast_1d(
        site_share_in_top_area(
            site_scores, landscape_scores, shares, site_weight=site_weight, landscape_weight=landscape_weight
        )
    )
    keys = [_percent_key(x) for x in shares]
    if len(set(keys)) != len(keys):
        raise InputError(f"top_area_shares={shares.tolist()} repeats a share; list each share once.")
    table = zone_table(
        site_scores,
        landscape_scores,
        thresholds,
        site_weight=site_weight,
        landscape_weight=landscape_weight,
        remainder=remainder,
    )
    for name in table["zone"]:
        if not _KEY_NAME.match(name):
            raise InputError(f"zone name {name!r}; expected lower_snake_case such as 'high' for result keys.")

    out = {
        "n_sites": int(np.size(site_scores)),
        "n_landscape": int(np.size(landscape_scores)),
        "auc": roc_auc(site_scores, landscape_scores, site_weight=site_weight, landscape_weight=landscape_weight),
        "boyce": boyce_index(
            site_scores,
            landscape_scores,
            site_weight=site_weight,
            landscape_weight=landscape_weight,
            window=boyce_window,
            n_windows=boyce_n_windows,
            score_range=score_range,
        ),
    }
    for key, y in zip(keys, captured):
        out[f"captured_top_{key}"] = float(y)
    for key, x, y in zip(keys, shares, captured):
        out[f"gain_top_{key}"] = kvamme_gain(float(y), float(x))
    for row in table.itertuples(index=False):
        if row.zone != remainder:
            out[f"threshold_{row.zone}"] = float(row.lower_threshold)
        out[f"area_share_{row.zone}"] = float(row.area_share)
        out[f"site_share_{row.zone}"] = float(row.site_share)
        out[f"gain_{row.zone}"] = float(row.gain)
    out["gini_zones"] = zone_density_gini(table["site_share"].to_numpy(), table["area_share"].to_numpy())
    return out
