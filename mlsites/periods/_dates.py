"""Date ranges of sites: from start and end years, or from dating categories.

Convention (METHODS.md §9, common practice): years lie on one continuous axis,
negative before year 1 (3450 BCE is -3450), and a range is half-open,
``[start, end)``, so its duration is ``end - start`` and a range "-3450 to -3150"
covers 300 years. Registers that mean the end year to be included ("3450-3150
BCE" as 301 years) set ``end_inclusive``: every end year then moves one year
later, ``[start, end + 1)``. Years are taken as given: a register using
historical numbering without a year 0 is one year off for dates before year 1
on this axis (1 BCE is taken as -1, not 0), which matters only for ranges that
cross year 1 and for blocks aligned on it.
"""

from __future__ import annotations

import numbers
from collections import Counter
from dataclasses import dataclass

import numpy as np
import pandas as pd

from mlsites.errors import InputError
from mlsites.sampling._sites import _clean_ids

__all__ = ["DateRanges", "date_ranges", "check_categories", "check_year_pairs"]

DROPPED_COLUMNS = ["site_id", "reason"]


@dataclass(frozen=True)
class DateRanges:
    """Half-open date ranges of sites and the records that have none.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per dated site, in input order: ``site_id`` (str), ``start``,
        ``end`` (float years, ``[start, end)``, after the end-year convention),
        ``source`` ("years" or "category") and ``category`` (the dating
        category, or empty). ``row`` is the site's position in the input.
    dropped : pandas.DataFrame
        ``site_id``, ``reason`` for each site without a usable date.
    mapping : pandas.DataFrame
        The category table used: ``category``, ``start``, ``end`` (as given),
        ``n_sites`` (sites dated by it). Empty without categories.
    end_inclusive : bool
        Whether end years were read as included (moved one year later).
    """

    table: pd.DataFrame
    dropped: pd.DataFrame
    mapping: pd.DataFrame
    end_inclusive: bool

    @property
    def start(self) -> np.ndarray:
        return self.table["start"].to_numpy(dtype=np.float64)

    @property
    def end(self) -> np.ndarray:
        return self.table["end"].to_numpy(dtype=np.float64)

    @property
    def site_id(self) -> np.ndarray:
        return self.table["site_id"].to_numpy(dtype=object)

    def summary(self) -> str:
        """One line: sites dated by years and by category, and those dropped with reasons."""
        n = self.table["source"].value_counts()
        line = (f"dated {len(self.table)} sites ({int(n.get('years', 0))} by start and end years, "
                f"{int(n.get('category', 0))} by dating category)")
        if len(self.dropped):
            parts = ", ".join(f"{k} {why}" for why, k in Counter(self.dropped["reason"]).most_common())
            line += f"; left out {len(self.dropped)} ({parts})"
        if len(self.table):
            line += f"; ranges span [{self.start.min():g}, {self.end.max():g})"
        return line + (" with end years included" if self.end_inclusive else "")


def _number(v) -> bool:
    return isinstance(v, numbers.Real) and not isinstance(v, bool) and np.isfinite(v)


def check_year_pairs(pairs, *, what, end_inclusive=False) -> list[str]:
    """Problems of a table ``name -> [start, end]`` (an empty list when it is fine).

    Used for dating categories and time windows; a pair must be two finite
    years with ``start < end`` (``start <= end`` when end years are included).
    """
    problems = []
    if not isinstance(pairs, dict):
        return [f"{what} must be a table of name = [start, end]"]
    for name, pair in pairs.items():
        if not (isinstance(pair, (list, tuple)) and len(pair) == 2 and all(_number(v) for v in pair)):
            problems.append(f"{what} {name!r} = {pair!r}; expected [start, end], two years "
                            "(negative before year 1)")
        elif pair[1] < pair[0] or (pair[1] == pair[0] and not end_inclusive):
            problems.append(f"{what} {name!r} = [{pair[0]:g}, {pair[1]:g}] ends before it starts or is empty; "
                            "give [start, end) with start < end")
    return problems


def check_categories(categories, *, end_inclusive=False) -> dict:
    """Return the category table as ``{name: (start, end)}`` after checking it.

    Raises
    ------
    InputError
        With every bad entry named.
    """
    problems = check_year_pairs(categories, what="dating category", end_inclusive=end_inclusive)
    if problems:
        raise InputError("; ".join(problems))
    return {str(k).strip(): (float(v[0]), float(v[1])) for k, v in categories.items()}


def date_ranges(sites, *, start_column="start_year", end_column="end_year", category_column=None,
                categories=None, end_inclusive=False, source="sites") -> DateRanges:
    """Date range ``[start, end)`` of every site, from its years or its dating category.

    Parameters
    ----------
    sites : pandas.DataFrame
        One row per site with ``site_id`` and, where available, the year and
        category columns (the ``sites`` of :func:`mlsites.sampling.read_sites`).
    start_column, end_column : str or None
        Columns of start and end years (negative before year 1); a missing
        column counts as unknown years.
    category_column : str, optional
        Column of dating categories (text), mapped to ranges by ``categories``.
        A site with a category takes its range from the table; a site without
        one falls back on its years.
    categories : dict of str to (float, float), optional
        Category -> [start, end) in years, same convention as the year columns.
    end_inclusive : bool, default False
        Read end years as included: ranges become ``[start, end + 1)``.
    source : str
        File name for messages.

    Returns
    -------
    DateRanges

    Raises
    ------
    InputError
        A site's end year lies before its start (counted, first ids named);
        a category is missing from the table (each category named with its
        number of records); a bad category table.

    Notes
    -----
    Sites with neither a category nor both years are left out and listed in
    ``dropped`` with the reason; they are not an error, as undated records are
    common in registers. A range with ``start == end`` is a point date (all
    its probability at ``start``), unless ``end_inclusive`` makes it one year.
    """
    n = len(sites)
    ids = _clean_ids(sites["site_id"]) if "site_id" in sites else np.arange(n).astype(str)
    ids = np.array([str(i) if v is None else v for i, v in enumerate(ids)], dtype=object)

    def years(col):
        if col is None or col not in sites:
            return np.full(n, np.nan)
        return pd.to_numeric(sites[col], errors="coerce").to_numpy(dtype=np.float64)

    start, end = years(start_column), years(end_column)
    reversed_ = np.isfinite(start) & np.isfinite(end) & (end < start)
    if reversed_.any():
        first = ", ".join(map(str, ids[reversed_][:5]))
        raise InputError(f"{source}: {int(reversed_.sum())} site(s) have an end year before their start year "
                         f"(first: {first}); fix the years (negative before year 1) or swap the start and "
                         "end fields")
    cat = np.full(n, None, dtype=object)
    table = {}
    if category_column is not None:
        if category_column not in sites:
            raise InputError(f"{source}: no column {category_column!r} (the category_field); columns found: "
                             f"{', '.join(str(c) for c in sites.columns if c != 'geometry')}")
        table = check_categories(categories or {}, end_inclusive=end_inclusive)
        cat = _clean_ids(sites[category_column])  # text, stripped; None when empty
        unmapped = Counter(c for c in cat if c is not None and c not in table)
        if unmapped:
            listed = ", ".join(f"{c!r} ({k} record{'s' if k > 1 else ''})" for c, k in unmapped.most_common())
            raise InputError(f"{source}: {len(unmapped)} dating categor{'y is' if len(unmapped) == 1 else 'ies are'} "
                             f"missing from [periods.categories]: {listed}; add each as \"name\" = [start, end] "
                             "or correct the records")
    by_cat = np.array([c is not None for c in cat])
    if by_cat.any():
        start = np.where(by_cat, [table[c][0] if c is not None else np.nan for c in cat], start)
        end = np.where(by_cat, [table[c][1] if c is not None else np.nan for c in cat], end)
    has_years = np.isfinite(start) & np.isfinite(end)
    if end_inclusive:
        end = end + 1.0
    reasons = np.where(np.isfinite(start) | np.isfinite(end), "no date: start or end year missing",
                       "no date: no category and no years" if category_column else "no date: no start and end year")
    kept = has_years
    out = pd.DataFrame({"site_id": pd.Series(ids[kept], dtype=str), "start": start[kept], "end": end[kept],
                        "source": np.where(by_cat, "category", "years")[kept],
                        "category": pd.Series(cat[kept], dtype=object).fillna(""),
                        "row": np.flatnonzero(kept)})
    dropped = pd.DataFrame({"site_id": pd.Series(ids[~kept], dtype=str), "reason": reasons[~kept]},
                           columns=DROPPED_COLUMNS)
    used = Counter(c for c in cat if c is not None)
    mapping = pd.DataFrame([{"category": c, "start": a, "end": b, "n_sites": used.get(c, 0)}
                            for c, (a, b) in table.items()], columns=["category", "start", "end", "n_sites"])
    return DateRanges(table=out, dropped=dropped, mapping=mapping, end_inclusive=bool(end_inclusive))
