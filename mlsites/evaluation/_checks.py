"""Statistics of a check on sites found after a model was made.

A model card's map is tested on new sites: how many fall in each zone, whether that
is more than the zone's share of the area would give by chance, and how sure one
can be with the few sites such checks usually have. :func:`new_site_check`
returns the table ``mlsites check`` writes; :func:`wilson_interval` and
:func:`binomial_greater_pvalue` are its two statistics.
"""

from collections.abc import Mapping

import numpy as np
import pandas as pd
from scipy import special, stats

from mlsites.errors import InputError, InsufficientDataError
from mlsites.evaluation._metrics import _check_scores, _check_shares, boyce_index, kvamme_gain, roc_auc

__all__ = ["wilson_interval", "binomial_greater_pvalue", "new_site_check", "FEW_NEW_SITES"]

#: Checks on this many new sites or fewer get a plain warning in their verdicts.
FEW_NEW_SITES = 10

# Site weights must add up to a whole number of sites within this rounding error.
_COUNT_TOL = 1e-6
# Zone area shares must sum to 1 within this tolerance.
_SUM_TOL = 1e-6


def _check_count(k, n, *, allow_fraction=True):
    k = np.asarray(k, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    if not np.all(np.isfinite(n) & (n >= 1) & (n == np.round(n))):
        raise InputError(f"n={n.tolist()}; expected a whole number of sites >= 1.")
    if not np.all(np.isfinite(k) & (k >= 0) & (k <= n)):
        raise InputError(f"k={k.tolist()} with n={n.tolist()}; expected 0 <= k <= n sites.")
    if not allow_fraction and not np.all(k == np.round(k)):
        raise InputError(f"k={k.tolist()}; expected a whole number of sites.")
    return k, n


def wilson_interval(k, n, *, confidence=0.95):
    """Wilson score interval of a share k / n (Wilson 1927).

    Parameters
    ----------
    k : float or array-like
        Number of sites in the zone, 0 <= k <= n; may be fractional when a site
        covering several cells is shared between zones by its cell weights.
    n : int or array-like
        Number of sites, >= 1.
    confidence : float, default 0.95
        Two-sided confidence level, in (0, 1).

    Returns
    -------
    (low, high) : tuple of float, or of ndarray for array input
        Bounds of the interval for the true share, within [0, 1]; exactly 0 when
        k = 0 and exactly 1 when k = n.

    Notes
    -----
    With ``p = k / n`` and ``z`` the ``(1 + confidence) / 2`` quantile of the
    standard normal distribution (1.959964 for 95 %)::

        centre = (p + z^2 / (2 n)) / (1 + z^2 / n)
        half   = z / (1 + z^2 / n) * sqrt(p (1 - p) / n + z^2 / (4 n^2))

    and the interval is ``centre -/+ half``, without continuity correction. It is
    what ``scipy.stats.binomtest(k, n).proportion_ci(method="wilson")`` returns for
    whole k. Unlike the normal (Wald) interval it stays inside [0, 1] and keeps
    close to its nominal coverage with the ten or so sites of a typical check.

    References
    ----------
    Wilson, E.B. (1927). Probable inference, the law of succession, and statistical
    inference. Journal of the American Statistical Association 22:209-212.
    doi:10.1080/01621459.1927.10502953

    Examples
    --------
    >>> low, high = wilson_interval(8, 10)
    >>> round(low, 6), round(high, 6)
    (0.490162, 0.943318)
    """
    if not (isinstance(confidence, float | int) and 0 < confidence < 1):
        raise InputError(f"confidence={confidence!r}; expected a level in (0, 1), e.g. 0.95.")
    k, n = _check_count(k, n)
    z = stats.norm.ppf(0.5 + confidence / 2.0)
    p = k / n
    denom = 1.0 + z * z / n
    centre = (p + z * z / (2.0 * n)) / denom
    half = z / denom * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n))
    low = np.where(k == 0, 0.0, np.clip(centre - half, 0.0, 1.0))
    high = np.where(k == n, 1.0, np.clip(centre + half, 0.0, 1.0))
    if low.ndim == 0:
        return float(low), float(high)
    return low, high


def binomial_greater_pvalue(k, n, p):
    """One-sided exact binomial test: are k of n sites more than a share p gives by chance?

    Parameters
    ----------
    k : float or array-like
        Sites in the zone, 0 <= k <= n (fractional allowed, see Notes).
    n : int or array-like
        Number of sites, >= 1.
    p : float or array-like
        Share of the study area in the zone, in [0, 1]: the chance that a site
        placed at random falls in it.

    Returns
    -------
    float or ndarray
        ``P(X >= k)`` for ``X ~ Binomial(n, p)``: the chance of at least k sites in
        the zone if sites fell there only as often as its area share. Small values
        mean the zone holds more sites than chance would put there.

    Notes
    -----
    Computed as the regularized incomplete beta function ``I_p(k, n - k + 1)``,
    which equals ``sum_{x >= k} C(n, x) p^x (1 - p)^(n - x)`` for whole k (the
    p-value of ``scipy.stats.binomtest(k, n, p, alternative="greater")``) and
    interpolates smoothly between whole k. A fractional k arises when a site's
    cells lie in several zones and each counts its share of the site; the test is
    then an approximation (exact when every site lies wholly in one zone).
    ``P(X >= 0) = 1``.

    References
    ----------
    Clopper, C.J. & Pearson, E.S. (1934). The use of confidence or fiducial limits
    illustrated in the case of the binomial. Biometrika 26:404-413 (the beta form
    of the binomial tail). doi:10.1093/biomet/26.4.404

    Examples
    --------
    >>> round(binomial_greater_pvalue(8, 10, 0.35), 6)
    0.004821
    """
    k, n = _check_count(k, n)
    p = _check_shares(p, "p")
    k, n, p = np.broadcast_arrays(k, n, p)
    with np.errstate(invalid="ignore"):
        tail = special.betainc(np.where(k > 0, k, 1.0), n - k + 1.0, p)
    out = np.where(k > 0, tail, 1.0)
    return float(out) if out.ndim == 0 else out


def _percent(x, digits=0):
    return f"{100.0 * x:.{digits}f} %"


def _count(x):
    """A site count for a sentence: whole numbers without decimals."""
    return f"{x:.0f}" if abs(x - round(x)) < _COUNT_TOL else f"{x:.1f}"


def _zone_verdict(k, n, low, high, area, pvalue, confidence):
    level = _percent(confidence)
    if k == 0:
        head = f"No new site in this zone ({_percent(area, 1)} of the area; {level} interval 0 to {_percent(high, 1)})"
    else:
        # one decimal on the bounds and the area, so a bound just below the area share
        # does not print as equal to it
        head = (
            f"{_count(k)} of {_count(n)} new sites ({_percent(k / n)}, {level} interval "
            f"{100.0 * low:.1f} to {_percent(high, 1)}) in {_percent(area, 1)} of the area"
        )
    if low > area:
        judge = f"more than its area share, so more than chance would give (one-sided binomial p = {pvalue:.2g})."
    elif high < area:
        judge = "fewer than its area share would give by chance."
    else:
        judge = "the interval includes the area share, so these sites cannot tell the model from chance here."
    return f"{head}: {judge}"


def _few_sites_note(n, few_sites):
    if n <= few_sites:
        return (
            f" Only {_count(n)} new sites: too few for a firm check, the intervals are wide; "
            "treat this as a first look and check again when more sites are known."
        )
    return ""


def new_site_check(
    site_scores,
    site_zones,
    landscape_scores,
    zone_area_shares,
    *,
    site_applicable=None,
    site_weight=None,
    landscape_weight=None,
    zone_codes=None,
    confidence=0.95,
    few_sites=FEW_NEW_SITES,
    boyce_window=0.1,
    boyce_n_windows=100,
    score_range=None,
):
    """Table of a check of a saved model on sites found after it was made.

    Parameters
    ----------
    site_scores : array-like of shape (n_cells,)
        The model's potential at the new sites' cells (a site may cover several).
    site_zones : array-like of int of shape (n_cells,)
        Zone code of each of those cells by its score, as on the map (not the code
        for cells outside the area of applicability; give that in
        ``site_applicable``).
    landscape_scores : array-like of shape (n_landscape,)
        Potential at the map's cells (all, or a large random sample), for AUC and
        the Boyce index.
    zone_area_shares : mapping of str to float
        Zone name to its share of the map's area, from the top zone down; shares
        sum to 1. This order is the table's order.
    site_applicable : array-like of bool of shape (n_cells,), optional
        Whether each cell lies inside the area of applicability.
    site_weight : array-like of shape (n_cells,), optional
        Weight of each cell, ``1 / n_cells`` of its site so that every site counts
        once; must add up to the whole number of sites. Default 1 (a cell per site).
    landscape_weight : array-like of shape (n_landscape,), optional
        Weights of the landscape cells (e.g. sampling weights); default 1.
    zone_codes : mapping of str to int, optional
        Zone name to code; default the codes of
        :func:`mlsites.evaluation.assign_zones`: ``n_zones`` for the top zone down
        to 1.
    confidence : float, default 0.95
        Level of the Wilson intervals.
    few_sites : int, default 10
        With this many new sites or fewer every verdict says plainly that the
        check is weak.
    boyce_window, boyce_n_windows, score_range
        Passed to :func:`mlsites.evaluation.boyce_index`.

    Returns
    -------
    pandas.DataFrame
        One row per zone from the top down, then a row ``zone = "all"``, with columns

        - ``zone``, ``code``;
        - ``n_sites``: new sites in the check (sum of the weights);
        - ``sites_in_zone``: sites in the zone (weighted; fractional when a site's
          cells lie in several zones);
        - ``site_share`` with ``site_share_low`` and ``site_share_high``, its Wilson
          interval (:func:`wilson_interval`);
        - ``area_share``: the zone's share of the map;
        - ``gain``: ``1 - area_share / site_share``; for the top zone this is
          Kvamme's gain of the high zone (NaN without sites);
        - ``p_value``: one-sided binomial test of more sites in the zone than its
          area share gives by chance (:func:`binomial_greater_pvalue`);
        - ``share_applicable``: share of the zone's new sites inside the area of
          applicability (NaN without ``site_applicable``);
        - ``auc`` and ``boyce`` (the ``all`` row only): ROC AUC of the new sites
          against the landscape (:func:`mlsites.evaluation.roc_auc`) and the
          continuous Boyce index (:func:`mlsites.evaluation.boyce_index`);
        - ``verdict``: a plain sentence.

    Raises
    ------
    InputError
        Mismatched lengths, NaN scores, zone codes that are not zones, area shares
        that do not sum to 1, weights that do not add up to whole sites.
    InsufficientDataError
        No new site.

    Notes
    -----
    The verdict compares the interval, not the p-value, with the area share: when
    the interval includes it, the sites cannot tell the model from chance. The
    exact test and the Wilson interval can disagree at the margin; both are given.
    A check on new sites says how the map does on *these* sites: sites found by
    one survey share its biases, and a map never replaces survey.
    """
    scores, weight = _check_scores(site_scores, "site_scores", site_weight, "site_weight")
    land, land_weight = _check_scores(landscape_scores, "landscape_scores", landscape_weight, "landscape_weight")
    zones = np.asarray(site_zones)
    if zones.shape != scores.shape or (zones.size and zones.dtype.kind not in "iu"):
        raise InputError(
            f"site_zones has shape {zones.shape} and dtype {zones.dtype}; expected {scores.shape[0]} "
            "integer zone codes, one per site cell."
        )
    names, areas, codes = _check_zones(zone_area_shares, zone_codes)
    unknown = np.setdiff1d(zones, codes)
    if unknown.size:
        raise InputError(
            f"site_zones holds code(s) {unknown.tolist()} at {int(np.isin(zones, unknown).sum())} cell(s) "
            f"that are no zone of {dict(zip(names, codes.tolist()))}; give each cell's zone by its score "
            "(outside the area of applicability goes in site_applicable) and drop cells off the map first."
        )
    if site_applicable is not None:
        applicable = np.asarray(site_applicable)
        if applicable.shape != scores.shape or applicable.dtype != bool:
            raise InputError(
                f"site_applicable has shape {applicable.shape} and dtype {applicable.dtype}; expected "
                f"{scores.shape[0]} booleans, one per site cell."
            )
    n = float(weight.sum())
    if abs(n - round(n)) > _COUNT_TOL * max(1.0, n):
        raise InputError(
            f"site_weight sums to {n:.6g}; give each cell 1 / (number of cells of its site) so that "
            "the weights add up to the number of sites."
        )
    n = float(round(n))
    if n < 1:
        raise InsufficientDataError("no new site to check; at least one site on the map is needed.")

    k = np.array([weight[zones == c].sum() for c in codes])
    k = np.minimum(k, n)  # a few ulps above n after summing fractions
    low, high = wilson_interval(k, np.full(k.size, n), confidence=confidence)
    pvalue = binomial_greater_pvalue(k, n, areas)
    share = k / n
    gain = kvamme_gain(share, areas)
    if site_applicable is None:
        share_app = np.full(k.size, np.nan)
        app_all = np.nan
    else:
        w_app = weight * applicable
        with np.errstate(invalid="ignore", divide="ignore"):
            share_app = np.array([w_app[zones == c].sum() for c in codes]) / np.where(k > 0, k, np.nan)
        app_all = float(w_app.sum() / n)
    auc = roc_auc(scores, land, site_weight=weight, landscape_weight=land_weight)
    boyce = boyce_index(
        scores,
        land,
        site_weight=weight,
        landscape_weight=land_weight,
        window=boyce_window,
        n_windows=boyce_n_windows,
        score_range=score_range,
    )
    note = _few_sites_note(n, few_sites)
    verdicts = [
        _zone_verdict(k[i], n, low[i], high[i], areas[i], pvalue[i], confidence) + note for i in range(k.size)
    ]
    summary = f"AUC {auc:.2f} against the landscape (0.5 = chance), Boyce index {boyce:.2f}."
    if site_applicable is not None:
        inside = app_all * n
        summary += f" {_count(inside)} of {_count(n)} new sites lie inside the area of applicability"
        if n - inside > _COUNT_TOL:
            summary += (
                f"; {_count(n - inside)} lie where the predictors differ from all training data, so "
                "their scores are extrapolations."
            )
        else:
            summary += "."
    rows = pd.DataFrame(
        {
            "zone": names,
            "code": codes,
            "n_sites": n,
            "sites_in_zone": k,
            "site_share": share,
            "site_share_low": low,
            "site_share_high": high,
            "area_share": areas,
            "gain": gain,
            "p_value": pvalue,
            "share_applicable": share_app,
            "auc": np.nan,
            "boyce": np.nan,
            "verdict": verdicts,
        }
    )
    total = {
        "zone": "all", "code": pd.NA, "n_sites": n, "sites_in_zone": n, "site_share": 1.0,
        "site_share_low": np.nan, "site_share_high": np.nan, "area_share": 1.0, "gain": np.nan,
        "p_value": np.nan, "share_applicable": app_all, "auc": auc, "boyce": boyce,
        "verdict": summary + note,
    }
    table = pd.concat([rows, pd.DataFrame([total])], ignore_index=True)
    table["code"] = table["code"].astype("Int64")
    return table


def _check_zones(zone_area_shares, zone_codes):
    if not isinstance(zone_area_shares, Mapping) or not zone_area_shares:
        raise InputError(
            f"zone_area_shares={zone_area_shares!r}; expected a mapping of zone name to area share "
            "from the top zone down, e.g. {'high': 0.2, 'medium': 0.3, 'low': 0.5}."
        )
    names = [str(z) for z in zone_area_shares]
    if "all" in names:
        raise InputError("zone name 'all' is used by the summary row; rename the zone.")
    areas = _check_shares(list(zone_area_shares.values()), "zone_area_shares")
    if abs(areas.sum() - 1.0) > _SUM_TOL:
        raise InputError(
            f"zone_area_shares sum to {areas.sum():.8g}; expected 1 (every mapped cell is in one zone). "
            "Pass shares of the map's area, not of some zones."
        )
    if zone_codes is None:
        codes = np.arange(len(names), 0, -1, dtype=np.int64)
    else:
        if not isinstance(zone_codes, Mapping) or set(map(str, zone_codes)) != set(names):
            raise InputError(
                f"zone_codes={zone_codes!r}; expected one integer code for each zone of {names}."
            )
        lookup = {str(z): c for z, c in zone_codes.items()}
        codes = np.array([lookup[z] for z in names], dtype=np.int64)
        if np.unique(codes).size != codes.size:
            raise InputError(f"zone_codes={zone_codes!r} gives two zones the same code.")
    return names, areas, codes
