"""Experiment files: validation reports every problem at once, with file, key and line."""

import pytest

from mlsites.errors import ConfigError
from mlsites.experiment import load_experiment


@pytest.fixture
def files(tmp_path):
    (tmp_path / "dem.tif").write_bytes(b"")
    (tmp_path / "sites.gpkg").write_bytes(b"")
    return tmp_path


def _write(path, text):
    path.write_text(text)
    return path


def test_minimal_file_fills_defaults_and_resolves_paths(files):
    exp = load_experiment(_write(files / "a.toml", '[study]\ndem = "dem.tif"\n[sites]\npath = "sites.gpkg"\n'))
    assert exp.name == "a"
    assert exp["study"]["dem"] == str((files / "dem.tif").resolve())
    assert exp["folds"]["n_splits"] == 5 and exp["sampling"]["survey_mode"] == "inside"


def test_extends_merges_over_base_with_paths_relative_to_each_file(files):
    sub = files / "variants"
    sub.mkdir()
    _write(files / "base.toml", '[study]\ndem = "dem.tif"\nseed = 3\n[folds]\nn_splits = 4\n')
    exp = load_experiment(_write(sub / "v.toml", 'extends = "../base.toml"\n[folds]\nn_splits = 3\n'))
    assert exp["study"]["dem"] == str((files / "dem.tif").resolve())
    assert exp["study"]["seed"] == 3 and exp["folds"]["n_splits"] == 3
    assert [p.name for p in exp.sources] == ["base.toml", "v.toml"]


def test_all_problems_reported_together_with_lines(files):
    text = (
        '[study]\n'
        'dem = "missing.tif"\n'
        'seed = "seven"\n'
        '[folds]\n'
        'method = "checkerboard"\n'
        'n_split = 5\n'
        '[colours]\n'
        'x = 1\n'
    )
    with pytest.raises(ConfigError) as err:
        load_experiment(_write(files / "bad.toml", text))
    msg = str(err.value)
    assert "4 problems" in msg or "5 problems" in msg
    assert "bad.toml:2: [study.dem] file not found" in msg
    assert "bad.toml:3: [study.seed] expected whole number" in msg
    assert "bad.toml:5: [folds.method] 'checkerboard' is not one of" in msg
    assert "bad.toml:6: [folds.n_split] unknown key" in msg
    assert "[colours] unknown section" in msg


def test_malformed_toml_names_the_line(files):
    with pytest.raises(ConfigError, match=r"bad\.toml: not valid TOML: .*line 2"):
        load_experiment(_write(files / "bad.toml", '[study]\ndem = "dem.tif\n'))


def test_extends_loop_and_missing_file(files):
    _write(files / "a.toml", 'extends = "b.toml"\n')
    _write(files / "b.toml", 'extends = "a.toml"\n')
    with pytest.raises(ConfigError, match="loop"):
        load_experiment(files / "a.toml")
    with pytest.raises(ConfigError, match="not found"):
        load_experiment(files / "none.toml")


def test_impossible_combinations(files):
    text = (
        '[study]\ndem = "dem.tif"\n'
        '[sampling]\nsurvey_mode = "weighted"\n'
        '[folds]\nmethod = "buffered_leave_one_out"\n'
        '[evaluation]\nzone_targets = { high = 0.9, medium = 0.7 }\n'
        '[learners]\nuse = ["random_forest", "oracle"]\n'
    )
    with pytest.raises(ConfigError) as err:
        load_experiment(_write(files / "c.toml", text))
    msg = str(err.value)
    for part in ("effort_field", "buffer_m", "must increase", "unknown learner 'oracle'"):
        assert part in msg


def test_lines_point_at_the_right_table_and_file(files):
    # issue 7: `path` appears in several tables; keys of an extends base live in the
    # base file; exclusion_m problems are filed under exclusion_m. Line numbers are
    # counted by hand in the texts below.
    (files / "soil.tif").write_bytes(b"")
    _write(files / "base.toml",
           '[study]\n'                      # 1
           'dem = "dem.tif"\n'              # 2
           '[inputs]\n'                     # 3
           'soil = { path = "soil.tif", kind = "categorical" }\n'  # 4
           '[sites]\n'                      # 5
           'path = "gone.gpkg"\n')          # 6
    _write(files / "variant.toml",
           'extends = "base.toml"\n'        # 1
           '[inputs]\n'                     # 2
           'rain = { path = "rain.tif" }\n'  # 3
           '[sampling]\n'                   # 4
           'site_buffer_m = 10\n'           # 5
           'exclusion_m = -5\n')            # 6
    with pytest.raises(ConfigError) as err:
        load_experiment(files / "variant.toml")
    msg = str(err.value)
    assert f"{files / 'base.toml'}:6: [sites.path] file not found" in msg
    assert f"{files / 'variant.toml'}:3: [inputs.rain.path] file not found" in msg
    assert f"{files / 'variant.toml'}:6: [sampling.exclusion_m] -5 m" in msg
    assert "[sampling.site_buffer_m]" not in msg
    exp = load_experiment(_write(files / "ok.toml", 'extends = "base.toml"\n[sites]\npath = "sites.gpkg"\n'))
    assert exp.where("inputs.soil.kind") == f"{files / 'base.toml'}:4"
    assert exp.where("sites.path") == f"{files / 'ok.toml'}:3"
    assert exp.where("study.dem") == f"{files / 'base.toml'}:2"


def test_missing_extends_target_names_the_file_that_named_it(files):
    _write(files / "v.toml", '# a variant\nextends = "nowhere.toml"\n[study]\nseed = 1\n')
    with pytest.raises(ConfigError, match=r"v\.toml:2: extends = \"nowhere\.toml\": file .*nowhere\.toml not found"):
        load_experiment(files / "v.toml")


def test_explain_section_defaults_and_checks(files):
    from mlsites.explain import EXPLAIN_DEFAULTS

    exp = load_experiment(_write(files / "e.toml", '[study]\ndem = "dem.tif"\n[sites]\npath = "sites.gpkg"\n'))
    # the schema's defaults are the stage's own
    assert {k: exp["explain"][k] for k in exp["explain"]} == {k: EXPLAIN_DEFAULTS[k] for k in exp["explain"]}
    text = ('[study]\ndem = "dem.tif"\n[sites]\npath = "sites.gpkg"\n[explain]\nn_explain = 0\n'
            'correlation_threshold = 1.5\nsurvey_layers = [3]\n')
    with pytest.raises(ConfigError) as err:
        load_experiment(_write(files / "bad_explain.toml", text))
    msg = str(err.value)
    assert "3 problems" in msg
    assert "bad_explain.toml:6: [explain.n_explain] must be at least 1" in msg
    assert "[explain.correlation_threshold] must lie in (0, 1)" in msg
    assert "[explain.survey_layers] expected a list of layer names" in msg
