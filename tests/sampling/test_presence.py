"""Tests of presence cells (mlsites.sampling.presence_cells)."""

import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from affine import Affine
from rasterio.crs import CRS

from mlsites.errors import CRSError, DataQualityWarning, InputError, InsufficientDataError
from mlsites.grid import GridSpec
from mlsites.sampling import presence_cells, read_sites

X0, Y0 = 5000.0, 9000.0
# METHODS.md §7 check values are given to 6 decimals.
METHODS_ATOL = 1e-6


def make_grid(dx=10.0, dy=10.0, width=80, height=60, epsg=3857):
    return GridSpec(CRS.from_epsg(epsg), Affine(dx, 0, X0, 0, -dy, Y0), width, height)


def sites_gdf(geoms, ids=None, crs=3857):
    ids = ids if ids is not None else [f"s{i}" for i in range(len(geoms))]
    return gpd.GeoDataFrame({"site_id": ids}, geometry=list(geoms), crs=crs)


def cell_centres(grid, pad=0):
    """Centres of all cells, plus ``pad`` rings of cells beyond the grid edges."""
    rows, cols = np.meshgrid(np.arange(-pad, grid.height + pad), np.arange(-pad, grid.width + pad),
                             indexing="ij")
    x = X0 + (cols + 0.5) * grid.res[0]
    y = Y0 - (rows + 0.5) * grid.res[1]
    return rows.ravel(), cols.ravel(), x.ravel(), y.ravel()


def brute_point_cells(grid, px, py, radius):
    """Reference: every cell centre within radius (np.hypot) plus the containing cell.

    Cells beyond the grid edge are included so callers can count them.
    """
    pad = int(np.ceil(radius / min(grid.res))) + 1
    rows, cols, x, y = cell_centres(grid, pad)
    near = np.hypot(x - px, y - py) <= radius
    r_in = int(np.floor((Y0 - py) / grid.res[1]))
    c_in = int(np.floor((px - X0) / grid.res[0]))
    near |= (rows == r_in) & (cols == c_in)
    return set(zip(rows[near].tolist(), cols[near].tolist()))


def cells_of(table, site_id):
    sub = table[table["site_id"] == site_id]
    return set(zip(sub["row"].tolist(), sub["col"].tolist()))


def test_methods_check_values_12_3_1_cells():
    grid = make_grid()
    # 12 cell centres inside a 4 x 3 cell box; 3 inside a 3 x 1 box; one point, buffer 0.
    big = shapely.box(X0 + 101, Y0 - 329, X0 + 139, Y0 - 301)   # 4 cols x 3 rows of centres
    small = shapely.box(X0 + 201, Y0 - 109, X0 + 229, Y0 - 101)  # 3 cols x 1 row
    point = shapely.Point(X0 + 503.3, Y0 - 407.7)
    table = presence_cells(sites_gdf([big, small, point], ["big", "small", "pt"]), grid)
    w = table.groupby("site_id")["weight"]
    assert w.size().to_dict() == {"big": 12, "small": 3, "pt": 1}
    # METHODS.md §7: sites with 12, 3, 1 cells -> per-cell weights 0.083333, 0.333333, 1.
    np.testing.assert_allclose(table.loc[table.site_id == "big", "weight"], 0.083333,
                               atol=METHODS_ATOL, rtol=0)
    np.testing.assert_allclose(table.loc[table.site_id == "small", "weight"], 0.333333,
                               atol=METHODS_ATOL, rtol=0)
    np.testing.assert_allclose(table.loc[table.site_id == "pt", "weight"], 1.0,
                               atol=METHODS_ATOL, rtol=0)
    np.testing.assert_allclose(w.sum(), 1.0, atol=1e-12, rtol=0)  # each site totals 1


@pytest.mark.parametrize("dx,dy", [(10.0, 10.0), (7.5, 12.0)])
@pytest.mark.parametrize("buffer_m", [0.0, 3.0, 6.5, 25.0, 61.3])
def test_point_buffers_match_brute_force(dx, dy, buffer_m):
    grid = make_grid(dx, dy)
    rng = np.random.default_rng(11)
    px = X0 + rng.uniform(0, grid.width * dx, 25)
    py = Y0 - rng.uniform(0, grid.height * dy, 25)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)  # buffers cut by the grid edge
        table = presence_cells(sites_gdf(shapely.points(px, py)), grid, buffer_m=buffer_m)
    for i in range(25):
        want = {(r, c) for r, c in brute_point_cells(grid, px[i], py[i], buffer_m)
                if 0 <= r < grid.height and 0 <= c < grid.width}
        assert cells_of(table, f"s{i}") == want
    np.testing.assert_allclose(table.groupby("site_id")["weight"].sum(), 1.0, rtol=0, atol=1e-12)


def test_polygon_cells_match_shapely_containment():
    grid = make_grid(10.0, 10.0, width=70, height=70)
    ox, oy = X0 + 0.37, Y0 - 0.61  # offsets keep edges off cell centres
    outer = [(ox + 50, oy - 60), (ox + 420, oy - 90), (ox + 300, oy - 400), (ox + 120, oy - 330)]
    hole = [(ox + 180, oy - 150), (ox + 260, oy - 160), (ox + 230, oy - 240)]
    with_hole = shapely.Polygon(outer, [hole])
    tri = shapely.Polygon([(ox + 450, oy - 450), (ox + 690, oy - 470), (ox + 520, oy - 680)])
    multi = shapely.MultiPolygon([shapely.box(ox + 20, oy - 690, ox + 95, oy - 610),
                                  shapely.box(ox + 140, oy - 660, ox + 171, oy - 640)])
    # Cut by the grid edge: only centres on the grid count.
    edge = shapely.box(X0 + 640.3, Y0 - 120.2, X0 + 760.1, Y0 - 20.4)
    geoms = [with_hole, tri, multi, edge]
    table = presence_cells(sites_gdf(geoms), grid)
    rows, cols, x, y = cell_centres(grid)
    for i, g in enumerate(geoms):
        inside = shapely.contains_xy(g, x, y)  # reference: shapely point-in-polygon
        assert cells_of(table, f"s{i}") == set(zip(rows[inside].tolist(), cols[inside].tolist()))
        assert inside.sum() > 3
    np.testing.assert_allclose(table.groupby("site_id")["weight"].sum(), 1.0, rtol=0, atol=1e-12)


def test_polygon_smaller_than_cell_uses_representative_point():
    grid = make_grid()
    tiny = shapely.box(X0 + 31, Y0 - 48, X0 + 33, Y0 - 46)  # between cell centres
    table = presence_cells(sites_gdf([tiny]), grid)
    p = tiny.representative_point()
    want = {(int(np.floor((Y0 - p.y) / 10)), int(np.floor((p.x - X0) / 10)))}
    assert cells_of(table, "s0") == want
    assert table["weight"].tolist() == [1.0]


def test_nodata_cells_removed_and_counted():
    grid = make_grid()
    rng = np.random.default_rng(5)
    mask = rng.random(grid.shape) > 0.3
    px = X0 + rng.uniform(100, 700, 10)
    py = Y0 - rng.uniform(100, 500, 10)
    with pytest.warns(DataQualityWarning, match="on nodata"):
        table = presence_cells(sites_gdf(shapely.points(px, py)), grid, buffer_m=22.0,
                               valid_mask=mask)
    n_removed = 0
    for i in range(10):
        full = brute_point_cells(grid, px[i], py[i], 22.0)
        kept = {rc for rc in full if mask[rc]}
        n_removed += len(full) - len(kept)
        assert cells_of(table, f"s{i}") == kept
    assert table.attrs["n_nodata_cells"] == n_removed > 0
    assert mask[table["row"], table["col"]].all()
    np.testing.assert_allclose(table.groupby("site_id")["weight"].sum(), 1.0, rtol=0, atol=1e-12)


def test_site_losing_all_cells_is_reported():
    grid = make_grid()
    mask = np.ones(grid.shape, dtype=bool)
    mask[:10, :10] = False
    pts = shapely.points([X0 + 45, X0 + 455], [Y0 - 45, Y0 - 455])
    with pytest.warns(DataQualityWarning, match=r"1 site\(s\) lost all cells.*\(gone\)"):
        table = presence_cells(sites_gdf(pts, ["gone", "kept"]), grid, buffer_m=15,
                               valid_mask=mask)
    assert set(table["site_id"]) == {"kept"}
    assert table.attrs["dropped"] == [{"site_id": "gone", "reason":
                                       "no usable cell (outside study area or nodata)"}]
    with pytest.raises(InsufficientDataError, match="none of the 1 sites covers a usable cell"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataQualityWarning)
            presence_cells(sites_gdf(pts[:1]), grid, buffer_m=15, valid_mask=mask)


def test_cells_outside_grid_counted():
    grid = make_grid()
    with pytest.warns(DataQualityWarning, match="outside the grid"):
        table = presence_cells(sites_gdf([shapely.Point(X0 + 2, Y0 - 2)]), grid, buffer_m=25)
    full = brute_point_cells(grid, X0 + 2, Y0 - 2, 25)
    kept = {(r, c) for r, c in full if r >= 0 and c >= 0}
    assert cells_of(table, "s0") == kept
    assert table.attrs["n_outside_cells"] == len(full) - len(kept) > 0
    np.testing.assert_allclose(table["weight"].sum(), 1.0, rtol=0, atol=1e-12)


def test_overlapping_sites_keep_both_rows():
    grid = make_grid()
    pts = shapely.points([X0 + 300, X0 + 310], [Y0 - 300, Y0 - 300])
    table = presence_cells(sites_gdf(pts, ["a", "b"]), grid, buffer_m=30)
    shared = cells_of(table, "a") & cells_of(table, "b")
    assert shared
    dup = table[table.duplicated(["row", "col"], keep=False)]
    assert len(dup) == 2 * len(shared)
    assert table.groupby("site_id")["weight"].sum().tolist() == pytest.approx([1.0, 1.0])


def test_one_cell_per_site():
    grid = make_grid()
    rng = np.random.default_rng(2)
    pts = shapely.points(X0 + rng.uniform(100, 700, 40), Y0 - rng.uniform(100, 500, 40))
    gdf = sites_gdf(pts)
    full = presence_cells(gdf, grid, buffer_m=40)
    one = presence_cells(gdf, grid, buffer_m=40, one_cell_per_site=True, random_state=3)
    assert len(one) == 40 and (one["weight"] == 1.0).all()
    assert one["site_id"].is_unique
    for sid, r, c in one[["site_id", "row", "col"]].itertuples(index=False):
        assert (r, c) in cells_of(full, sid)
    again = presence_cells(gdf, grid, buffer_m=40, one_cell_per_site=True, random_state=3)
    pd.testing.assert_frame_equal(one, again)
    other = presence_cells(gdf, grid, buffer_m=40, one_cell_per_site=True, random_state=4)
    # 40 sites of ~50 cells each: identical picks by chance have probability ~50**-40.
    assert not one.equals(other)


def test_callable_mask_equals_array_mask():
    grid = make_grid()
    rng = np.random.default_rng(8)
    mask = rng.random(grid.shape) > 0.2
    pts = shapely.points(X0 + rng.uniform(100, 700, 12), Y0 - rng.uniform(100, 500, 12))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        a = presence_cells(sites_gdf(pts), grid, buffer_m=20, valid_mask=mask)
        b = presence_cells(sites_gdf(pts), grid, buffer_m=20, valid_mask=lambda r, c: mask[r, c])
    pd.testing.assert_frame_equal(a, b)


def test_site_records_input_and_columns():
    grid = make_grid()
    gdf = sites_gdf(shapely.points([X0 + 55, X0 + 155], [Y0 - 55, Y0 - 155]), [7, 8])
    rec = read_sites(gdf, grid)
    table = presence_cells(rec, grid, buffer_m=10)
    assert list(table.columns) == ["row", "col", "x", "y", "site_id", "weight"]
    assert table["row"].dtype == np.int64 and table["weight"].dtype == np.float64
    np.testing.assert_allclose(table["x"], X0 + (table["col"] + 0.5) * 10.0)
    np.testing.assert_allclose(table["y"], Y0 - (table["row"] + 0.5) * 10.0)
    assert table["site_id"].tolist()[0] == "7"


def test_buffer_on_geographic_grid_refused():
    grid = GridSpec(CRS.from_epsg(4326), Affine(0.001, 0, 10, 0, -0.001, 50), 50, 50)
    gdf = sites_gdf([shapely.Point(10.02, 49.98)], crs=4326)
    with pytest.raises(CRSError, match="buffer_m=50.0 m needs a projected study grid"):
        presence_cells(gdf, grid, buffer_m=50)
    assert len(presence_cells(gdf, grid)) == 1  # buffer 0 works on any grid


def test_sites_without_crs_refused():
    grid = make_grid()
    gdf = gpd.GeoDataFrame({"site_id": ["a"]}, geometry=[shapely.Point(X0 + 5, Y0 - 5)])
    with pytest.raises(CRSError, match="has no CRS"):
        presence_cells(gdf, grid)


def test_sites_without_id_column_refused():
    grid = make_grid()
    gdf = gpd.GeoDataFrame({"name": ["a"]}, geometry=[shapely.Point(X0 + 5, Y0 - 5)], crs=3857)
    with pytest.raises(InputError, match="no 'site_id' column"):
        presence_cells(gdf, grid)
