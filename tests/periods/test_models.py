"""Period-specific models: weights, left-out sites, per-window top layers, continuity, the run stage."""

import functools
import json
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from mlsites.errors import InputError
from mlsites.learners import make_learner
from mlsites.periods import fit_window_models, window_probabilities, window_table, window_weights
from mlsites.sampling import sample_weights
from mlsites.synthetic import TWO_PHASES
from tests.synthetic.phased import phased_study

LAYERS = ("slope", "tpi", "stream_distance")
LEARNERS = {"logistic": functools.partial(make_learner, "logistic", random_state=0),
            "random_forest": functools.partial(make_learner, "random_forest", random_state=0, n_estimators=30,
                                               min_samples_leaf=3)}
PHASES = {"mirewalk": TWO_PHASES["Mirewalk phase"], "spurfire": TWO_PHASES["Spurfire phase"]}
# Control: two consecutive windows inside the earlier phase, so both share its preference.
HALVES = {"mirewalk_early": (-2600.0, -2200.0), "mirewalk_late": (-2200.0, -1800.0)}


# ---------------------------------------------------------------- weights


def test_weights_follow_the_probability_and_average_one():
    # sites A (p = 1, one cell), B (p = 0.5, one cell), C (p = 1, two cells); 4 background cells
    label = np.array([1, 1, 1, 1, 0, 0, 0, 0])
    site = np.array(["A", "B", "C", "C", "", "", "", ""], dtype=object)
    prob = np.array([1.0, 0.5, 1.0, 1.0, np.nan, np.nan, np.nan, np.nan])
    w = window_weights(label, site, prob)
    assert w[0] == pytest.approx(2 * w[1], rel=1e-12)  # the brief: probability 1 weighs twice 0.5
    assert w[2] + w[3] == pytest.approx(w[0], rel=1e-12)  # each site counts once, whatever its cells
    # balanced weighting (METHODS.md §7): all background weighs as much as all sites; mean 1
    assert w[4:].sum() == pytest.approx(w[:4].sum(), rel=1e-12)
    assert w.mean() == pytest.approx(1.0, rel=1e-12)
    # every probability 1: exactly the project's sample_weights (the reference convention)
    np.testing.assert_allclose(window_weights(label, site, np.ones(8)), sample_weights(label, site), rtol=1e-12)


@pytest.mark.parametrize("bad", [0.0, 1.5, np.nan])
def test_a_site_probability_outside_0_1_is_refused(bad):
    with pytest.raises(InputError, match=r"outside \(0, 1\]"):
        window_weights(np.array([1, 0]), np.array(["A", ""], dtype=object), np.array([bad, np.nan]))


def test_sites_below_the_minimum_are_listed_never_silently_dropped():
    table = pd.DataFrame({"label": [1, 1, 1, 1, 0, 0, 0], "site_id": ["A", "B", "B", "C", "", "", ""],
                          "weight": 1.0, "slope": np.arange(7.0)})
    # A: [0, 100) all inside [0, 100); B: [50, 250), 1/4 inside; C has no date at all
    win = window_probabilities(["A", "B"], [0.0, 50.0], [100.0, 250.0], {"w": (0.0, 100.0)},
                               min_probability=0.3)
    assert win.left_out["site_id"].tolist() == ["B"] and "below min_probability 0.3" in win.left_out["reason"][0]
    wt, undated = window_table(table, win.for_window("w"), window="w")
    # B (below the minimum) and C (undated) are out, the background is unchanged
    assert wt["site_id"].tolist() == ["A", "", "", ""]
    assert sorted(undated["site_id"]) == ["B", "C"]


# ---------------------------------------------------------------- phased virtual sites


@pytest.fixture(scope="module")
def phased_table():
    """A sample table of two-phase virtual sites (one cell each) and 1500 background cells, 3 block folds."""
    grid, layers, phased = phased_study()
    sites = phased.sites
    r, c = grid.rowcol(sites.geometry.x.to_numpy(), sites.geometry.y.to_numpy())
    rng = np.random.default_rng(0)
    valid = np.flatnonzero(np.isfinite(np.stack([layers[k] for k in LAYERS])).all(axis=0).ravel())
    br, bc = np.unravel_index(rng.choice(valid, 1500, replace=False), grid.shape)
    rows, cols = np.r_[r, br], np.r_[c, bc]
    label = np.r_[np.ones(r.size, int), np.zeros(br.size, int)]
    table = pd.DataFrame({"sample_id": np.arange(label.size), "label": label,
                          "site_id": np.r_[sites["site_id"].to_numpy(), np.full(br.size, "")],
                          # blocks of 40 x 40 cells (800 m) dealt to 3 folds
                          "fold": ((rows // 40) * 5 + cols // 40) % 3,
                          **{k: layers[k][rows, cols] for k in LAYERS}})
    table = table[np.isfinite(table[list(LAYERS)]).all(axis=1)].reset_index(drop=True)
    table["weight"] = sample_weights(table["label"].to_numpy(), table["site_id"].to_numpy())
    return table, sites


def _fit(phased_table, windows):
    table, sites = phased_table
    win = window_probabilities(sites["site_id"], sites["start_year"], sites["end_year"], windows,
                               min_probability=0.2)
    return fit_window_models(table, win, features=list(LAYERS), learners=LEARNERS, random_state=1, n_repeats=3)


@pytest.fixture(scope="module")
def phase_models(phased_table):
    return _fit(phased_table, PHASES)


@pytest.fixture(scope="module")
def control_models(phased_table):
    return _fit(phased_table, HALVES)


def test_each_phase_model_finds_its_own_top_layer(phase_models):
    m = phase_models.metrics
    assert len(m) == 4 and set(zip(m["window"], m["learner"])) == {(w, n) for w in PHASES for n in LEARNERS}
    best = m[m["rank"] == 1].set_index("window")["top_layer"]
    # truth by construction (mlsites/synthetic/_phases.py PHASE_PREFERENCES): the earlier phase is
    # placed by distance to streams (weight 4), the later by topographic position (tpi)
    assert best["mirewalk"] == "stream_distance" and best["spurfire"] == "tpi"
    # the importance table holds every layer of every learner of every window
    imp = phase_models.importance
    assert len(imp) == 2 * len(LEARNERS) * len(LAYERS)
    assert (m["auc_mean"] > 0.7).all()  # both phases are placed by strong preferences


def test_continuity_shows_the_shift_against_a_control(phase_models, control_models):
    shift = phase_models.continuity.iloc[0]
    same = control_models.continuity.iloc[0]
    assert (shift["window"], shift["next_window"]) == ("mirewalk", "spurfire")
    # the control's windows share one preference: their high zones overlap far beyond chance
    # (two unrelated zones share the next zone's area share) and the next window holds about
    # as many of this window's held-out sites as its own zone does
    assert same["zone_overlap"] > 3 * same["overlap_by_chance"]
    assert same["sites_in_next_zone"] > 0.8 * same["sites_in_own_zone"]
    # a change of preference: little overlap, and the later zone misses the earlier sites
    assert shift["zone_overlap"] < 0.5 * same["zone_overlap"]
    assert shift["sites_in_next_zone"] < 0.5 * shift["sites_in_own_zone"]
    # own-zone capture is the held-out calibration: near the 0.70 target of the top zone
    assert 0.5 < shift["sites_in_own_zone"] < 0.9


def test_effective_sites_and_dropped_sites(phase_models, phased_table):
    table, sites = phased_table
    m = phase_models.metrics
    table_sites = set(table.loc[table["label"] == 1, "site_id"])
    for name in PHASES:
        row = m[m["window"] == name].iloc[0]
        # Kish's effective size lies between 1 and the number of sites; equals it only for equal weights
        assert 1 <= row["effective_sites"] <= row["n_sites"]
        dropped = set(phase_models.dropped.loc[phase_models.dropped["window"] == name, "site_id"])
        # every site of the table is either in the window's model or listed
        assert row["n_sites"] + len(dropped) == len(table_sites)


# ---------------------------------------------------------------- inside a run


def test_no_dates_no_stage_and_one_log_line(tmp_path):
    from mlsites.periods._in_run import periods_in_run

    lines = []
    exp = {"sites": {"start_field": None, "end_field": None}, "periods": {"category_field": None, "categories": {}}}
    assert periods_in_run(SimpleNamespace(exp=exp, log=lines.append, staging=tmp_path)) is None
    assert len(lines) == 1 and "no periods stage" in lines[0] and not list(tmp_path.iterdir())


RUN = """
[study]
name = "dated"
dem = "{data}/dem.tif"
seed = 3

[terrain]
layers = ["slope", "tpi", "stream_distance"]
tpi_radii_m = [50.0]
stream_lines = "{data}/streams.gpkg"

[sites]
path = "{data}/sites.gpkg"
start_field = "start_year"
end_field = "end_year"

[sampling]
site_buffer_m = 0.0
background_count = 500

[folds]
method = "square_blocks"
n_splits = 3
block_size_m = 300.0

[learners]
use = ["logistic", "random_forest"]
[learners.random_forest]
n_estimators = 15
min_samples_leaf = 3

[explain]
n_repeats = 2

[maps]
learners = "none"

[periods]
block_width_years = 500.0
n_simulations = 100
bandwidth_m = 200.0
min_probability = 0.2

[periods.windows]
early = [-3200, -1700]
late = [-1700, 500]
"""


def test_a_dated_run_writes_periods_and_window_models(tmp_path, study_data):
    from mlsites.experiment import run_experiment

    path = tmp_path / "dated.toml"
    path.write_text(RUN.format(data=study_data))
    result = run_experiment(path, quiet=True, n_jobs=1)
    folder = result.run_dir / "periods"
    summary = json.loads((folder / "periods.json").read_text())
    # the keys the run report reads (mlsites/report/_sections.py)
    assert summary["n_sites_dated"] > 0 and summary["blocks"]["width_years"] == 500.0
    assert summary["n_simulations"] == 100 and "sites_on_png" in summary["maps"] and "units" in summary["maps"]
    assert (folder / "site_counts.png").exists() and (folder / "density_maps.png").exists()
    metrics = pd.read_csv(folder / "windows" / "window_metrics.csv")
    # one row per learner per window
    assert sorted(zip(metrics["window"], metrics["learner"])) == sorted(
        (w, n) for w in ("early", "late") for n in ("logistic", "random_forest"))
    for col in ("auc_mean", "auc_sd", "boyce_mean", "n_sites", "effective_sites", "top_layer"):
        assert col in metrics.columns
    assert set(metrics["top_layer"]) <= {"slope", "tpi_50m", "tpi", "stream_distance"} | set(
        pd.read_csv(folder / "windows" / "importance.csv")["layer"])
    cont = pd.read_csv(folder / "windows" / "continuity.csv")
    assert cont[["window", "next_window"]].values.tolist() == [["early", "late"]]
    assert 0 <= cont["zone_overlap"].iloc[0] <= 1 and 0 <= cont["sites_in_next_zone"].iloc[0] <= 1
    dropped = pd.read_csv(folder / "windows" / "dropped_sites.csv")
    assert list(dropped.columns) == ["window", "site_id", "probability", "reason"]
    samples = pd.read_parquet(result.run_dir / "samples" / "samples.parquet")
    n_table = samples.loc[samples["label"] == 1, "site_id"].nunique()
    for w in ("early", "late"):  # no site silently lost: in the window's model or listed
        n_kept = metrics.loc[metrics["window"] == w, "n_sites"].iloc[0]
        assert n_kept + (dropped["window"] == w).sum() == n_table
    # the background is the run's, unchanged (500 drawn, less those lacking a layer value)
    assert json.loads((folder / "windows" / "windows.json").read_text())["n_background"] == (samples["label"] == 0).sum()
    assert result.manifest["stages"]["periods"]["windows"]["early"]["best"] in ("logistic", "random_forest")
    log = (result.run_dir / "run.log").read_text()
    assert "periods: window early:" in log and "left out" in log


def test_a_window_with_a_fold_lacking_sites_is_skipped_and_named():
    rng = np.random.default_rng(0)
    n_bg = 30
    site = [f"S{i}" for i in range(8)]
    # 8 one-cell sites, 4 per fold; sites S0..S3 (fold 0) are early, S4..S7 (fold 1) early and late
    table = pd.DataFrame({"sample_id": np.arange(8 + n_bg), "label": np.r_[np.ones(8, int), np.zeros(n_bg, int)],
                          "site_id": site + [""] * n_bg, "fold": np.r_[np.zeros(4, int), np.ones(4, int),
                                                                       np.arange(n_bg) % 2],
                          "slope": np.r_[rng.normal(2, 1, 8), rng.normal(0, 1, n_bg)]})
    table["weight"] = sample_weights(table["label"].to_numpy(), table["site_id"].to_numpy())
    win = window_probabilities(site, [0.0] * 4 + [0.0] * 4, [100.0] * 4 + [300.0] * 4,
                               {"early": (0.0, 100.0), "late": (200.0, 300.0)}, min_probability=0.2)
    lines = []
    res = fit_window_models(table, win, features=["slope"], learners={"logistic": LEARNERS["logistic"]},
                            log=lines.append)
    # "late" holds only S4..S7, all in fold 1: fold 0 has no held-out site, so no model for it
    assert res.metrics["window"].tolist() == ["early"] and list(res.summary["skipped"]) == ["late"]
    assert "Fold 0 has no site cells" in res.summary["skipped"]["late"]
    assert any(ln.startswith("window late: no models;") for ln in lines)
    assert res.continuity.empty
