"""The [periods] section of an experiment file: defaults and every problem reported at once."""

import pytest

from mlsites.errors import ConfigError
from mlsites.experiment import load_experiment


@pytest.fixture
def files(tmp_path):
    (tmp_path / "dem.tif").write_bytes(b"")
    (tmp_path / "sites.gpkg").write_bytes(b"")
    return tmp_path


HEAD = '[study]\ndem = "dem.tif"\n[sites]\npath = "sites.gpkg"\n'


def test_defaults(files):
    (files / "a.toml").write_text(HEAD)
    p = load_experiment(files / "a.toml")["periods"]
    assert p["block_width_years"] == 100 and p["density"] == "uniform" and p["span"] is None
    assert p["categories"] == {} and p["windows"] == {} and p["end_inclusive"] is False


def test_tables_are_read(files):
    (files / "a.toml").write_text(HEAD + '[periods]\ncategory_field = "phase"\ndensity = "trapezoid"\n'
                                  '[periods.categories]\n"Early phase" = [-3200, -2500]\n'
                                  '[periods.windows]\nearly = [-3200, -2000]\n')
    p = load_experiment(files / "a.toml")["periods"]
    assert p["categories"] == {"Early phase": [-3200, -2500]} and p["windows"] == {"early": [-3200, -2000]}


def test_every_problem_is_reported_at_once(files):
    text = HEAD + (
        '[periods]\n'
        'block_width_years = 0.5\n'
        'density = "bell"\n'
        'n_simulations = 10\n'
        'min_probability = 1.5\n'
        'bandwidth_m = -3\n'
        'categories = { "a" = [-3000, -3100] }\n'
        'windows = { late = [-900], "bad name" = [0, 10] }\n'
        'colour = "red"\n'
    )
    (files / "bad.toml").write_text(text)
    with pytest.raises(ConfigError) as err:
        load_experiment(files / "bad.toml")
    msg = str(err.value)
    for fragment in ("[periods.block_width_years] 0.5 years; blocks must be at least a year wide",
                     "[periods.density] 'bell' is not one of uniform, trapezoid",
                     "[periods.n_simulations] 10; at least 100",
                     "[periods.min_probability] 1.5",
                     "[periods.bandwidth_m] -3",
                     "[periods.category_field] [periods.categories] is given but category_field is not",
                     "dating category 'a' = [-3000, -3100] ends before it starts",
                     "time window 'late' = [-900]; expected [start, end]",
                     "[periods.windows.bad name] window names use letters",
                     "[periods.colour] unknown key"):
        assert fragment in msg, fragment
    assert msg.startswith("10 problems")


@pytest.mark.parametrize("span, fragment", [
    ("[-3000, -3100]", "expected [start, end] with start < end"),
    ("[-100000, 0]", "at most 10000 are allowed"),
])
def test_bad_span(files, span, fragment):
    (files / "a.toml").write_text(HEAD + f"[periods]\nspan = {span}\nblock_width_years = 1\n")
    with pytest.raises(ConfigError) as err:
        load_experiment(files / "a.toml")
    assert fragment in str(err.value)


def test_example_experiment_loads():
    from pathlib import Path

    folder = Path(__file__).resolve().parents[2] / "experiments"
    p = load_experiment(folder / "periods.toml")["periods"]
    assert p["density"] == "trapezoid" and set(p["windows"]) == {"early", "late"}
    assert load_experiment(folder / "periods.toml")["sites"]["start_field"] == "start_year"  # from demo.toml
