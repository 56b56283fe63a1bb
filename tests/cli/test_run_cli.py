"""``mlsites run`` and ``mlsites sample``: exit codes, one-line errors, nothing half-written."""

import pytest
from click.testing import CliRunner

from mlsites.cli.main import cli
from mlsites.experiment import run_experiment
from tests.experiment.test_run import _clustered_sites, _few_sites, data, leftovers, write_experiment  # noqa: F401

FAST = ["logistic", "fuzzy"]


def invoke(*args):
    return CliRunner().invoke(cli, list(map(str, args)))


def assert_user_error(result, *fragments):
    """Exit status 2, one line on stderr naming the problem, no traceback."""
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("mlsites: error: "), result.stderr
    assert "Traceback" not in result.output
    for fragment in fragments:
        assert fragment in lines[0], lines[0]


def assert_nothing_written(folder):
    assert leftovers(folder / "runs") == [] and leftovers(folder / "models") == []


def test_malformed_toml_exits_2_naming_the_line(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[study]\nname = "x"\ndem = "dem.tif\n')
    result = invoke("run", bad)
    # tomllib reports "(at line 3, column ...)" for the unterminated string
    assert result.exit_code == 2
    assert "bad.toml: not valid TOML" in result.stderr and "line 3" in result.stderr
    assert "Traceback" not in result.output
    assert_nothing_written(tmp_path)


def test_existing_run_is_kept_until_fresh_or_a_new_name(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=FAST)
    first = run_experiment(exp, quiet=True, n_jobs=1)
    before = {p.name: p.read_bytes() for p in first.run_dir.iterdir() if p.is_file()}
    assert_user_error(invoke("run", exp, "--quiet", "--jobs", 1), "exists already", "--fresh", "--name")
    assert {p.name: p.read_bytes() for p in first.run_dir.iterdir() if p.is_file()} == before
    renamed = invoke("run", exp, "--quiet", "--jobs", 1, "--name", "tiny_2")
    assert renamed.exit_code == 0, renamed.output
    assert (tmp_path / "runs" / "tiny_2" / "metrics_summary.csv").read_bytes() == before["metrics_summary.csv"]
    fresh = invoke("run", exp, "--jobs", 1, "--fresh")
    assert fresh.exit_code == 0, fresh.output
    assert "cross-validation: done in" in fresh.stderr and "results in" in fresh.stderr
    assert sorted(leftovers(tmp_path / "runs")) == ["tiny", "tiny_2"]


@pytest.mark.parametrize("case", ["too_few_sites", "fold_without_sites", "declared_continuous", "bad_name"])
def test_bad_input_exits_2_and_writes_nothing(tmp_path, data, case):
    args = []
    if case == "too_few_sites":
        exp = write_experiment(tmp_path, tmp_path, sites=_few_sites(data, tmp_path / "few.gpkg", 2), use=FAST)
        fragments = ["2 usable site(s) but 3 folds"]
    elif case == "fold_without_sites":
        exp = write_experiment(tmp_path, tmp_path, sites=_clustered_sites(data, tmp_path / "corner.gpkg"), use=FAST)
        fragments = ["Fold ", "has no presences", "block size"]
    elif case == "declared_continuous":
        exp = write_experiment(tmp_path, tmp_path, kind="continuous", use=FAST)
        fragments = ["[inputs.soil]", 'set kind = "categorical"']
    else:
        exp = write_experiment(tmp_path, tmp_path, use=FAST)
        args, fragments = ["--name", "../elsewhere"], ["cannot be a folder name"]
    for name in ("dem.tif", "soil.tif", "streams.gpkg", "sites.gpkg"):
        if not (tmp_path / name).exists():
            (tmp_path / name).symlink_to(data / name)
    assert_user_error(invoke("run", exp, "--quiet", "--jobs", 1, *args), *fragments)
    assert_nothing_written(tmp_path)


def test_sample_command_writes_the_sample_folder_once(tmp_path, data):
    exp = write_experiment(tmp_path, data, use=FAST)
    result = invoke("sample", exp)
    assert result.exit_code == 0, result.output
    folder = tmp_path / "runs" / "tiny" / "samples"
    assert (folder / "samples.parquet").is_file() and (folder / "dropped_records.csv").is_file()
    assert_user_error(invoke("sample", exp, "--quiet"), "sample files exist already", "--fresh")
    out = tmp_path / "elsewhere"
    assert invoke("sample", exp, "--quiet", "--out", out).exit_code == 0
    assert (out / "samples.parquet").read_bytes() == (folder / "samples.parquet").read_bytes()
    # a run folder holding only these samples is not a finished run: `run` may take it over
    before = (folder / "samples.parquet").read_bytes()
    result = invoke("run", exp, "--jobs", 1)
    assert result.exit_code == 0, result.output
    assert "only a samples/ folder" in result.stderr
    assert (folder / "samples.parquet").read_bytes() == before  # same cached table
    assert (folder.parent / "manifest.json").is_file()
    assert_user_error(invoke("run", exp, "--quiet"), "exists already")


def test_demo_folder_is_laid_out_for_the_demo_experiment(tmp_path):
    from mlsites.experiment import load_experiment
    from mlsites.experiment._demo import DEMO_FILES, prepare_demo_folder

    experiment = prepare_demo_folder(tmp_path / "demo_run")
    exp = load_experiment(experiment)
    # every input path of the copied experiment resolves inside the demo folder
    assert exp["study"]["dem"] == str((tmp_path / "demo_run" / "demo_data" / "dem.tif").resolve())
    assert all((tmp_path / "demo_run" / "demo_data" / f).is_file() for f in DEMO_FILES)
    assert exp["outputs"]["runs_dir"] == str((tmp_path / "demo_run" / "runs").resolve())
