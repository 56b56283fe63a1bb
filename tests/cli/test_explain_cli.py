"""``mlsites explain``: files, settings of the card's run, one-line errors with exit 2, nothing half-written."""

import json

import numpy as np
import pandas as pd
from click.testing import CliRunner

from mlsites.cli.main import cli
from tests.cli.test_run_cli import assert_user_error
from tests.mapping.test_map import copy_card, edit_card, no_leftovers

FILES = ["correlated_layers.csv", "explain.json", "importance.csv", "importance.png", "permutation_by_fold.csv",
         "response_curves.csv", "shap_values.csv"]


def invoke(*args):
    return CliRunner().invoke(cli, list(map(str, args)))


def _own_run(study_run, learner, tmp_path, explain=None):
    """A copy of a learner's card whose run folder is ``tmp_path/run`` (manifest with ``explain``)."""
    card = copy_card(study_run, learner, tmp_path / "models")
    run = tmp_path / "run"
    run.mkdir()
    if explain is not None:
        (run / "manifest.json").write_text(json.dumps({"settings": {"explain": explain}}))
    return edit_card(card, lambda c: c.update(run_dir=str(run))), run


def test_explain_writes_its_files_and_agrees_with_the_run(study_run, tmp_path):
    card = study_run.models_dir / "logistic.card.json"
    result = invoke("explain", card, "--out", tmp_path / "ex")
    assert result.exit_code == 0, result.output
    assert "explanations in" in result.stderr
    assert result.stdout.startswith("logistic: layers by importance: ")
    names = sorted(p.name for p in (tmp_path / "ex").iterdir())
    assert [n for n in FILES if n not in names] == [] and any(n.startswith("response_") for n in names)
    mine = pd.read_csv(tmp_path / "ex" / "importance.csv").set_index("layer")
    assert mine["permutation_mean"].notna().all()
    # the run explained the same model with the same settings and seed, from its fold models in
    # memory and its splitter; the command reads them from files and the fold column
    run = pd.read_csv(study_run.run_dir / "explain" / "importance.csv")
    run = run[run["learner"] == "logistic"].set_index("layer")
    np.testing.assert_allclose(mine.loc[run.index, "permutation_mean"], run["permutation_mean"], rtol=1e-9)
    np.testing.assert_allclose(mine.loc[run.index, "shap_mean_abs"], run["shap_mean_abs"], rtol=1e-9)
    quiet = invoke("explain", card, "--out", tmp_path / "quiet", "--quiet")
    assert quiet.exit_code == 0 and quiet.stderr == ""


def test_default_folder_is_in_the_cards_run_and_is_refused_then_replaced(study_run, tmp_path):
    card, run = _own_run(study_run, "fuzzy", tmp_path, explain={"n_explain": 20, "n_background": 10,
                                                                  "n_repeats": 1})
    assert invoke("explain", card, "--quiet").exit_code == 0
    settings = json.loads((run / "explain_fuzzy" / "explain.json").read_text())
    assert (settings["n_explain"], settings["n_background"], settings["n_repeats"]) == (20, 10, 1)
    assert_user_error(invoke("explain", card, "--quiet"), "exists already", "--fresh")
    again = invoke("explain", card, "--quiet", "--fresh")
    assert again.exit_code == 0, again.output
    assert no_leftovers(run)


def test_card_without_fold_models_warns_once_and_skips_permutation(study_run, tmp_path):
    card, run = _own_run(study_run, "logistic", tmp_path, explain={"n_explain": 20, "n_background": 10})
    for p in card.parent.glob("logistic.fold*.skops"):
        p.unlink()
    result = invoke("explain", card, "--quiet")
    assert result.exit_code == 0, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("mlsites: warning: "), result.stderr
    assert "fold models" in lines[0] and "run" in lines[0]
    table = pd.read_csv(run / "explain_logistic" / "importance.csv")
    assert table["permutation_mean"].isna().all() and table["shap_mean_abs"].notna().all()


def test_an_explanation_sample_larger_than_the_table_is_refused(study_run, tmp_path):
    card, run = _own_run(study_run, "logistic", tmp_path, explain={"n_explain": 10**6})
    assert_user_error(invoke("explain", card, "--quiet"), "n_explain", "at most")
    assert list(run.iterdir()) == [run / "manifest.json"]


def test_missing_card_and_missing_training_table_are_one_line_errors(study_run, tmp_path):
    assert_user_error(invoke("explain", tmp_path / "nope.card.json", "--quiet"), "model card not found")
    card, run = _own_run(study_run, "logistic", tmp_path)
    edit_card(card, lambda c: c["training_table"].update(path=str(tmp_path / "gone.parquet")))
    assert_user_error(invoke("explain", card, "--quiet"), "training table", "not found")
    assert list(run.iterdir()) == []
