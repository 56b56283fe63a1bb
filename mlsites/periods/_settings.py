"""Checks of the ``[periods]`` section of an experiment file.

Called by :mod:`mlsites.experiment._config` with the section (defaults filled)
and its ``bad(key, message)`` collector, so every problem is reported at once
with the others. Kept here, beside the code that uses the settings.
"""

from __future__ import annotations

import math

from mlsites.errors import InputError

__all__ = ["check_periods", "MIN_SIMULATIONS"]

#: Fewest simulations for a 95 % envelope (its tails then hold at least 2-3 draws each).
MIN_SIMULATIONS = 100


def check_periods(p: dict, bad) -> None:
    """Report every problem of a ``[periods]`` section through ``bad(key, message)``."""
    from mlsites.periods._aoristic import DENSITIES, time_blocks
    from mlsites.periods._dates import check_year_pairs
    from mlsites.periods._windows import WINDOW_NAME

    width = p["block_width_years"]
    if not (math.isfinite(width) and width >= 1):
        bad("periods.block_width_years", f"{width!r} years; blocks must be at least a year wide")
    span = p["span"]
    if span is not None:
        ok = isinstance(span, list) and len(span) == 2 and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in span)
        if not ok or span[1] <= span[0]:
            bad("periods.span", f"{span!r}; expected [start, end] with start < end (years, negative before year 1)")
        elif math.isfinite(width) and width >= 1 and math.isfinite(p["origin_year"]):
            try:
                time_blocks(width, span=span, origin=p["origin_year"])
            except InputError as exc:
                bad("periods.span", str(exc))
    if not math.isfinite(p["origin_year"]):
        bad("periods.origin_year", f"{p['origin_year']!r}; expected a year")
    if p["density"] not in DENSITIES:
        bad("periods.density", f"{p['density']!r} is not one of {', '.join(DENSITIES)}")
    elif p["density"] == "trapezoid" and not 0 < p["ramp_share"] <= 0.5:
        bad("periods.ramp_share", f"{p['ramp_share']!r}; each ramp takes a share in (0, 0.5] of a site's range")
    if p["n_simulations"] < MIN_SIMULATIONS:
        bad("periods.n_simulations", f"{p['n_simulations']}; at least {MIN_SIMULATIONS} are needed for a 95 % envelope")
    if p["bandwidth_m"] is not None and not p["bandwidth_m"] > 0:
        bad("periods.bandwidth_m", f"{p['bandwidth_m']!r}; expected a positive distance in metres "
            "(or leave it out for Scott's rule)")
    if not 0 <= p["min_probability"] < 1:
        bad("periods.min_probability", f"{p['min_probability']!r}; expected a probability in [0, 1)")
    if not p["site_squares_m"] > 0:
        bad("periods.site_squares_m", f"{p['site_squares_m']!r}; expected a positive distance in metres")
    if p["categories"] and not p["category_field"]:
        bad("periods.category_field", "[periods.categories] is given but category_field is not; name the "
            "column holding the dating categories")
    if p["category_field"] and not p["categories"]:
        bad("periods.categories", f"category_field = {p['category_field']!r} needs the table "
            "[periods.categories] of category = [start, end]")
    for msg in check_year_pairs(p["categories"], what="dating category", end_inclusive=p["end_inclusive"]):
        bad("periods.categories", msg)
    for msg in check_year_pairs(p["windows"], what="time window"):
        bad("periods.windows", msg)
    for name in p["windows"] if isinstance(p["windows"], dict) else {}:
        if not WINDOW_NAME.match(str(name)):
            bad(f"periods.windows.{name}", "window names use letters, digits, '_', '-' and '.'")
