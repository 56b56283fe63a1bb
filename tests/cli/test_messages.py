"""Messages a GIS user can act on (issue 7): each bad input tried as a new user would,
through the command line, ends in exit status 2 and one line naming the file, key or
row, what was expected and what to do."""

import geopandas as gpd
import pandas as pd
import pytest
from click.testing import CliRunner
from shapely.geometry import Polygon

from mlsites.cli.main import cli
from mlsites.grid import read_grid
from tests.experiment.test_run import data, write_experiment  # noqa: F401


def error_line(*args):
    """Invoke the CLI; check exit 2 and one error line (warnings may precede it); return it."""
    result = CliRunner().invoke(cli, list(map(str, args)))
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    errors = [ln for ln in result.stderr.strip().splitlines() if not ln.startswith("mlsites: warning: ")]
    assert len(errors) == 1 and errors[0].startswith("mlsites: error: "), result.stderr
    return errors[0]


@pytest.fixture
def sites(data):
    return gpd.read_file(data / "sites.gpkg")


def _sample(data, sites_path, out, *extra):
    return error_line("sample", "--dem", data / "dem.tif", "--sites", sites_path, "--out", out,
                      "--terrain-layers", "slope", "--background", 200, "--folds", 3, "--block-size", 300,
                      "--quiet", *extra)


def line_of(path, text):
    return path.read_text().splitlines().index(text) + 1


def test_run_name_hint_shows_a_usable_name(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=["fuzzy"])
    line = error_line("run", exp, "--name", "../elsewhere", "--quiet")
    assert "e.g. --name tiny_2" in line and "{" not in line


def test_text_coordinates_are_not_called_missing(tmp_path, data, sites):
    table = pd.DataFrame({"site_id": sites["site_id"],
                          "x": [f"{v:.1f}".replace(".", ",") for v in sites.geometry.x],  # decimal commas
                          "y": [f"{v:.1f}".replace(".", ",") for v in sites.geometry.y]})
    table.to_csv(tmp_path / "commas.csv", index=False, sep=";")
    line = _sample(data, tmp_path / "commas.csv", tmp_path / "o", "--crs", sites.crs.to_string())
    assert "coordinates not numbers" in line and "missing coordinates" not in line


def test_zero_area_polygons_are_named_as_such(tmp_path, data, sites):
    flat = [Polygon([(x, y), (x + 10, y), (x + 20, y)]) for x, y in zip(sites.geometry.x, sites.geometry.y)]
    gpd.GeoDataFrame({"site_id": sites["site_id"]}, geometry=flat, crs=sites.crs).to_file(tmp_path / "flat.gpkg")
    line = _sample(data, tmp_path / "flat.gpkg", tmp_path / "o")
    assert "polygon with zero area" in line and "LineString" not in line


def test_extents_are_plain_metres(tmp_path, data, sites):
    far = sites.assign(geometry=sites.geometry.translate(3_000_000, 0))
    far.to_file(tmp_path / "far.gpkg")
    left = read_grid(data / "dem.tif").bounds[0]
    line = _sample(data, tmp_path / "far.gpkg", tmp_path / "o")
    assert "e+" not in line and f"grid x {left:.0f}.." in line


def test_missing_crs_says_where_to_set_it(tmp_path, data, sites):
    sites.to_file(tmp_path / "nocrs.shp")
    (tmp_path / "nocrs.prj").unlink()  # a Shapefile without its .prj has no CRS
    line = _sample(data, tmp_path / "nocrs.shp", tmp_path / "o")
    assert "has no CRS; set crs in [sites] (or --crs)" in line and "crs='" not in line
    # GeoJSON without a CRS member is read as degrees (the GeoJSON rule): metres then
    # cannot be reprojected, and the message says which setting to fix
    with pytest.warns(UserWarning):  # pyogrio warns about writing without a CRS
        sites.set_crs(None, allow_override=True).to_file(tmp_path / "nocrs.geojson")
    line = _sample(data, tmp_path / "nocrs.geojson", tmp_path / "o")
    assert "could not be reprojected" in line and "set crs in [sites] (or --crs)" in line


def test_gdal_driver_hint_is_not_passed_through(tmp_path, data):
    (tmp_path / "notes.gpkg").write_text("not a geopackage")
    line = _sample(data, tmp_path / "notes.gpkg", tmp_path / "o")
    assert "notes.gpkg" in line and "DRIVER" not in line and "prefixing" not in line


def test_stream_lines_are_named_by_their_option(tmp_path, data):
    (tmp_path / "lines.gpkg").write_text("not a geopackage")
    exp = write_experiment(tmp_path, data, use=["fuzzy"])
    exp.write_text(exp.read_text().replace(str(data / "streams.gpkg"), str(tmp_path / "lines.gpkg")))
    line = error_line("sample", exp, "--quiet")
    assert "the stream lines (stream_lines)" in line and "__streams__" not in line and "DRIVER" not in line


def test_shared_ids_are_called_duplicates(tmp_path, data, sites):
    sites.assign(site_id="A").to_file(tmp_path / "one_id.gpkg")
    line = _sample(data, tmp_path / "one_id.gpkg", tmp_path / "o")
    assert "repeat an id" in line and "at most 1 folds" not in line


@pytest.mark.parametrize("section, old, new, key", [
    ("[evaluation]", "", "top_area_shares = [0.1, 20]", "[evaluation.top_area_shares]"),
    ("[evaluation]", "", "zone_targets = { low = 0.8 }", "[evaluation.zone_targets.low]"),
    ("[terrain]", 'layers = ["slope", "northness", "stream_distance"]', 'layers = ["slope", "slop"]',
     "[terrain.layers] unknown terrain layer 'slop'"),
    ("[terrain]", "", "tpi_radii_m = [-5]", "[terrain.tpi_radii_m] [-5]: radii are positive"),
])
def test_experiment_values_point_at_their_line(tmp_path, data, section, old, new, key):
    exp = write_experiment(tmp_path, data, use=["fuzzy"])
    text = exp.read_text()
    text = text.replace(old, new) if old else text.replace(f"{section}\n", f"{section}\n{new}\n") \
        if section in text else text + f"{section}\n{new}\n"
    exp.write_text(text)
    line = error_line("sample", exp, "--quiet")
    assert f"{exp}:{line_of(exp, new)}: {key}" in line, line
    assert "area_shares=" not in line


def test_negative_tpi_radius_is_not_called_smaller_than_a_cell(tmp_path, data):
    line = error_line("terrain", data / "dem.tif", "--out", tmp_path / "t", "--layers", "tpi", "--tpi-radii=-5")
    assert "must be a positive number" in line and "smaller than one cell" not in line


def test_missing_extends_target_names_the_variant(tmp_path):
    (tmp_path / "v.toml").write_text('extends = "gone.toml"\n')
    line = error_line("run", tmp_path / "v.toml")
    assert f"{tmp_path / 'v.toml'}:1: extends = \"gone.toml\"" in line
