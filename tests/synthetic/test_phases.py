"""Virtual sites of two invented phases with different preferences and uncertain dates."""

import numpy as np
import pytest

from mlsites.errors import InputError
from mlsites.periods import date_ranges, window_probabilities
from mlsites.synthetic import PHASED_CATEGORIES, TWO_PHASES, make_landscape, make_phased_sites
from mlsites.terrain import distance_to_cells, slope, tpi
from tests.synthetic.phased import phased_study


@pytest.fixture(scope="module")
def phased():
    return phased_study()


def _values(grid, layer, sites):
    r, c = grid.rowcol(sites.geometry.x.to_numpy(), sites.geometry.y.to_numpy())
    return layer[r, c]


def test_the_phases_prefer_different_ground(phased):
    grid, layers, ps = phased
    early = ps.sites[ps.sites["phase"] == "Mirewalk phase"]
    late = ps.sites[ps.sites["phase"] == "Spurfire phase"]
    assert len(early) == len(late) == 120
    # early sites near streams and low; late sites on high convex ground (their defining layers)
    assert np.median(_values(grid, layers["stream_distance"], early)) < 0.5 * np.nanmedian(layers["stream_distance"])
    assert np.median(_values(grid, layers["tpi"], late)) > np.nanpercentile(layers["tpi"], 75)
    assert np.median(_values(grid, layers["tpi"], early)) < np.median(_values(grid, layers["tpi"], late))
    # each phase sits where its own truth is high, more than where the other phase's truth is
    for own, other in [(early, "Mirewalk phase"), (late, "Spurfire phase")]:
        other_name = next(n for n in TWO_PHASES if n != other)
        assert _values(grid, ps.truth[other], own).mean() > _values(grid, ps.truth[other_name], own).mean()


def test_records_are_dated_by_categories_that_contain_the_true_year(phased):
    _, _, ps = phased
    s = ps.sites
    assert set(s["dating"]) <= set(PHASED_CATEGORIES)
    assert ((s["true_year"] >= s["start_year"]) & (s["true_year"] < s["end_year"])).all()
    assert {"Mirewalk to Spurfire", "early Mirewalk", "late Spurfire"} <= set(s["dating"])
    # the category table reads them back to the same ranges
    r = date_ranges(s, start_column=None, end_column=None, category_column="dating", categories=PHASED_CATEGORIES)
    np.testing.assert_array_equal(r.start, s["start_year"]) and np.testing.assert_array_equal(r.end, s["end_year"])


def test_phase_windows_weigh_their_own_sites_more(phased):
    _, _, ps = phased
    s = ps.sites
    w = window_probabilities(s["site_id"], s["start_year"], s["end_year"],
                             {k.split()[0].lower(): v for k, v in TWO_PHASES.items()}, min_probability=0)
    p = w.for_window("mirewalk").reindex(s["site_id"], fill_value=0.0).to_numpy()
    own = (s["phase"] == "Mirewalk phase").to_numpy()
    # expected from the dating shares: own 0.4 + 0.35 + 0.25 / 2 = 0.875, other 0.25 / 2 = 0.125
    assert p[own].mean() > 0.75 and p[~own].mean() < 0.25


def test_seeded_and_checked():
    land = make_landscape((60, 60), cellsize=20.0, random_state=1, valley_width_m=400.0, relief_m=60.0)
    dem = land.dem.astype(np.float64)
    layers = {"slope": slope(dem, 20.0), "tpi": tpi(dem, 20.0, radius=100.0),
              "stream_distance": distance_to_cells(land.streams > 0, 20.0)}
    a = make_phased_sites(layers, land.grid, n_sites=30, random_state=2).sites
    b = make_phased_sites(layers, land.grid, n_sites=30, random_state=2).sites
    assert a.equals(b)
    with pytest.raises(InputError, match="share_early"):
        make_phased_sites(layers, land.grid, share_early=1.0)
