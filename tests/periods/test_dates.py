"""Date ranges from year fields or dating categories; conventions and bad input."""

import numpy as np
import pandas as pd
import pytest

from mlsites.errors import InputError
from mlsites.periods import aoristic_weights, date_ranges, time_blocks

CATEGORIES = {"first phase": [-3450, -3150], "second phase": [-3350, -3250]}


def _sites(**cols):
    n = len(next(iter(cols.values())))
    return pd.DataFrame({"site_id": [f"S{i}" for i in range(n)], **cols})


def test_years_are_half_open_by_default_and_inclusive_on_request():
    sites = _sites(start_year=[-3450.0], end_year=[-3150.0])
    blocks = time_blocks(100, span=(-3500, -3100))
    half = date_ranges(sites)
    assert (half.start[0], half.end[0]) == (-3450, -3150)
    incl = date_ranges(sites, end_inclusive=True)
    assert (incl.start[0], incl.end[0]) == (-3450, -3149)
    # METHODS.md §9 inclusive-year check values follow from the shifted end
    np.testing.assert_allclose(aoristic_weights(incl.start, incl.end, blocks)[0],
                               [0.166113, 0.332226, 0.332226, 0.169435], rtol=0, atol=1e-6)


def test_categories_map_to_ranges_and_the_mapping_is_reported():
    sites = _sites(phase=["first phase", " second phase", "first phase", None],
                   start_year=[np.nan, np.nan, np.nan, -3000.0], end_year=[np.nan, np.nan, np.nan, -2900.0])
    r = date_ranges(sites, category_column="phase", categories=CATEGORIES)
    assert r.table["start"].tolist() == [-3450, -3350, -3450, -3000]
    assert r.table["source"].tolist() == ["category", "category", "category", "years"]
    assert dict(zip(r.mapping["category"], r.mapping["n_sites"])) == {"first phase": 2, "second phase": 1}
    assert "3 by dating category" in r.summary() and "1 by start and end years" in r.summary()


def test_unmapped_categories_are_one_error_naming_each_with_its_count():
    sites = _sites(phase=["first phase", "third phase", "third phase", "fourth"])
    with pytest.raises(InputError) as err:
        date_ranges(sites, category_column="phase", categories=CATEGORIES)
    msg = str(err.value)
    assert "\n" not in msg
    assert "'third phase' (2 records)" in msg and "'fourth' (1 record)" in msg


def test_end_before_start_is_an_error():
    sites = _sites(start_year=[-3150.0, 10.0], end_year=[-3450.0, 20.0])
    with pytest.raises(InputError, match=r"1 site\(s\) have an end year before their start year \(first: S0\)"):
        date_ranges(sites)


def test_undated_sites_are_listed_not_silently_dropped():
    sites = _sites(start_year=[-3450.0, np.nan, np.nan], end_year=[-3150.0, -3000.0, np.nan])
    r = date_ranges(sites)
    assert r.table["site_id"].tolist() == ["S0"]
    assert r.dropped.to_dict(orient="list") == {"site_id": ["S1", "S2"],
                                                "reason": ["no date: start or end year missing",
                                                           "no date: no start and end year"]}


@pytest.mark.parametrize("table, match", [
    ({"a": [-3150, -3450]}, "ends before it starts"),
    ({"a": [-3150]}, "expected \\[start, end\\]"),
    ({"a": "early"}, "expected \\[start, end\\]"),
])
def test_bad_category_tables(table, match):
    with pytest.raises(InputError, match=match):
        date_ranges(_sites(phase=["a"]), category_column="phase", categories=table)


def test_missing_category_column():
    with pytest.raises(InputError, match="no column 'phase'"):
        date_ranges(_sites(start_year=[1.0], end_year=[2.0]), category_column="phase", categories=CATEGORIES)
