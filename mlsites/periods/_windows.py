"""Period windows for models: each site's probability of belonging to a named window.

A period-specific model weighs each site by its probability of belonging to the
window (aoristic overlap with the site's date density). Sites whose probability
is below a minimum are left out of that window's model, each with its reason.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from mlsites.errors import InputError, InsufficientDataError
from mlsites.periods._aoristic import check_density, check_ranges
from mlsites.periods._dates import check_year_pairs

__all__ = ["WindowWeights", "window_probabilities", "check_windows", "WINDOW_NAME"]

#: Window names: they become column values and may become file or folder names.
WINDOW_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


@dataclass(frozen=True)
class WindowWeights:
    """Per-window site probabilities, the sites kept and those left out.

    Attributes
    ----------
    weights : pandas.DataFrame
        Sites kept for a window: ``window``, ``site_id``, ``probability`` (to
        be used as the site's sample weight in that window's model).
    left_out : pandas.DataFrame
        ``window``, ``site_id``, ``probability``, ``reason`` of every site not
        kept for a window.
    windows : pandas.DataFrame
        One row per window: ``window``, ``start``, ``end``, ``n_sites`` kept,
        ``weight_sum`` (expected number of sites of the window), ``n_left_out``.
    min_probability : float
    """

    weights: pd.DataFrame
    left_out: pd.DataFrame
    windows: pd.DataFrame
    min_probability: float

    def for_window(self, name: str) -> pd.Series:
        """Probability of each kept site of window ``name``, indexed by site id."""
        if name not in set(self.windows["window"]):
            raise InputError(f"no time window {name!r}; windows are {', '.join(self.windows['window'])}")
        part = self.weights[self.weights["window"] == name]
        return pd.Series(part["probability"].to_numpy(), index=part["site_id"].to_numpy(), name=name)


def check_windows(windows) -> dict:
    """Return ``{name: (start, end)}`` after checking names and year pairs (InputError)."""
    problems = check_year_pairs(windows, what="time window")
    problems += [f"time window name {name!r}: use letters, digits, '_', '-' and '.'"
                 for name in (windows if isinstance(windows, dict) else {}) if not WINDOW_NAME.match(str(name))]
    if problems:
        raise InputError("; ".join(problems))
    if not windows:
        raise InputError("no time windows given; name at least one as name = [start, end]")
    return {str(k): (float(v[0]), float(v[1])) for k, v in windows.items()}


def window_probabilities(site_id, start, end, windows, *, density="uniform", min_probability=0.1) -> WindowWeights:
    """Probability of each site belonging to each time window, with a minimum.

    Parameters
    ----------
    site_id : array_like of shape (n_sites,)
    start, end : array_like of shape (n_sites,)
        Site ranges ``[start, end)`` in years.
    windows : dict of str to (float, float)
        Window name -> ``[start, end)`` in years. Windows may overlap.
    density : str or DateDensity, default "uniform"
        Date density within a site's range (see :class:`DateDensity`).
    min_probability : float, default 0.1
        Sites with a smaller probability are left out of a window, in [0, 1).
        Sites with probability 0 are always left out.

    Returns
    -------
    WindowWeights

    Raises
    ------
    InputError
        Bad windows, years or ``min_probability``, or a window that overlaps no
        site's range (named with its years and the span of all ranges).
    InsufficientDataError
        A window overlaps some ranges but no site reaches ``min_probability``.

    Notes
    -----
    The probability is ``F(w1) - F(w0)`` for window ``[w0, w1)``, F the site's
    cumulative date distribution: for the uniform density the share of the
    site's range inside the window (aoristic overlap, Ratcliffe 2000).
    """
    wins = check_windows(windows)
    s, e = check_ranges(start, end)
    ids = np.asarray(site_id, dtype=object).ravel()
    if ids.size != s.size:
        raise InputError(f"{ids.size} site ids for {s.size} date ranges; give one id per site")
    if not (isinstance(min_probability, (int, float)) and 0 <= min_probability < 1):
        raise InputError(f"min_probability {min_probability!r}; expected a number in [0, 1)")
    dens = check_density(density)
    kept, left, rows = [], [], []
    for name, (w0, w1) in wins.items():
        p = dens.cdf(w1, s, e) - dens.cdf(w0, s, e)
        p = np.clip(p, 0.0, 1.0)
        if not (p > 0).any():
            span = f"[{s.min():g}, {e.max():g})" if s.size else "none"
            raise InputError(f"time window {name!r} [{w0:g}, {w1:g}) overlaps no site's date range (ranges span "
                             f"{span}); move the window or check its years (negative before year 1)")
        keep = (p > 0) & (p >= min_probability)
        if not keep.any():
            raise InsufficientDataError(
                f"time window {name!r} [{w0:g}, {w1:g}): no site reaches min_probability {min_probability:g} "
                f"(largest {p.max():.3g}); lower min_probability or widen the window")
        kept.append(pd.DataFrame({"window": name, "site_id": ids[keep], "probability": p[keep]}))
        why = np.where(p == 0, "date range outside the window",
                       [f"probability {v:.3g} below min_probability {min_probability:g}" for v in p])
        left.append(pd.DataFrame({"window": name, "site_id": ids[~keep], "probability": p[~keep],
                                  "reason": why[~keep]}))
        rows.append({"window": name, "start": w0, "end": w1, "n_sites": int(keep.sum()),
                     "weight_sum": float(p[keep].sum()), "n_left_out": int((~keep).sum())})
    return WindowWeights(weights=pd.concat(kept, ignore_index=True),
                         left_out=pd.concat(left, ignore_index=True),
                         windows=pd.DataFrame(rows), min_probability=float(min_probability))
