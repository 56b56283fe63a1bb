"""Virtual sites: drawn from the known preference surface, clustered, survey-biased, reproducible."""

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin
from scipy.ndimage import gaussian_filter
from scipy.spatial import cKDTree
from sklearn.metrics import roc_auc_score

from mlsites.grid import GridSpec
from mlsites.synthetic import PHASES, make_virtual_sites, preference_surface

GRID = GridSpec(rasterio.crs.CRS.from_epsg(32631), from_origin(300000.0, 6000000.0, 10.0, 10.0), 150, 140)


def _layers(seed=0):
    # Smooth invented fields standing in for terrain layers (Gaussian-filtered noise).
    rng = np.random.default_rng(seed)
    f = [gaussian_filter(rng.normal(size=GRID.shape), 8) for _ in range(3)]
    f = [(a - a.mean()) / a.std() for a in f]
    return {
        "stream_distance": np.abs(f[0]) * 400.0,
        "slope": 6.0 + 4.0 * f[1],
        "northness": np.clip(f[2], -1, 1),
        "tpi": 3.0 * f[0],
    }


def test_preference_surface_matches_formula():
    layers = _layers()
    pref = {"slope": ("linear", {"coefficient": -0.3}), "stream_distance": ("near", {"scale_m": 200.0, "weight": 1.0})}
    got = preference_surface(layers, pref)
    # Written out by hand from the documented term definitions.
    log_i = -0.3 * layers["slope"] - 1.0 * (1 - np.exp(-layers["stream_distance"] / 200.0))
    np.testing.assert_allclose(got, np.exp(log_i - log_i.max()), rtol=1e-12)
    assert got.max() == pytest.approx(1.0)


def test_sites_follow_the_truth():
    vs = make_virtual_sites(_layers(), GRID, n_sites=400, random_state=1)
    rows, cols = GRID.rowcol(vs.all_sites.geometry.x, vs.all_sites.geometry.y)
    truth_at_sites = vs.truth[rows, cols]
    # Sites vs all cells: the truth must rank site cells high (AUC well above 0.5, the
    # chance level of a presence-background AUC; Phillips et al. 2006 on its ceiling < 1).
    y = np.r_[np.ones(rows.size), np.zeros(vs.truth.size)]
    s = np.r_[truth_at_sites, vs.truth.ravel()]
    assert roc_auc_score(y, s) > 0.75


def test_survey_bias_concentrates_records_in_strips():
    vs = make_virtual_sites(_layers(), GRID, n_sites=400, random_state=2)
    recorded = vs.all_sites[vs.all_sites["recorded"]]
    share_in_strips = recorded["in_survey"].mean()
    area_share = vs.survey.union_all().area / (GRID.width * GRID.height * 100.0)
    # With detection 0.85 inside and 0.05 outside, recorded sites sit in the strips far
    # more often than the strips' share of the area (Bayes' rule on the two rates).
    assert share_in_strips > min(0.95, area_share + 0.3)
    assert len(vs.sites) == len(recorded)


def test_clustering_clark_evans_ratio_below_one():
    # Clark & Evans (1954) ratio R = mean NN distance / (0.5 / sqrt(density)); R < 1 = clustered.
    layers = _layers()
    flat = {"slope": ("linear", {"coefficient": 0.0})}
    vs = make_virtual_sites(layers, GRID, n_sites=300, preference=flat, cluster_size=5, cluster_radius_m=40,
                            random_state=3)
    xy = np.c_[vs.all_sites.geometry.x, vs.all_sites.geometry.y]
    d, _ = cKDTree(xy).query(xy, k=2)
    area = GRID.width * GRID.height * 100.0
    r = d[:, 1].mean() / (0.5 / np.sqrt(len(xy) / area))
    assert r < 0.8


def test_reproducible_and_dated():
    a = make_virtual_sites(_layers(), GRID, n_sites=120, random_state=5)
    b = make_virtual_sites(_layers(), GRID, n_sites=120, random_state=5)
    c = make_virtual_sites(_layers(), GRID, n_sites=120, random_state=6)
    assert a.all_sites.to_wkb().equals(b.all_sites.to_wkb())
    assert not a.all_sites.geometry.equals(c.all_sites.geometry)
    starts = {s for s, _ in PHASES.values()}
    ends = {e for _, e in PHASES.values()}
    assert set(a.all_sites["start_year"]) <= starts and set(a.all_sites["end_year"]) <= ends
    assert (a.all_sites["start_year"] < a.all_sites["end_year"]).all()
