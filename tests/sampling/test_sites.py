"""Tests of reading and validating site records (mlsites.sampling.read_sites)."""

import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from affine import Affine
from pyproj import Transformer
from rasterio.crs import CRS

from mlsites.errors import (
    CRSError,
    DataQualityWarning,
    InputError,
    InsufficientDataError,
    VectorReadError,
)
from mlsites.grid import GridSpec
from mlsites.sampling import SiteRecords, check_n_splits, read_sites

X0, Y0, CELL, SIZE = 1_000_000.0, 5_000_000.0, 10.0, 200
# Reprojection reference: PROJ through pyproj, always (x, y) = (east, north) order.
TO_GRID = Transformer.from_crs("EPSG:4326", "EPSG:3857", always_xy=True)
TO_LONLAT = Transformer.from_crs("EPSG:3857", "EPSG:4326", always_xy=True)
# Both sides go through PROJ; 1 mm allows for a different but equivalent pipeline.
XY_ATOL_M = 1e-3


@pytest.fixture
def grid():
    return GridSpec(CRS.from_epsg(3857), Affine(CELL, 0, X0, 0, -CELL, Y0), SIZE, SIZE)


def _inside_points(n, seed=0):
    rng = np.random.default_rng(seed)
    x = X0 + rng.uniform(5, SIZE * CELL - 5, n)
    y = Y0 - rng.uniform(5, SIZE * CELL - 5, n)
    return x, y


def _quiet_read(*args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        return read_sites(*args, **kwargs)


# -- formats and reprojection ---------------------------------------------------------
def test_csv_with_crs_reprojected_like_pyproj(grid, tmp_path):
    x, y = _inside_points(20)
    lon, lat = TO_LONLAT.transform(x, y)
    table = pd.DataFrame({"name": [f"s{i}" for i in range(20)], "lon": lon, "lat": lat,
                          "from": np.arange(20) - 500, "to": np.arange(20) + 10,
                          "type": ["camp"] * 10 + ["burial"] * 10, "cert": np.linspace(0, 1, 20)})
    path = tmp_path / "sites.csv"
    table.to_csv(path, index=False)
    rec = read_sites(path, grid, id_field="name", crs="EPSG:4326", start_field="from",
                     end_field="to", kind_field="type", certainty_field="cert")
    back = pd.read_csv(path)
    ex, ey = TO_GRID.transform(back["lon"].to_numpy(), back["lat"].to_numpy())
    np.testing.assert_allclose(rec.sites.geometry.x, ex, rtol=0, atol=XY_ATOL_M)
    np.testing.assert_allclose(rec.sites.geometry.y, ey, rtol=0, atol=XY_ATOL_M)
    assert list(rec.sites["site_id"]) == [f"s{i}" for i in range(20)]
    np.testing.assert_array_equal(rec.sites["start_year"], np.arange(20) - 500.0)  # BCE negative
    np.testing.assert_array_equal(rec.sites["end_year"], np.arange(20) + 10.0)
    assert list(rec.sites["kind"]) == ["camp"] * 10 + ["burial"] * 10
    np.testing.assert_allclose(rec.sites["certainty"], np.linspace(0, 1, 20), rtol=1e-12)
    assert rec.sites.crs == grid.crs
    assert rec.dropped.empty and rec.summary() == (
        "read 20 site records from sites.csv; kept 20; dropped 0")


@pytest.mark.parametrize("suffix,driver", [(".gpkg", "GPKG"), (".geojson", "GeoJSON"),
                                           (".shp", "ESRI Shapefile")])
def test_vector_formats_reprojected_like_pyproj(grid, tmp_path, suffix, driver):
    x, y = _inside_points(12, seed=1)
    lon, lat = TO_LONLAT.transform(x, y)
    gdf = gpd.GeoDataFrame({"site_id": np.arange(100, 112), "start": -1200.0, "end": -800.0},
                           geometry=shapely.points(lon, lat), crs="EPSG:4326")
    path = tmp_path / f"sites{suffix}"
    gdf.to_file(path, driver=driver)
    rec = read_sites(path, grid, start_field="start", end_field="end")
    stored = gpd.read_file(path)
    ex, ey = TO_GRID.transform(stored.geometry.x.to_numpy(), stored.geometry.y.to_numpy())
    np.testing.assert_allclose(rec.sites.geometry.x, ex, rtol=0, atol=XY_ATOL_M)
    np.testing.assert_allclose(rec.sites.geometry.y, ey, rtol=0, atol=XY_ATOL_M)
    assert list(rec.sites["site_id"]) == [str(i) for i in range(100, 112)]
    assert (rec.sites["start_year"] == -1200).all() and (rec.sites["end_year"] == -800).all()
    assert rec.n_read == 12 and rec.n_kept == 12


def test_polygons_from_projected_file(grid, tmp_path):
    # A projected source (UTM zone 31N, chosen only as "another metric CRS").
    to_utm = Transformer.from_crs("EPSG:3857", "EPSG:32631", always_xy=True)
    boxes_grid = [shapely.box(X0 + 100, Y0 - 300, X0 + 160, Y0 - 250),
                  shapely.box(X0 + 900, Y0 - 900, X0 + 950, Y0 - 880)]
    boxes_utm = [shapely.transform(b, lambda c: np.column_stack(to_utm.transform(c[:, 0], c[:, 1])))
                 for b in boxes_grid]
    gdf = gpd.GeoDataFrame({"site_id": ["a", "b"]}, geometry=boxes_utm, crs="EPSG:32631")
    path = tmp_path / "areas.gpkg"
    gdf.to_file(path)
    rec = read_sites(path, grid)
    assert list(rec.sites.geom_type) == ["Polygon", "Polygon"]
    # Corners come back to the grid CRS within 1 mm (PROJ round trip).
    for got, want in zip(rec.sites.geometry, boxes_grid):
        np.testing.assert_allclose(got.bounds, want.bounds, rtol=0, atol=XY_ATOL_M)


# -- drop reasons -----------------------------------------------------------------------
def test_each_drop_reason_counted_and_listed(grid, tmp_path):
    x, y = _inside_points(12, seed=2)
    mask = np.ones(grid.shape, dtype=bool)
    r_nodata, c_nodata = grid.rowcol(x[6], y[6])
    mask[r_nodata, c_nodata] = False
    rows = [
        # (id, x, y, start, end, expected reason or None)
        ("a", x[0], y[0], "-100", "50", None),
        ("b", None, y[1], "", "", "missing coordinates"),
        (None, x[2], y[2], "", "", "missing id"),
        ("c", x[3], y[3], "early", "", "start year not a number"),
        ("d", x[4], y[4], "", "late", "end year not a number"),
        ("e", x[5], y[5], "300", "100", "start year after end year"),
        ("f", x[6], y[6], "", "", "on nodata cell"),
        ("g", X0 - 50, y[7], "", "", "outside study area"),
        ("a", x[8], y[8], "", "", "duplicate id"),
        ("h", x[0], y[0], "", "", "duplicate location"),
        ("i", x[9], y[9], "", "", None),
    ]
    table = pd.DataFrame(rows, columns=["site_id", "x", "y", "start", "end", "expect"])
    path = tmp_path / "messy.csv"
    table.drop(columns="expect").to_csv(path, index=False)
    with pytest.warns(DataQualityWarning, match="dropped 9"):
        rec = read_sites(path, grid, crs="EPSG:3857", start_field="start", end_field="end",
                         valid_mask=mask)
    expected = table.dropna(subset=["expect"]).reset_index()
    assert list(rec.dropped.columns) == ["source_row", "site_id", "reason"]
    assert list(rec.dropped["source_row"]) == list(expected["index"])
    assert list(rec.dropped["reason"]) == list(expected["expect"])
    assert list(rec.sites["site_id"]) == ["a", "i"]
    assert list(rec.sites["source_row"]) == [0, 10]
    assert rec.n_read == 11 and rec.n_kept == 2
    counts = rec.drop_counts()
    assert sum(counts.values()) == 9 and all(v == 1 for v in counts.values())
    assert rec.summary().startswith("read 11 site records from messy.csv; kept 2; dropped 9 (")


def test_empty_and_unsupported_geometries(grid, tmp_path):
    x, y = _inside_points(3, seed=3)
    geoms = [shapely.Point(x[0], y[0]), None, shapely.LineString([(x[1], y[1]), (x[2], y[2])]),
             shapely.MultiPoint([(x[2], y[2])])]
    gdf = gpd.GeoDataFrame({"site_id": ["p", "empty", "line", "mp"]}, geometry=geoms,
                           crs="EPSG:3857")
    path = tmp_path / "mixed.geojson"
    gdf.to_file(path, driver="GeoJSON")
    with pytest.warns(DataQualityWarning, match="dropped 2"):
        rec = read_sites(path, grid)
    assert dict(zip(rec.dropped["site_id"], rec.dropped["reason"])) == {
        "empty": "empty geometry", "line": "unsupported geometry type LineString"}
    # A single-part MultiPoint is read as its point.
    assert list(rec.sites["site_id"]) == ["p", "mp"]
    assert rec.sites.geometry.iloc[1].equals(shapely.Point(x[2], y[2]))


def test_duplicate_id_keeps_first_usable(grid):
    x, y = _inside_points(3, seed=4)
    # The first "k" lies outside, so the second "k" is the first usable one and is kept.
    gdf = gpd.GeoDataFrame({"site_id": ["k", "k", "k"]},
                           geometry=shapely.points([X0 - 5, x[1], x[2]], [y[0], y[1], y[2]]),
                           crs="EPSG:3857")
    rec = _quiet_read(gdf, grid)
    assert list(rec.sites["source_row"]) == [1]
    assert list(rec.dropped["reason"]) == ["outside study area", "duplicate id"]


def test_polygon_outside_dropped(grid):
    inside = shapely.box(X0 + 10, Y0 - 50, X0 + 40, Y0 - 20)
    outside = shapely.box(X0 - 500, Y0 - 50, X0 - 400, Y0 - 20)
    gdf = gpd.GeoDataFrame({"site_id": ["in", "out"]}, geometry=[inside, outside], crs=3857)
    rec = _quiet_read(gdf, grid)
    assert list(rec.sites["site_id"]) == ["in"]
    assert list(rec.dropped["reason"]) == ["outside study area"]


# -- bad input ----------------------------------------------------------------------------
def test_csv_without_coordinates(grid, tmp_path):
    path = tmp_path / "nocoords.csv"
    pd.DataFrame({"site_id": ["a"], "east_ish": [1.0], "name": ["x"]}).to_csv(path, index=False)
    with pytest.raises(InputError, match=r"nocoords\.csv: no x/y coordinate columns; "
                                         r"columns found: site_id, east_ish, name"):
        read_sites(path, grid, crs="EPSG:3857")


def test_csv_named_column_missing(grid, tmp_path):
    path = tmp_path / "s.csv"
    pd.DataFrame({"site_id": ["a"], "x": [X0], "y": [Y0]}).to_csv(path, index=False)
    with pytest.raises(InputError, match="columns found: site_id, x, y"):
        read_sites(path, grid, crs="EPSG:3857", x_field="east", y_field="north")
    with pytest.raises(InputError, match="no column 'period'"):
        read_sites(path, grid, crs="EPSG:3857", start_field="period")
    with pytest.raises(InputError, match="no column 'code'"):
        read_sites(path, grid, crs="EPSG:3857", id_field="code")


def test_csv_without_crs(grid, tmp_path):
    path = tmp_path / "s.csv"
    pd.DataFrame({"site_id": ["a"], "x": [X0 + 5], "y": [Y0 - 5]}).to_csv(path, index=False)
    with pytest.raises(CRSError, match=r"s\.csv: a CSV carries no CRS; set crs in \[sites\] \(or --crs\)"):
        read_sites(path, grid)


def test_vector_without_crs(grid, tmp_path):
    x, y = _inside_points(2)
    gdf = gpd.GeoDataFrame({"site_id": ["a", "b"]}, geometry=shapely.points(x, y))
    path = tmp_path / "nocrs.shp"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # the writer warns about the missing CRS
        gdf.to_file(path)
    with pytest.raises(CRSError, match=r"nocrs\.shp: the layer has no CRS; set crs in \[sites\] \(or --crs\)"):
        read_sites(path, grid)
    rec = read_sites(path, grid, crs="EPSG:3857")  # giving the CRS fixes it
    assert rec.n_kept == 2


def test_conflicting_crs(grid, tmp_path):
    x, y = _inside_points(2)
    gdf = gpd.GeoDataFrame({"site_id": ["a", "b"]}, geometry=shapely.points(x, y), crs=3857)
    path = tmp_path / "s.gpkg"
    gdf.to_file(path)
    with pytest.raises(CRSError, match="declares CRS EPSG:3857 but crs = 'EPSG:4326'"):
        read_sites(path, grid, crs="EPSG:4326")


def test_all_outside(grid, tmp_path):
    path = tmp_path / "far.csv"
    pd.DataFrame({"site_id": ["a", "b"], "x": [10.0, 11.0], "y": [45.0, 46.0]}).to_csv(
        path, index=False)
    # Degrees declared as metres put every site near the origin, far from the grid.
    with pytest.raises(InsufficientDataError, match=r"far\.csv: all 2 site records lie outside "
                                                    r"the study grid.*check that the CRS of the site coordinates is.*set crs in \[sites\]"):
        read_sites(path, grid, crs="EPSG:3857")


def test_multilayer_gpkg_needs_layer(grid, tmp_path):
    x, y = _inside_points(2)
    gdf = gpd.GeoDataFrame({"site_id": ["a", "b"]}, geometry=shapely.points(x, y), crs=3857)
    path = tmp_path / "two.gpkg"
    gdf.to_file(path, layer="first")
    gdf.iloc[:1].to_file(path, layer="second")
    with pytest.raises(InputError, match=r"has 2 layers \(first, second\); choose one with layer"):
        read_sites(path, grid)
    assert read_sites(path, grid, layer="second").n_kept == 1


def test_missing_file(grid, tmp_path):
    with pytest.raises(VectorReadError, match="file not found"):
        read_sites(tmp_path / "none.gpkg", grid)


def test_more_folds_than_sites(grid):
    x, y = _inside_points(3)
    gdf = gpd.GeoDataFrame({"site_id": ["a", "b", "c"]}, geometry=shapely.points(x, y), crs=3857)
    rec = read_sites(gdf, grid)
    rec.check_n_splits(3)
    with pytest.raises(InsufficientDataError, match=r"3 usable site\(s\) but 5 folds requested.*use at most 3 folds"):
        rec.check_n_splits(5)
    with pytest.raises(InsufficientDataError, match="cross-validation needs at least 2 sites"):
        check_n_splits(1, 2, source="s.gpkg")


def test_errors_are_one_line(grid, tmp_path):
    path = tmp_path / "nocoords.csv"
    pd.DataFrame({"a": [1]}).to_csv(path, index=False)
    with pytest.raises(InputError) as info:
        read_sites(path, grid, crs="EPSG:3857")
    assert "\n" not in str(info.value)


def test_records_type(grid):
    x, y = _inside_points(2)
    gdf = gpd.GeoDataFrame({"site_id": [1.0, 2.0]}, geometry=shapely.points(x, y), crs=3857)
    rec = read_sites(gdf, grid)
    assert isinstance(rec, SiteRecords)
    # Whole-number float ids (as some formats store them) become plain integer text.
    assert list(rec.sites["site_id"]) == ["1", "2"]


def test_invalid_polygon_repaired_with_warning(grid):
    bowtie = shapely.Polygon([(X0 + 10, Y0 - 10), (X0 + 90, Y0 - 90), (X0 + 90, Y0 - 10),
                              (X0 + 10, Y0 - 90)])
    assert not bowtie.is_valid
    gdf = gpd.GeoDataFrame({"site_id": ["bow"]}, geometry=[bowtie], crs=3857)
    with pytest.warns(DataQualityWarning, match="repaired 1 invalid polygon"):
        rec = read_sites(gdf, grid)
    g = rec.sites.geometry.iloc[0]
    assert g.is_valid and g.geom_type in ("Polygon", "MultiPolygon")
    # The bow tie is two triangles of base 80 m and height 40 m: 2 x 1600 m2 (geometry).
    assert g.area == pytest.approx(80 * 80 / 2, rel=1e-12)


def test_valid_mask_as_raster_path(grid, tmp_path):
    from mlsites.grid import write_array

    x, y = _inside_points(30, seed=6)
    rows, cols = grid.rowcol(x, y)
    data = np.ones(grid.shape, dtype=np.float32)
    data[rows[:5], cols[:5]] = np.nan  # the first five sites sit on nodata
    path = write_array(tmp_path / "area.tif", data, grid)
    gdf = gpd.GeoDataFrame({"site_id": range(30)}, geometry=shapely.points(x, y), crs=3857)
    rec = _quiet_read(gdf, grid, valid_mask=path)
    assert list(rec.dropped["source_row"]) == [0, 1, 2, 3, 4]
    assert set(rec.dropped["reason"]) == {"on nodata cell"}


def test_keep_fields_carry_columns_of_kept_records(grid):
    x, y = _inside_points(4)
    x[3] = X0 - 100  # outside: dropped, so its value must not appear
    gdf = gpd.GeoDataFrame({"site_id": list("abcd"), "phase": ["early", None, "late", "early"]},
                           geometry=gpd.points_from_xy(x, y), crs="EPSG:3857")
    rec = _quiet_read(gdf, grid, keep_fields=["phase"])
    assert rec.sites["site_id"].tolist() == ["a", "b", "c"]
    assert rec.sites["phase"].iloc[[0, 2]].tolist() == ["early", "late"] and rec.sites["phase"].isna().iloc[1]
    with pytest.raises(InputError, match="no column 'dating'"):
        read_sites(gdf, grid, keep_fields=["dating"])
    with pytest.raises(InputError, match="cannot be carried over"):
        read_sites(gdf.assign(kind="x"), grid, keep_fields=["kind"])
