"""Tests of background sampling (mlsites.sampling.sample_background, balance_weights, sample_weights)."""

import io
import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from affine import Affine
from pyproj import Transformer
from rasterio.crs import CRS
from scipy.stats import chisquare

from mlsites.errors import (
    CRSError,
    DataQualityWarning,
    InputError,
    InsufficientDataError,
    VectorReadError,
)
from mlsites.grid import GridSpec
from mlsites.sampling import balance_weights, sample_background, sample_weights

X0, Y0, CELL = 2000.0, 8000.0, 10.0
# Significance level of the loose, seeded goodness-of-fit checks (common practice: a test
# that fails only for a real bias, not for an unlucky seed).
ALPHA = 1e-3
# Binomial tolerance: 4 standard deviations (two-sided chance of a false failure ~6e-5).
N_SIGMA = 4.0


def make_grid(width=64, height=64):
    return GridSpec(CRS.from_epsg(3857), Affine(CELL, 0, X0, 0, -CELL, Y0), width, height)


def centres(grid, rows, cols):
    return X0 + (np.asarray(cols) + 0.5) * CELL, Y0 - (np.asarray(rows) + 0.5) * CELL


def table_bytes(df):
    buf = io.BytesIO()
    df.to_parquet(buf, index=False)
    return buf.getvalue()


def test_balance_weights_methods_check_value():
    # METHODS.md §7 (balanced weighting): 3 presences, 10 000 background -> w_bg = 0.0003.
    assert balance_weights(3.0, 10_000) == 0.0003
    with pytest.raises(InputError, match="n_background=0"):
        balance_weights(3.0, 0)
    with pytest.raises(InputError, match="presence_weight_total=0"):
        balance_weights(0, 10)


def test_sample_weights_ratios_mean_one_and_duplication():
    # METHODS.md §7 check values: sites of 12, 3 and 1 cells weigh 1/12, 1/3 and 1 per
    # cell (each site 1 in total) and 10 000 background cells 3/10 000 each, before the
    # common factor that makes the mean weight 1 (n / (2 * n_sites) = 10 016 / 6).
    label = np.r_[np.ones(16, int), np.zeros(10_000, int)]
    site_id = np.r_[["a"] * 12, ["b"] * 3, ["c"], [""] * 10_000].astype(object)
    w = sample_weights(label, site_id)
    factor = 10_016 / 6
    np.testing.assert_allclose(w[:12], factor * 0.083333, rtol=1e-5)
    np.testing.assert_allclose(w[12:15], factor * 0.333333, rtol=1e-5)
    assert w[15] == pytest.approx(factor * 1.0, rel=1e-12)
    np.testing.assert_allclose(w[16:], factor * 0.0003, rtol=1e-12)
    assert w.mean() == pytest.approx(1.0, rel=1e-12)
    # the same sites twice under new ids and the background twice: every row keeps its weight
    twice = sample_weights(np.r_[label, label], np.r_[site_id, np.char.add("x", site_id.astype(str))])
    np.testing.assert_allclose(twice, np.r_[w, w], rtol=1e-12)
    with pytest.raises(InputError, match="both are needed"):
        sample_weights(np.ones(3, int), ["a", "b", "c"])


@pytest.mark.parametrize("n", [1, 200, 1500])
def test_count_valid_unique(n):
    grid = make_grid()
    rng = np.random.default_rng(1)
    mask = rng.random(grid.shape) > 0.35
    bg = sample_background(grid, n=n, valid_mask=mask, random_state=5)
    assert list(bg.columns) == ["row", "col", "x", "y", "weight"]
    assert len(bg) == n
    assert not bg.duplicated(["row", "col"]).any()
    assert mask[bg["row"], bg["col"]].all()
    ex, ey = centres(grid, bg["row"], bg["col"])
    np.testing.assert_allclose(bg["x"], ex, rtol=0, atol=1e-9)
    np.testing.assert_allclose(bg["y"], ey, rtol=0, atol=1e-9)
    assert (bg["weight"] == 1.0).all()
    assert bg.equals(bg.sort_values(["row", "col"]))


def test_fraction_of_valid_cells():
    grid = make_grid()
    mask = np.ones(grid.shape, dtype=bool)
    mask[:, :16] = False
    bg = sample_background(grid, fraction=0.1, valid_mask=mask)
    assert len(bg) == round(0.1 * mask.sum())


def test_same_seed_identical_different_seed_differs():
    grid = make_grid()
    pts = gpd.GeoDataFrame({"site_id": ["a", "b"]},
                           geometry=shapely.points([X0 + 200, X0 + 400], [Y0 - 200, Y0 - 300]),
                           crs=3857)
    kwargs = dict(n=300, exclude_sites=pts, exclusion_m=55.0)
    a = sample_background(grid, random_state=42, **kwargs)
    b = sample_background(grid, random_state=42, **kwargs)
    c = sample_background(grid, random_state=43, **kwargs)
    assert table_bytes(a) == table_bytes(b)
    assert (pd.util.hash_pandas_object(a) == pd.util.hash_pandas_object(b)).all()
    assert not a.equals(c)


def test_exclusion_distance_points_brute_force():
    grid = make_grid()
    rng = np.random.default_rng(3)
    sx, sy = X0 + rng.uniform(0, 640, 15), Y0 - rng.uniform(0, 640, 15)
    sites = gpd.GeoDataFrame({"site_id": range(15)}, geometry=shapely.points(sx, sy), crs=3857)
    bg = sample_background(grid, n=800, exclude_sites=sites, exclusion_m=60.0, random_state=1)
    assert bg.attrs["method"] == "rejection"
    d = np.hypot(bg["x"].to_numpy()[:, None] - sx, bg["y"].to_numpy()[:, None] - sy)
    assert d.min() > 60.0  # reference: all pairwise distances (NumPy)


def test_exclusion_polygons_brute_force():
    grid = make_grid()
    poly = shapely.Polygon([(X0 + 100.3, Y0 - 100.1), (X0 + 300.7, Y0 - 150.2),
                            (X0 + 200.1, Y0 - 400.9)])
    sites = gpd.GeoDataFrame({"site_id": ["p"]}, geometry=[poly], crs=3857)
    bg = sample_background(grid, n=500, exclude_sites=sites, exclusion_m=35.0, random_state=2)
    dist = shapely.distance(poly, shapely.points(bg["x"], bg["y"]))  # reference: GEOS distance
    assert dist.min() > 35.0


def test_enumeration_draws_exactly_the_acceptable_cells():
    """Asking for every acceptable cell returns exactly the brute-force acceptable set."""
    grid = make_grid(40, 30)
    rng = np.random.default_rng(9)
    mask = rng.random(grid.shape) > 0.3
    sx, sy = X0 + rng.uniform(0, 400, 6), Y0 - rng.uniform(0, 300, 6)
    sites = pd.DataFrame({"x": sx, "y": sy})
    rows, cols = np.nonzero(mask)
    x, y = centres(grid, rows, cols)
    far = np.hypot(x[:, None] - sx, y[:, None] - sy).min(axis=1) > 45.0
    n_ok = int(far.sum())
    bg = sample_background(grid, n=n_ok, valid_mask=mask, exclude_sites=sites, exclusion_m=45.0)
    assert bg.attrs["method"] == "enumeration"
    assert set(zip(bg["row"], bg["col"])) == set(zip(rows[far].tolist(), cols[far].tolist()))
    with pytest.raises(InsufficientDataError, match=f"only {n_ok} cells are valid and farther "
                                                    "than 45 m"):
        sample_background(grid, n=n_ok + 1, valid_mask=mask, exclude_sites=sites,
                          exclusion_m=45.0)


def test_uniform_over_quadrants():
    grid = make_grid()
    mask = np.ones(grid.shape, dtype=bool)
    mask[:20, :20] = False  # top-left quadrant loses 400 of its 1024 cells
    bg = sample_background(grid, n=1200, valid_mask=mask, random_state=7)
    quad = (bg["row"].to_numpy() >= 32) * 2 + (bg["col"].to_numpy() >= 32)
    observed = np.bincount(quad, minlength=4)
    valid_per_quad = np.array([mask[:32, :32].sum(), mask[:32, 32:].sum(),
                               mask[32:, :32].sum(), mask[32:, 32:].sum()])
    expected = 1200 * valid_per_quad / valid_per_quad.sum()
    # Without-replacement draws are less variable than multinomial, so the test is conservative.
    assert chisquare(observed, expected).pvalue > ALPHA


def test_each_cell_equally_likely_over_seeds():
    """Rejection with first-occurrence keeping is exactly uniform (frequency check)."""
    grid = make_grid(4, 4)
    mask = np.ones(grid.shape, dtype=bool)
    mask[0, :2] = mask[3, 3] = False  # 13 valid cells
    counts = np.zeros(grid.shape)
    n_rep = 300
    for seed in range(n_rep):
        bg = sample_background(grid, n=3, valid_mask=mask, random_state=seed)
        assert bg.attrs["method"] == "rejection"
        counts[bg["row"], bg["col"]] += 1
    assert counts[~mask].sum() == 0
    expected = np.full(13, n_rep * 3 / 13)
    assert chisquare(counts[mask], expected).pvalue > ALPHA


def test_tiny_valid_fraction_uses_enumeration():
    grid = make_grid(300, 300)
    mask = np.zeros(grid.shape, dtype=bool)
    mask[150, 10:250] = True  # 240 valid cells of 90 000 (0.27 %)
    bg = sample_background(grid, n=100, valid_mask=mask, random_state=0)
    assert bg.attrs["method"] == "enumeration"
    assert len(bg) == 100 and mask[bg["row"], bg["col"]].all()
    assert not bg.duplicated(["row", "col"]).any()


def test_callable_mask():
    grid = make_grid()
    bg = sample_background(grid, n=100, valid_mask=lambda r, c: (r + c) % 2 == 0)
    assert ((bg["row"] + bg["col"]) % 2 == 0).all() and len(bg) == 100


def test_callable_mask_with_few_valid_cells_terminates():
    """With a callable the valid count is unknown in advance; running out must not hang."""
    grid = make_grid(100, 100)

    def few(r, c):  # 100 valid cells of 10 000 (1 %)
        return (r % 10 == 0) & (c % 10 == 0)

    bg = sample_background(grid, n=90, valid_mask=few, random_state=1)
    assert len(bg) == 90 and few(bg["row"], bg["col"]).all()
    assert not bg.duplicated(["row", "col"]).any()
    with pytest.raises(InsufficientDataError, match="only 100 cells are valid"):
        sample_background(grid, n=101, valid_mask=few)


# -- survey coverage ------------------------------------------------------------------
@pytest.mark.parametrize("n,method", [(250, "rejection"), (700, "enumeration")])
def test_survey_inside_only_inside_and_reprojected(n, method):
    grid = make_grid()
    to_lonlat = Transformer.from_crs("EPSG:3857", "EPSG:4326", always_xy=True)
    walked = [shapely.box(X0 + 33.3, Y0 - 211.7, X0 + 288.2, Y0 - 47.9),
              shapely.Polygon([(X0 + 400.4, Y0 - 300.2), (X0 + 630.6, Y0 - 330.1),
                               (X0 + 500.5, Y0 - 610.3)])]
    lonlat = [shapely.transform(g, lambda c: np.column_stack(to_lonlat.transform(c[:, 0], c[:, 1])))
              for g in walked]
    survey = gpd.GeoDataFrame({"visits": [1, 2]}, geometry=lonlat, crs="EPSG:4326")
    bg = sample_background(grid, n=n, survey=survey, random_state=3)
    # Reference: containment in the original grid-CRS polygons; the PROJ round trip moves edges
    # by far less than the 0.1 m margin the polygon vertices keep from cell centres.
    inside = np.zeros(len(bg), dtype=bool)
    for g in walked:
        inside |= shapely.contains_xy(g, bg["x"], bg["y"])
    assert inside.all() and len(bg) == n
    assert bg.attrs["method"] == method


def test_survey_weighted_follows_effort():
    grid = make_grid(200, 200)
    left = shapely.box(X0, Y0 - 2000, X0 + 1000, Y0)
    right = shapely.box(X0 + 1000, Y0 - 2000, X0 + 2000, Y0)
    survey = gpd.GeoDataFrame({"effort": [1.0, 3.0]}, geometry=[left, right], crs=3857)
    n = 2000
    bg = sample_background(grid, n=n, survey=survey, survey_mode="weighted",
                           effort_field="effort", random_state=11)
    share_right = (bg["col"] >= 100).mean()
    p = 3.0 / 4.0  # effort ratio 3:1 over equal areas (Phillips et al. 2009 target-group idea)
    assert abs(share_right - p) < N_SIGMA * np.sqrt(p * (1 - p) / n)


def test_survey_weighted_overlaps_add_up():
    grid = make_grid(200, 200)
    everything = shapely.box(X0 - 5, Y0 - 2005, X0 + 2005, Y0 + 5)
    corner = shapely.box(X0 - 5, Y0 - 1000, X0 + 1000, Y0 + 5)  # top-left quarter
    survey = gpd.GeoDataFrame({"v": [1, 1]}, geometry=[everything, corner], crs=3857)
    n = 2000
    bg = sample_background(grid, n=n, survey=survey, survey_mode="weighted", effort_field="v",
                           random_state=4)
    share = ((bg["row"] < 100) & (bg["col"] < 100)).mean()
    p = 2 * 0.25 / (2 * 0.25 + 1 * 0.75)  # quarter has effort 2, the rest 1 -> 0.4
    assert abs(share - p) < N_SIGMA * np.sqrt(p * (1 - p) / n)


def test_survey_weighted_enumeration_follows_effort():
    grid = make_grid(400, 400)
    # Valid cells are two bands of 300 cells (0.375 % of the grid): the enumeration path.
    mask = np.zeros(grid.shape, dtype=bool)
    mask[50, 50:350] = mask[300, 50:350] = True
    top = shapely.box(X0 - 5, Y0 - 2000, X0 + 4005, Y0 + 5)
    bottom = shapely.box(X0 - 5, Y0 - 4005, X0 + 4005, Y0 - 2000)
    survey = gpd.GeoDataFrame({"effort": [1.0, 4.0]}, geometry=[top, bottom], crs=3857)
    counts = 0
    n_rep, n = 100, 6
    for seed in range(n_rep):
        bg = sample_background(grid, n=n, valid_mask=mask, survey=survey, survey_mode="weighted",
                               effort_field="effort", random_state=seed)
        assert bg.attrs["method"] == "enumeration"
        assert mask[bg["row"], bg["col"]].all()
        counts += int((bg["row"] == 300).sum())
    # Effort 4 vs 1 over equal cell counts -> share 4/5. Drawing 6 of 600 cells without
    # replacement moves the expected share by < 0.01 (a simulation gives 0.798), added to the band.
    p, total = 0.8, n_rep * n
    assert abs(counts / total - p) < N_SIGMA * np.sqrt(p * (1 - p) / total) + 0.01


def _patchy_survey(efforts):
    """Three small walked patches in different 16-cell blocks of a 40 x 40 grid."""
    patches = [
        shapely.Polygon([(X0 + 12, Y0 - 13), (X0 + 61, Y0 - 18), (X0 + 33, Y0 - 52)]),
        shapely.box(X0 + 171, Y0 - 229, X0 + 219, Y0 - 201),
        shapely.box(X0 + 301, Y0 - 389, X0 + 339, Y0 - 361),
    ]
    return gpd.GeoDataFrame({"effort": efforts}, geometry=patches, crs=3857), patches


@pytest.mark.parametrize("mode", ["inside", "weighted"])
def test_survey_single_draw_probabilities(mode):
    """One draw per seed: P(cell) is uniform over surveyed cells, or effort / total effort."""
    grid = make_grid(40, 40)
    efforts = [1.0, 2.0, 5.0]
    survey, patches = _patchy_survey(efforts)
    rows, cols = np.mgrid[0:40, 0:40]
    x, y = centres(grid, rows.ravel(), cols.ravel())
    patch = np.full(x.size, -1)
    for k, g in enumerate(patches):  # reference: shapely containment of cell centres
        patch[shapely.contains_xy(g, x, y)] = k
    surveyed = patch >= 0
    counts = np.zeros(x.size)
    n_rep = 200
    for seed in range(n_rep):
        bg = sample_background(grid, n=1, survey=survey, survey_mode=mode, effort_field="effort",
                               random_state=seed)
        assert bg.attrs["method"] == "rejection"
        counts[bg["row"].iloc[0] * 40 + bg["col"].iloc[0]] += 1
    assert counts[~surveyed].sum() == 0
    if mode == "inside":
        # Every surveyed cell equally likely (about 6 expected per cell).
        expected = np.full(int(surveyed.sum()), n_rep / surveyed.sum())
        assert chisquare(counts[surveyed], expected).pvalue > ALPHA
    else:
        # Per patch: share = effort x cells / total (target-group weighting, exact for one draw).
        n_cells = np.bincount(patch[surveyed], minlength=3)
        per_patch = np.bincount(patch[surveyed], weights=counts[surveyed], minlength=3)
        expected = n_rep * np.array(efforts) * n_cells / (np.array(efforts) * n_cells).sum()
        assert chisquare(per_patch, expected).pvalue > ALPHA


def test_survey_weighted_effort_varies_within_one_block():
    """Efforts 1 and 9 inside one proposal block: only the acceptance step can tell them apart."""
    grid = make_grid(16, 16)
    left = shapely.box(X0 - 1, Y0 - 161, X0 + 80, Y0 + 1)
    right = shapely.box(X0 + 80, Y0 - 161, X0 + 161, Y0 + 1)
    survey = gpd.GeoDataFrame({"effort": [1.0, 9.0]}, geometry=[left, right], crs=3857)
    n_rep = 80  # a bug ignoring effort gives a share near 0.5, far outside the band
    right_hits = 0
    for seed in range(n_rep):
        bg = sample_background(grid, n=1, survey=survey, survey_mode="weighted",
                               effort_field="effort", random_state=seed)
        right_hits += int(bg["col"].iloc[0] >= 8)
    p = 9.0 / 10.0  # equal cell counts, effort 9 : 1 (exact for a single draw)
    assert abs(right_hits / n_rep - p) < N_SIGMA * np.sqrt(p * (1 - p) / n_rep)


def test_survey_enumeration_exact_set():
    grid = make_grid(40, 40)
    survey, patches = _patchy_survey([1.0, 1.0, 1.0])
    rows, cols = np.mgrid[0:40, 0:40]
    rows, cols = rows.ravel(), cols.ravel()
    x, y = centres(grid, rows, cols)
    inside = np.zeros(x.size, dtype=bool)
    for g in patches:
        inside |= shapely.contains_xy(g, x, y)
    n_in = int(inside.sum())
    bg = sample_background(grid, n=n_in, survey=survey)
    assert bg.attrs["method"] == "enumeration"
    assert set(zip(bg["row"], bg["col"])) == set(zip(rows[inside].tolist(), cols[inside].tolist()))
    with pytest.raises(InsufficientDataError, match=f"only {n_in} cells are valid and surveyed"):
        sample_background(grid, n=n_in + 1, survey=survey)


def test_survey_with_exclusion_and_mask():
    grid = make_grid()
    walked = shapely.box(X0 + 5, Y0 - 635, X0 + 320, Y0 - 5)
    survey = gpd.GeoDataFrame(geometry=[walked], crs=3857)
    mask = np.ones(grid.shape, dtype=bool)
    mask[::3] = False
    sites = pd.DataFrame({"x": [X0 + 150.0], "y": [Y0 - 300.0]})
    bg = sample_background(grid, n=300, valid_mask=mask, survey=survey, exclude_sites=sites,
                           exclusion_m=80.0, random_state=2)
    assert shapely.contains_xy(walked, bg["x"], bg["y"]).all()
    assert mask[bg["row"], bg["col"]].all()
    assert np.hypot(bg["x"] - 150.0 - X0, bg["y"] + 300.0 - Y0).min() > 80.0


def test_survey_not_overlapping(tmp_path):
    grid = make_grid()
    away = gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 100, 100)], crs=3857)
    path = tmp_path / "walked.gpkg"
    away.to_file(path)
    with pytest.raises(InputError, match=r"walked\.gpkg: the survey polygons .* do not overlap "
                                         r"the study grid"):
        sample_background(grid, n=10, survey=path)


def test_survey_bad_inputs(tmp_path):
    grid = make_grid()
    box = shapely.box(X0, Y0 - 300, X0 + 300, Y0)
    with pytest.raises(InputError, match="no effort column 'hours'; columns found: v"):
        sample_background(grid, n=10, survey=gpd.GeoDataFrame({"v": [1]}, geometry=[box],
                                                               crs=3857),
                          survey_mode="weighted", effort_field="hours")
    with pytest.raises(InputError, match="negative value"):
        sample_background(grid, n=10, survey=gpd.GeoDataFrame({"v": [-1]}, geometry=[box],
                                                               crs=3857),
                          survey_mode="weighted", effort_field="v")
    with pytest.raises(CRSError, match="survey layer has no CRS"):
        sample_background(grid, n=10, survey=gpd.GeoDataFrame(geometry=[box]))
    line = gpd.GeoDataFrame(geometry=[shapely.LineString([(X0, Y0), (X0 + 9, Y0 - 9)])], crs=3857)
    with pytest.raises(InputError, match="holds LineString geometries; expected polygons"):
        sample_background(grid, n=10, survey=line)
    with pytest.raises(InputError, match="survey_mode='near'; expected one of inside, weighted"):
        sample_background(grid, n=10, survey_mode="near")
    with pytest.raises(VectorReadError, match=r"none\.gpkg: survey layer not found"):
        sample_background(grid, n=10, survey=tmp_path / "none.gpkg")


def test_survey_empty_feature_warns():
    grid = make_grid()
    walked = gpd.GeoDataFrame(geometry=[shapely.box(X0, Y0 - 300, X0 + 300, Y0), None], crs=3857)
    with pytest.warns(DataQualityWarning, match="ignored 1 survey feature"):
        sample_background(grid, n=10, survey=walked)


# -- bad input --------------------------------------------------------------------------
def test_bad_counts():
    grid = make_grid()
    with pytest.raises(InputError, match="exactly one of n"):
        sample_background(grid)
    with pytest.raises(InputError, match="exactly one of n"):
        sample_background(grid, n=5, fraction=0.1)
    with pytest.raises(InputError, match=r"fraction=1.5; expected a share in \(0, 1\]"):
        sample_background(grid, fraction=1.5)
    with pytest.raises(InputError, match="n=0"):
        sample_background(grid, n=0)
    mask = np.zeros(grid.shape, dtype=bool)
    mask[0, :5] = True
    with pytest.raises(InsufficientDataError, match="6 background cells requested but the study "
                                                    "area has 5 valid cells"):
        sample_background(grid, n=6, valid_mask=mask)
    with pytest.raises(InputError, match="fraction needs the study area"):
        sample_background(grid, fraction=0.1, valid_mask=lambda r, c: r > 0)


def test_exclusion_on_geographic_grid_refused():
    grid = GridSpec(CRS.from_epsg(4326), Affine(0.01, 0, 0, 0, -0.01, 1), 20, 20)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(CRSError, match="exclusion_m=100.0 m needs a projected study grid"):
            sample_background(grid, n=5, exclude_sites=pd.DataFrame({"x": [0.05], "y": [0.5]}),
                              exclusion_m=100)


def test_mask_shape_checked():
    from mlsites.errors import GridMismatchError

    with pytest.raises(GridMismatchError, match=r"valid_mask has shape \(3, 3\)"):
        sample_background(make_grid(), n=2, valid_mask=np.ones((3, 3), dtype=bool))
