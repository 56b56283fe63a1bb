"""The run report: sections from a run's files, sites never as numbers, the command, a browser.

One tiny fictional run (tests/report/study.py) is made per module, with maps of
three learners; the run writes its report itself. A copy of the run folder then
gets the files the explanation, contribution, periods and check stages write
(made with those libraries), so every section is drawn.
"""

import base64
import html
import json
import re
import struct
import zlib

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
from click.testing import CliRunner
from scipy.stats import spearmanr
from sklearn.metrics import roc_auc_score

from mlsites.cli.main import cli
from mlsites.errors import ConfigError, InputError, OutputExistsError
from mlsites.experiment import load_experiment
from mlsites.report import REPORT_FILE, REPORT_FILE_EXACT_SITES, build_report, compare_with_reference
from tests.report.browser import probe, requires_chromium, screenshot
from tests.report.study import add_stage_files, copy_run, run_report_study, write_report_experiment

#: Section ids of a report whose run has every stage's files.
ALL_SECTIONS = ["glance", "study", "folds", "comparison", "curves", "zones", "maps", "reliability", "reference",
                "explain", "periods", "check", "methods"]


@pytest.fixture(scope="module")
def study(tmp_path_factory, study_data):
    folder = tmp_path_factory.mktemp("report_run")
    result = run_report_study(folder, study_data)
    return {"folder": folder, "data": study_data, "result": result}


@pytest.fixture(scope="module")
def full_run(tmp_path_factory, study):
    """A copy of the run folder with explain/, contributions, periods/ and check/ added."""
    run_dir = copy_run(study["result"].run_dir, tmp_path_factory.mktemp("full") / "reportstudy")
    sites = add_stage_files(run_dir, study["result"].models_dir, study["folder"] / "reportstudy.toml",
                            study["data"])
    report = build_report(run_dir)
    return {"run_dir": run_dir, "later": sites, "report": report, "html": report.path.read_text()}


# ---------------------------------------------------------------- helpers


def _png_chunks(data):
    """(type, payload) of every chunk of a PNG byte string (PNG specification, section 5)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, out = 8, []
    while pos < len(data):
        length, kind = struct.unpack(">I4s", data[pos:pos + 8])
        out.append((kind.decode("latin-1"), data[pos + 8:pos + 8 + length]))
        pos += 12 + length
    return out


def _embedded_images(html_text):
    return [base64.b64decode(m) for m in re.findall(r"data:image/png;base64,([A-Za-z0-9+/=]+)", html_text)]


_NUMBER = re.compile(r"[-+]?\d[\d,\u2009\u202f\u00a0']*(?:\.\d+)?(?:[eE][-+]?\d+)?")


def _numbers(text):
    """Every number written in ``text``, with thousands separators of any common style removed."""
    out = []
    for token in _NUMBER.findall(text):
        clean = re.sub(r"[,\u2009\u202f\u00a0']", "", token)
        try:
            out.append(float(clean))
        except ValueError:
            pass
    return np.array(out)


def _texts_of(html_text):
    """The page without its images, plus every text-like chunk of every embedded PNG."""
    texts = [html.unescape(re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", html_text))]
    for png in _embedded_images(html_text):
        for kind, payload in _png_chunks(png):
            if kind in ("tEXt", "iTXt", "eXIf"):
                texts.append(payload.decode("latin-1"))
            elif kind == "zTXt":
                texts.append(zlib.decompress(payload.split(b"\0", 1)[1][1:]).decode("latin-1"))
    return texts


def _coordinates_in(texts, coords, tol=1.0):
    """Numbers of ``texts`` within ``tol`` (metres) of any value in ``coords``."""
    coords = np.sort(np.asarray(coords, dtype=float))
    hits = []
    for text in texts:
        values = _numbers(text)
        if values.size == 0:
            continue
        i = np.clip(np.searchsorted(coords, values), 1, coords.size - 1)
        near = np.minimum(np.abs(values - coords[i - 1]), np.abs(values - coords[i])) <= tol
        hits += values[near].tolist()
    return hits


def _site_coordinates(study, full_run):
    """x and y of every site: the records, their sample-table cells and the later-found sites."""
    records = gpd.read_file(study["data"] / "sites.gpkg")
    pts = records.geometry.representative_point()
    table = pd.read_parquet(full_run["run_dir"] / "samples" / "samples.parquet")
    cells = table[table["label"] == 1]
    later = full_run["later"]
    return np.concatenate([pts.x, pts.y, cells["x"], cells["y"], later.geometry.x, later.geometry.y])


def _section_ids(html_text):
    return re.findall(r'<section id="([a-z]+)" class="report-section', html_text)


# ---------------------------------------------------------------- the run writes it


def test_the_run_writes_its_report(study):
    run_dir = study["result"].run_dir
    html_text = (run_dir / REPORT_FILE).read_text()
    manifest = json.loads((run_dir / "manifest.json").read_text())
    stage = manifest["stages"]["report"]
    assert stage["file"] == REPORT_FILE and stage["size_bytes"] == (run_dir / REPORT_FILE).stat().st_size
    # a stage whose files the run did not write is left out, with a line saying so
    stage_files = {"explain": "explain/importance.csv", "periods": "periods/periods.json", "check": "check"}
    absent = {s for s, f in stage_files.items() if not (run_dir / f).exists()}
    assert set(stage["left_out"]) == absent
    for s in absent - {"check"}:
        assert f"{stage_files[s]} not found" in html_text
    assert (run_dir / "explain" / "importance.csv").is_file()  # the run's explanation stage wrote it
    assert _section_ids(html_text) == ALL_SECTIONS
    assert not list(run_dir.glob(".*partial*"))


def test_every_section_is_drawn_from_the_stage_files(full_run):
    report = full_run["report"]
    assert report.sections == ALL_SECTIONS and report.absent == {}
    html_text = full_run["html"]
    for sid in ALL_SECTIONS:
        body = html_text.split(f'<section id="{sid}"', 1)[1].split("</section>", 1)[0]
        assert "Not in this report" not in body, sid
    # maps and figures are embedded, none is linked
    assert "<img src=\"data:image/png;base64," in html_text
    assert not re.search(r"<img src=\"(?!data:)", html_text) and "http://" not in html_text.replace(
        "http://www.w3", "")
    # images have no metadata chunks at all (only pixels reach the report)
    for png in _embedded_images(html_text):
        kinds = {k for k, _ in _png_chunks(png)}
        assert not kinds & {"tEXt", "zTXt", "iTXt", "eXIf", "tIME"}


def test_caution_comes_before_any_result(full_run):
    html_text = full_run["html"]
    caution = html_text.index('id="caution"')
    assert caution < html_text.index('<section id="glance"')
    text = html_text[caution:caution + 800]
    assert "never replaces field survey" in text and "heritage law and licensed practice" in text
    assert "A low zone is not a zone without sites" in text


# ---------------------------------------------------------------- site coordinates


def test_no_site_coordinate_in_the_default_report(study, full_run):
    coords = _site_coordinates(study, full_run)
    texts = _texts_of(full_run["html"])
    assert _coordinates_in(texts, coords) == []


def test_the_coordinate_search_finds_a_coordinate_in_any_format(study, full_run):
    # the check above can fail: one site's x and y written in the formats a report might use
    coords = _site_coordinates(study, full_run)
    x, y = coords[0], coords[len(coords) // 2]
    for written in (f"{x:.0f}", f"{x:,.0f}", f"{x:.2f}", f"{y:.7e}", f"{x:.6e}".replace("e+0", "e+"), f"{y:,.1f}",
                    f"{y:_.0f}".replace("_", "\u2009")):
        assert _coordinates_in([f"<td>{written}</td>"], coords) != [], written


def test_exact_sites_only_when_asked(study, full_run, tmp_path):
    run_dir = full_run["run_dir"]
    exact = build_report(run_dir, show_sites=True, fresh=True)
    assert exact.path.name == REPORT_FILE_EXACT_SITES and (run_dir / REPORT_FILE).is_file()
    text = exact.path.read_text()
    assert 'id="exact-sites"' in text and 'id="exact-sites"' not in full_run["html"]
    assert "exact site positions" in text
    # even then no table or text holds a coordinate: positions are only drawn
    assert _coordinates_in(_texts_of(text), _site_coordinates(study, full_run)) == []


def test_periods_figure_with_exact_sites_is_left_out(full_run, tmp_path):
    run_dir = copy_run(full_run["run_dir"], tmp_path / "run")
    info = json.loads((run_dir / "periods" / "periods.json").read_text())
    info["maps"]["sites_on_png"] = "exact points"
    (run_dir / "periods" / "periods.json").write_text(json.dumps(info))
    text = build_report(run_dir).path.read_text()
    assert "periods/density_maps.png shows exact site positions, so it is left out" in text
    assert 'alt="Density maps per block"' not in text
    assert 'alt="Density maps per block"' in full_run["html"]


# ---------------------------------------------------------------- the reference surface


def test_reference_correlation_and_aucs_match_scipy_and_sklearn(full_run, study):
    run_dir = full_run["run_dir"]
    manifest = json.loads((run_dir / "manifest.json").read_text())
    with rasterio.open(run_dir / "maps" / "logistic" / "potential.tif") as src:
        pot = src.read(1).astype(float)
        transform = src.transform
        from mlsites.grid import read_grid

        grid = read_grid(run_dir / "maps" / "logistic" / "potential.tif")
    with rasterio.open(study["data"] / "dem.tif") as src:
        dem = src.read(1, masked=True).filled(np.nan).astype(float)
    both = np.isfinite(pot) & np.isfinite(dem)
    result = compare_with_reference(run_dir / "maps" / "logistic" / "potential.tif", study["data"] / "dem.tif",
                                    grid, check=manifest["settings"]["check"], buffer_m=0.0)
    # reference: scipy.stats.spearmanr over every cell where both have a value
    assert result.step == 1 and result.n_cells == both.sum()
    assert result.spearman == pytest.approx(spearmanr(pot[both], dem[both]).statistic, abs=1e-9)
    # reference: sklearn.metrics.roc_auc_score, each later site (one cell: buffer 0) against every cell
    later = full_run["later"]
    rows, cols = rasterio.transform.rowcol(transform, later.geometry.x, later.geometry.y)
    for key, surface in (("map", pot), ("reference", dem)):
        s = surface[np.asarray(rows), np.asarray(cols)]
        y = np.r_[np.ones(s.size), np.zeros(both.sum())]
        expected = roc_auc_score(y, np.r_[s, surface[both]])
        assert result.auc[key] == pytest.approx(expected, abs=1e-9)
    assert result.auc["n_sites"] == len(later)


def test_a_map_against_itself_and_its_reverse(full_run, tmp_path):
    # analytic: the rank correlation of a surface with itself is 1, with its negative -1
    run_dir = full_run["run_dir"]
    pot_path = run_dir / "maps" / "logistic" / "potential.tif"
    from mlsites.grid import read_grid, write_array

    grid = read_grid(pot_path)
    with rasterio.open(pot_path) as src:
        pot = src.read(1)
    write_array(tmp_path / "negative.tif", -pot, grid)
    assert compare_with_reference(pot_path, pot_path, grid).spearman == pytest.approx(1.0, abs=1e-12)
    assert compare_with_reference(pot_path, tmp_path / "negative.tif", grid).spearman == pytest.approx(-1.0,
                                                                                                      abs=1e-12)
    # a lattice over a grid larger than the cell budget still compares like cells
    lattice = compare_with_reference(pot_path, pot_path, grid, max_cells=1000)
    assert lattice.step == 4 and lattice.spearman == pytest.approx(1.0, abs=1e-12)


def test_the_report_states_the_correlation(full_run):
    body = full_run["html"].split('<section id="reference"', 1)[1].split("</section>", 1)[0]
    m = re.search(r"ρ = (-?\d\.\d{3})", body)
    assert m is not None and "AUC on 15 later-found sites" in body
    assert "elevation" in body  # the reference_label of the experiment


# ---------------------------------------------------------------- methods paragraph


def test_methods_state_the_runs_own_settings_and_cite_what_they_use(full_run, study):
    from mlsites.experiment._models import load_fold_models, load_model
    from mlsites.report._methods import REFERENCES

    body = html.unescape(full_run["html"].split('<section id="methods"', 1)[1].split("</section>", 1)[0])
    # settings of this run's experiment file (tests/report/study.py)
    for phrase in ("3 folds of square spatial blocks of 400 m", "a random forest (Breiman 2001) of 20 trees",
                   "at least 3 samples per leaf", "discs of 50 m", "only inside the surveyed areas",
                   "blocks of 400 years", "100 Monte Carlo draws", "seed 11"):
        assert phrase in body, phrase
    # the fuzzy baseline's gamma as its saved models hold it
    saved = load_model(study["result"].models_dir / "fuzzy.card.json")
    gammas = [m.named_steps["model"].gamma_ for m in load_fold_models(saved)]
    assert f"{saved.estimator.named_steps['model'].gamma_:g} for the final model" in body
    assert f"{min(gammas):g} to {max(gammas):g} in the folds" in body
    # every reference listed is cited, every cited key is listed
    refs = re.findall(r"<li>(.*?)</li>", body.split("<h3>References</h3>", 1)[1])
    assert refs and all(any(r.startswith(v[:40]) for v in REFERENCES.values()) for r in refs)
    text = body.split("<h3>References</h3>", 1)[0]
    cited = [k for k in REFERENCES if k in text]
    assert len(cited) == len(refs)
    for key in ("Horn 1981", "Roberts et al. 2017", "Phillips et al. 2009", "Hirzel et al. 2006",
                "Kvamme 1988", "Meyer & Pebesma 2021", "Lundberg & Lee 2017", "Valavi et al. 2021",
                "Ratcliffe 2000", "Crema 2012", "Zimmermann & Zysno 1980"):
        assert key in cited, key


# ---------------------------------------------------------------- the command


def test_report_command_rebuilds_refuses_and_replaces(full_run, tmp_path):
    run_dir = copy_run(full_run["run_dir"], tmp_path / "run")
    runner = CliRunner()
    done = runner.invoke(cli, ["report", str(run_dir), "--quiet"])
    assert done.exit_code == 0, done.output
    assert done.stdout.strip() == str(run_dir / REPORT_FILE)
    first = (run_dir / REPORT_FILE).stat().st_mtime_ns
    again = runner.invoke(cli, ["report", str(run_dir), "--quiet"])
    assert again.exit_code == 2 and again.stderr.count("\n") == 1 and "--fresh" in again.stderr
    assert (run_dir / REPORT_FILE).stat().st_mtime_ns == first
    out = tmp_path / "elsewhere" / "study.html"
    assert runner.invoke(cli, ["report", str(run_dir), "--out", str(out), "--quiet"]).exit_code == 0
    assert out.is_file()
    assert runner.invoke(cli, ["report", str(run_dir), "--fresh", "--quiet"]).exit_code == 0
    assert not list(run_dir.glob(".*partial*"))


def test_report_command_on_a_folder_that_is_no_run(tmp_path):
    (tmp_path / "empty").mkdir()
    done = CliRunner().invoke(cli, ["report", str(tmp_path / "empty")])
    assert done.exit_code == 2 and "no manifest.json" in done.stderr and done.stderr.count("\n") == 1
    with pytest.raises(InputError, match="run folder not found"):
        build_report(tmp_path / "missing")
    assert not (tmp_path / "empty" / REPORT_FILE).exists()


def test_an_existing_report_is_refused_before_any_work(full_run, tmp_path):
    out = tmp_path / "taken.html"
    out.write_text("keep me")
    with pytest.raises(OutputExistsError, match="--fresh"):
        build_report(full_run["run_dir"], out=out)
    assert out.read_text() == "keep me"


def test_report_section_of_the_experiment_is_checked(study, tmp_path):
    text = write_report_experiment(tmp_path, study["data"]).read_text()
    text = text.replace('reference_surface = "', 'reference_surface = "missing_').replace(
        "site_cell_m = 400.0", "site_cell_m = -5")
    (tmp_path / "bad.toml").write_text(text)
    with pytest.raises(ConfigError) as err:
        load_experiment(tmp_path / "bad.toml")
    message = str(err.value)
    assert message.startswith("2 problems") and "[report.reference_surface] file not found" in message
    assert "[report.site_cell_m] -5 m" in message


# ---------------------------------------------------------------- in a browser


@requires_chromium
def test_report_renders_in_headless_chromium(full_run, tmp_path):
    result, stderr = probe(full_run["report"].path, tmp_path)
    assert result["errors"] == [] and "Uncaught" not in stderr
    assert result["title"].startswith("Site potential")
    # every image decoded (a broken one has naturalWidth 0)
    assert len(result["images"]) >= 12
    assert all(i["complete"] and i["width"] > 0 and i["height"] > 0 for i in result["images"]), result["images"]
    sections = {s["id"]: s for s in result["sections"]}
    assert [s["id"] for s in result["sections"]] == ALL_SECTIONS
    assert all(s["height"] > 40 and not s["absent"] for s in sections.values())
    shot = screenshot(full_run["report"].path, tmp_path / "report.png", tmp_path)
    print(f"report screenshot: {shot}")
    from PIL import Image

    with Image.open(shot) as im:
        assert im.size == (1280, 2400) and np.unique(np.asarray(im.convert("L"))).size > 50
