"""Tests for square/hexagon block ids, block polygons and block-to-fold assignment."""

import itertools

import numpy as np
import pytest
import shapely
from hypothesis import given
from hypothesis import strategies as st

from mlsites.errors import InputError, InsufficientDataError
from mlsites.folds import (
    assign_blocks_to_folds,
    block_ids,
    block_polygons,
    decode_block_ids,
    hexagon_block_ids,
    site_codes,
    square_block_ids,
)

SQRT3 = np.sqrt(3.0)


# --------------------------------------------------------------------- block ids


def test_square_block_ids_methods_check_values():
    # METHODS.md §6 check values (spatial blocks, common practice after Roberts et al. 2017)
    x = [120, 260, 410, 90, 350, 480]
    y = [80, 40, 390, 330, 150, 20]
    ids, col, row = square_block_ids(x, y, block_size=200, origin=(0, 0))
    expected = [(0, 0), (1, 0), (2, 1), (0, 1), (1, 0), (2, 0)]  # METHODS.md §6, exact
    assert list(zip(col.tolist(), row.tolist())) == expected
    assert ids[1] == ids[4] and np.unique(ids).size == 5
    assert ids.dtype == np.int64


def test_square_block_edges_go_east_and_north():
    # METHODS.md §6 block id = floor((x - x0) / B): a point on an edge joins the block
    # east / north of it; points west / south of the origin get negative indices.
    _, col, row = square_block_ids(
        [10.0, 210.0, 9.9, -0.5], [20.0, 20.0, 220.0, -200.0], block_size=200, origin=(10, 20)
    )
    assert col.tolist() == [0, 1, -1, -1]
    assert row.tolist() == [0, 0, 1, -2]


@given(
    st.lists(
        st.tuples(
            st.integers(-(2**29), 2**29), st.integers(-(2**29), 2**29)
        ),
        min_size=1,
        max_size=20,
    )
)
def test_decode_inverts_encoding(pairs):
    col, row = (np.array(v, dtype=np.int64) for v in zip(*pairs))
    # block centres -> ids -> (col, row) must give back the indices
    ids, c2, r2 = square_block_ids((col + 0.5) * 3.0, (row + 0.5) * 3.0, block_size=3.0)
    assert np.array_equal(c2, col) and np.array_equal(r2, row)
    dc, dr = decode_block_ids(ids)
    assert np.array_equal(dc, col) and np.array_equal(dr, row)


def _cell_centres(n_cols, n_rows, cell, x0=0.0, y0=0.0):
    xx, yy = np.meshgrid(x0 + (np.arange(n_cols) + 0.5) * cell, y0 + (np.arange(n_rows) + 0.5) * cell)
    return xx.ravel(), yy.ravel()


def test_square_blocks_match_polygon_containment():
    # Brute-force reference: explicit shapely squares, point-in-polygon per cell centre.
    # 10 m cells, B = 35 m, origin (3, 7): no centre lies on a block edge (5 + 10 m is
    # never 3 + 35 k or 7 + 35 k), so containment is unambiguous.
    x, y = _cell_centres(23, 17, 10.0)
    B, x0, y0 = 35.0, 3.0, 7.0
    ref_col = np.full(x.size, 99)
    ref_row = np.full(x.size, 99)
    for i, j in itertools.product(range(-1, 8), range(-1, 6)):
        sq = shapely.box(x0 + i * B, y0 + j * B, x0 + (i + 1) * B, y0 + (j + 1) * B)
        inside = shapely.contains_xy(sq, x, y)
        assert not (inside & (ref_col != 99)).any(), "reference squares overlap"
        ref_col[inside], ref_row[inside] = i, j
    ids, col, row = square_block_ids(x, y, block_size=B, origin=(x0, y0))
    assert np.array_equal(col, ref_col) and np.array_equal(row, ref_row)
    poly = block_polygons(ids, kind="square", block_size=B, origin=(x0, y0))
    geom = poly.set_index("block_id").geometry.loc[ids].to_numpy()
    assert shapely.contains_xy(geom, x, y).all()
    np.testing.assert_allclose(poly.area, B * B, rtol=1e-12)


def _reference_hexagons(width, x0, y0, orientation, n):
    """Hexagons of edge-to-edge distance ``width`` built directly from geometry."""
    radius = width / SQRT3
    polys, centres = [], []
    for i, j in itertools.product(range(-n, n + 1), repeat=2):
        if orientation == "pointy":  # vertical edges; rows spaced width * sqrt(3) / 2
            cx, cy = x0 + width * (i + j / 2.0), y0 + j * width * SQRT3 / 2.0
            start = 30.0
        else:  # horizontal edges; columns spaced width * sqrt(3) / 2
            cx, cy = x0 + i * width * SQRT3 / 2.0, y0 + width * (j + i / 2.0)
            start = 0.0
        ang = np.radians(start + 60.0 * np.arange(6))
        polys.append(shapely.Polygon(np.c_[cx + radius * np.cos(ang), cy + radius * np.sin(ang)]))
        centres.append((cx, cy))
    return np.array(polys), np.array(centres)


@pytest.mark.parametrize("orientation", ["pointy", "flat"])
def test_hexagon_blocks_match_polygon_containment(orientation):
    # Brute-force reference: each cell centre is located in an explicit shapely hexagon
    # lattice built in this test; our id's polygon must be that same hexagon.
    x, y = _cell_centres(30, 25, 10.0)
    width, x0, y0 = 47.3, 12.1, -3.7
    ref_polys, ref_centres = _reference_hexagons(width, x0, y0, orientation, n=12)
    ref = np.full(x.size, -1)
    for k, poly in enumerate(ref_polys):
        inside = shapely.contains_xy(poly, x, y)
        assert not (inside & (ref >= 0)).any(), "reference hexagons overlap"
        ref[inside] = k
    on_edge = ref < 0  # centres exactly on a shared edge: contained by neither
    assert on_edge.sum() <= 2
    ids, q, r = hexagon_block_ids(x, y, block_size=width, origin=(x0, y0), orientation=orientation)
    poly = block_polygons(ids, kind="hexagon", block_size=width, origin=(x0, y0), orientation=orientation)
    ours = poly.set_index("block_id").geometry.loc[ids].to_numpy()
    centroid = shapely.get_coordinates(shapely.centroid(ours))
    np.testing.assert_allclose(centroid[~on_edge], ref_centres[ref[~on_edge]], atol=1e-9)
    # point lies in (or, for edge points, on) its own hexagon; 1e-9 m covers rounding
    assert (shapely.distance(ours, shapely.points(x, y)) <= 1e-9).all()
    # METHODS-independent geometry: area of a hexagon with apothem w/2 is sqrt(3)/2 w^2
    np.testing.assert_allclose(poly.area, SQRT3 / 2 * width**2, rtol=1e-12)


def test_hexagon_origin_is_centre_of_hexagon_zero():
    ids, q, r = hexagon_block_ids([100.0, 100.0 + 4.9], [50.0, 50.0], block_size=10.0, origin=(100, 50))
    assert q.tolist() == [0, 0] and r.tolist() == [0, 0]
    # 5.1 m east is past the vertical edge at apothem 5 m (pointy hexagons)
    _, q, r = hexagon_block_ids([105.1], [50.0], block_size=10.0, origin=(100, 50))
    assert (q[0], r[0]) == (1, 0)


def test_block_ids_dispatch_equals_direct_calls():
    rng = np.random.default_rng(3)
    x, y = rng.uniform(-500, 500, 200), rng.uniform(-500, 500, 200)
    assert np.array_equal(block_ids(x, y, block_size=70), square_block_ids(x, y, block_size=70)[0])
    assert np.array_equal(
        block_ids(x, y, kind="hexagon", block_size=70, orientation="flat"),
        hexagon_block_ids(x, y, block_size=70, orientation="flat")[0],
    )


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"x": [0.0, np.nan], "y": [0.0, 1.0], "block_size": 10}, "row 1"),
        ({"x": [0.0, 1.0], "y": [0.0], "block_size": 10}, "x has 2"),
        ({"x": [0.0], "y": [0.0], "block_size": 0}, "block_size=0.0"),
        ({"x": [0.0], "y": [0.0], "block_size": 10, "kind": "triangle"}, "square, hexagon"),
        ({"x": [0.0], "y": [0.0], "block_size": 10, "kind": "hexagon", "orientation": "up"}, "pointy"),
    ],
)
def test_block_ids_reject_bad_input(kwargs, match):
    with pytest.raises(InputError, match=match):
        block_ids(**kwargs)


# ------------------------------------------------------------------- site codes


def test_site_codes_mark_background():
    assert site_codes([None, "a", "b", "a", np.nan]).tolist() == [-1, 0, 1, 0, -1]
    assert site_codes([-1.0, np.nan, 3, 3, 7]).tolist() == [-1, -1, 0, 0, 1]


# ------------------------------------------------------------- fold assignment


def _toy_landscape(seed, n_background=400, n_sites=30, extent=3000.0):
    """Background scattered uniformly; sites as clusters of 1..12 cells, some across edges."""
    rng = np.random.default_rng(seed)
    xb, yb = rng.uniform(0, extent, (2, n_background))
    size = rng.integers(1, 13, n_sites)
    cx, cy = rng.uniform(0, extent, (2, n_sites))
    xs = np.repeat(cx, size) + rng.normal(0, 60, size.sum())
    ys = np.repeat(cy, size) + rng.normal(0, 60, size.sum())
    site = np.concatenate([np.full(n_background, -1), np.repeat(np.arange(n_sites), size)])
    return np.r_[xb, xs], np.r_[yb, ys], site


def test_every_cell_of_a_site_shares_its_home_block_fold():
    x, y, site = _toy_landscape(0)
    bid = block_ids(x, y, block_size=500)
    res = assign_blocks_to_folds(bid, site_id=site, n_splits=4, random_state=0)
    block_fold = dict(zip(res.blocks["block_id"], res.blocks["fold"]))
    spanning = 0
    for s in range(site.max() + 1):
        cells = site == s
        assert np.unique(res.fold[cells]).size == 1
        # home block: the one holding most of the site's cells (equal cell weights),
        # ties to the lowest id -- recomputed here by counting
        blocks, counts = np.unique(bid[cells], return_counts=True)
        home = blocks[counts == counts.max()].min()
        assert res.fold[cells][0] == block_fold[home]
        spanning += blocks.size > 1
    assert spanning > 0, "fixture should have sites spanning blocks"
    bg = site < 0
    assert np.array_equal(res.fold[bg], [block_fold[b] for b in bid[bg]])


def test_fold_table_matches_fold_array():
    x, y, site = _toy_landscape(1)
    res = assign_blocks_to_folds(block_ids(x, y, block_size=400), site_id=site, n_splits=5, random_state=2)
    t = res.folds
    assert t["n_samples"].tolist() == np.bincount(res.fold, minlength=5).tolist()
    assert t["n_background"].tolist() == np.bincount(res.fold[site < 0], minlength=5).tolist()
    assert t["n_sites"].sum() == site.max() + 1
    np.testing.assert_allclose(t["presence_weight"].sum(), site.max() + 1, rtol=1e-12)
    assert set(res.fold.tolist()) == set(range(5))


def test_assignment_is_reproducible_with_a_seed():
    x, y, site = _toy_landscape(2)
    bid = block_ids(x, y, block_size=400)
    a = assign_blocks_to_folds(bid, site_id=site, n_splits=3, random_state=7)
    b = assign_blocks_to_folds(bid, site_id=site, n_splits=3, random_state=7)
    assert np.array_equal(a.fold, b.fold)


def _optimal_makespan(loads, k):
    """Brute force: smallest possible maximum fold load over all assignments."""
    best = np.inf
    for combo in itertools.product(range(k), repeat=len(loads)):
        best = min(best, np.bincount(combo, weights=loads, minlength=k).max())
    return best


@pytest.mark.parametrize("seed", range(6))
def test_presence_balance_within_graham_bound_of_brute_force(seed):
    # Largest-first greedy is Graham's LPT rule: max load <= (4/3 - 1/(3k)) * optimum
    # (Graham 1969, SIAM J. Appl. Math. 17:416-429, doi:10.1137/0117039). Optimum by
    # brute force over all assignments of 7 blocks to 3 folds (3^7 = 2187).
    rng = np.random.default_rng(seed)
    k, n_blocks = 3, 7
    sites_per_block = rng.integers(1, 6, n_blocks)
    bid = np.repeat(np.arange(n_blocks), sites_per_block)  # one single-cell site per sample
    site = np.arange(bid.size)
    res = assign_blocks_to_folds(bid, site_id=site, n_splits=k, random_state=seed)
    got = res.folds["presence_weight"].max()
    opt = _optimal_makespan(sites_per_block.astype(float), k)
    assert got <= (4 / 3 - 1 / (3 * k)) * opt + 1e-9


def test_background_balance_within_largest_block():
    # For background-only blocks the greedy rule always fills the lightest fold, so
    # the final spread of background counts is at most the largest such block
    # (list-scheduling bound), when presence blocks carry no background.
    rng = np.random.default_rng(5)
    n_bg_blocks = 40
    bg_per_block = rng.integers(1, 30, n_bg_blocks)
    bid = np.r_[np.repeat(np.arange(n_bg_blocks), bg_per_block), 1000 + np.arange(6)]
    site = np.r_[np.full(bg_per_block.sum(), -1), np.arange(6)]
    res = assign_blocks_to_folds(bid, site_id=site, n_splits=3, random_state=0)
    spread = np.ptp(res.folds["n_background"])
    assert spread <= bg_per_block.max()
    assert res.folds["n_sites"].tolist() == [2, 2, 2]


def test_explicit_presence_weight_moves_home_block():
    # one site with 2 cells in block 0 and 1 cell in block 1; weights make block 1 home
    bid = np.array([0, 0, 1, 2, 3, 4, 5])
    site = np.array([0, 0, 0, 1, 2, -1, -1])
    w = np.array([0.1, 0.1, 0.8, 1.0, 1.0, 0.0, 0.0])
    res = assign_blocks_to_folds(bid, site_id=site, n_splits=3, presence_weight=w, random_state=0)
    fold_of_block = dict(zip(res.blocks["block_id"], res.blocks["fold"]))
    assert (res.fold[:3] == fold_of_block[1]).all()
    assert res.blocks.set_index("block_id").loc[1, "presence_weight"] == pytest.approx(1.0)
    assert res.blocks.set_index("block_id").loc[0, "presence_weight"] == 0.0


def test_more_folds_than_sites_is_an_error():
    with pytest.raises(InsufficientDataError, match=r"n_splits=5.*3 site\(s\).*fewer folds"):
        assign_blocks_to_folds(np.arange(10), site_id=[0, 1, 2] + [-1] * 7, n_splits=5)


def test_more_folds_than_blocks_is_an_error():
    with pytest.raises(InsufficientDataError, match=r"2 used block\(s\).*smaller"):
        assign_blocks_to_folds([0, 0, 0, 1, 1, 1], site_id=[0, 1, 2, 3, 4, 5], n_splits=3)


def test_fold_without_presences_names_fold_and_block_size():
    # 4 sites, all in 2 blocks, 3 folds: one fold must end without presences
    bid = [0, 0, 1, 1, 2, 3, 4]
    site = [0, 1, 2, 3, -1, -1, -1]
    with pytest.raises(InsufficientDataError, match=r"Fold \d has no presences.*smaller block size"):
        assign_blocks_to_folds(bid, site_id=site, n_splits=3, random_state=0)


def test_bad_n_splits_and_lengths():
    with pytest.raises(InputError, match="n_splits=1"):
        assign_blocks_to_folds([0, 1], site_id=[0, 1], n_splits=1)
    with pytest.raises(InputError, match="site_id has 1"):
        assign_blocks_to_folds([0, 1], site_id=[0], n_splits=2)
