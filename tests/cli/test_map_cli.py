"""``mlsites map``: files under their names, one-line errors with exit 2, nothing half-written."""

import json
import shutil

import numpy as np
import rasterio
from click.testing import CliRunner

from mlsites.cli.main import cli
from tests.cli.test_run_cli import assert_user_error
from tests.mapping.test_map import _resampled_dem, copy_card, edit_card, no_leftovers


def invoke(*args):
    return CliRunner().invoke(cli, list(map(str, args)))


def test_map_writes_the_named_files(study_run, tmp_path):
    card = study_run.models_dir / "logistic.card.json"
    result = invoke("map", card, "--out", tmp_path / "map")
    assert result.exit_code == 0, result.output
    assert sorted(p.name for p in (tmp_path / "map").iterdir()) == ["applicable.tif", "dissimilarity.tif", "map.json", "potential.tif",
                                                                   "spread.tif", "zones.tif"]
    assert "high" in result.stderr and "map in" in result.stderr
    summary = json.loads((tmp_path / "map" / "map.json").read_text())
    assert summary["model_card"]["path"] == str(card)
    with rasterio.open(tmp_path / "map" / "potential.tif") as src:
        p = src.read(1, masked=True)
        assert 0 <= p.min() and p.max() <= 1
    # quiet: nothing on stderr
    quiet = invoke("map", card, "--out", tmp_path / "quiet", "--quiet")
    assert quiet.exit_code == 0 and quiet.stderr == ""


def test_existing_output_is_refused_then_replaced_with_fresh(study_run, tmp_path):
    card = study_run.models_dir / "fuzzy.card.json"
    (tmp_path / "map").mkdir()
    assert_user_error(invoke("map", card, "--out", tmp_path / "map", "--quiet"), "exists already", "--fresh")
    assert list((tmp_path / "map").iterdir()) == []
    assert invoke("map", card, "--out", tmp_path / "map", "--quiet", "--fresh").exit_code == 0
    assert (tmp_path / "map" / "zones.tif").exists()


def test_bad_cards_and_model_files_exit_2_and_write_nothing(study_run, tmp_path):
    card = copy_card(study_run, "logistic", tmp_path / "a")
    edit_card(card, lambda c: c.update(feature_layers=[e for e in c["feature_layers"] if e["name"] != "soil"]))
    assert_user_error(invoke("map", card, "--out", tmp_path / "m1", "--quiet"), "feature(s) soil")
    card = copy_card(study_run, "logistic", tmp_path / "b")
    model = card.with_name("logistic.skops")
    model.write_bytes(model.read_bytes()[:-10])
    assert_user_error(invoke("map", card, "--out", tmp_path / "m2", "--quiet"), "logistic.skops", "SHA-256")
    assert not (tmp_path / "m1").exists() and not (tmp_path / "m2").exists() and no_leftovers(tmp_path)


def test_dem_in_another_resolution_is_said_and_one_without_overlap_refused(study_run, study_data, tmp_path):
    card = study_run.models_dir / "logistic.card.json"
    coarse = _resampled_dem(study_data / "dem.tif", tmp_path / "coarse.tif", 3)
    result = invoke("map", card, "--out", tmp_path / "m1", "--dem", coarse)
    assert result.exit_code == 0, result.output
    assert "aligned coarse.tif (30 x 30 cells) onto a grid of the model's cell size 10 x 10" in result.stderr
    far = _resampled_dem(study_data / "dem.tif", tmp_path / "far.tif", 1, shift=(0.0, -50_000.0))
    assert_user_error(invoke("map", card, "--out", tmp_path / "m2", "--dem", far, "--quiet"),
                      "far.tif", "does not overlap")
    assert not (tmp_path / "m2").exists() and no_leftovers(tmp_path)
