"""The shipped experiment files and the demo data they point at.

Every file in experiments/ must validate with load_experiment; the variants must
extend demo.toml; the demo's records must use exactly the dating categories of the
experiment files, with the category's years; the demo's truth and neighbouring DEM
must be what the report and the transfer example expect.
"""

from pathlib import Path

import numpy as np
import pytest

from mlsites.experiment import load_experiment

ROOT = Path(__file__).resolve().parents[2]
FILES = sorted((ROOT / "experiments").glob("*.toml"))


@pytest.mark.parametrize("path", FILES, ids=lambda p: p.name)
def test_every_experiment_file_validates(path):
    exp = load_experiment(path)
    # each file names its own run, so running one never overwrites another's results
    assert exp.name == path.stem or (path.stem == "periods" and exp.name == "demo_phases")


def test_variants_extend_the_demo_and_say_how_to_run():
    for path in FILES:
        if path.stem in ("demo", "every_option"):
            continue
        exp = load_experiment(path)
        assert exp.sources[0].name == "demo.toml", path.name  # base first in the chain
        header = path.read_text().split("\n\n")[0]
        assert f"experiments/{path.name}" in header, f"{path.name}: header lacks the command that runs it"


def test_survey_variants_differ_only_in_the_background():
    modes = {}
    for name in ("inside", "weighted", "none"):
        exp = load_experiment(ROOT / "experiments" / f"demo_survey_{name}.toml")
        modes[name] = (exp["sampling"]["survey_mode"], exp["sampling"]["survey_areas"])
    assert modes["inside"][0] == "inside" and modes["inside"][1].endswith("survey.gpkg")
    assert modes["weighted"][0] == "weighted" and modes["weighted"][1].endswith("survey.gpkg")
    assert modes["none"][1] is None  # "none" drops the base file's survey areas


def test_demo_records_use_exactly_the_category_table():
    import geopandas as gpd

    from mlsites.experiment._demo import DEMO_CATEGORIES

    demo = load_experiment(ROOT / "experiments" / "demo.toml")
    table = {k: tuple(float(v) for v in r) for k, r in demo["periods"]["categories"].items()}
    assert table == DEMO_CATEGORIES
    # periods.toml and every_option.toml show the same table
    for name in ("periods", "every_option"):
        other = load_experiment(ROOT / "experiments" / f"{name}.toml")["periods"]["categories"]
        assert {k: tuple(float(v) for v in r) for k, r in other.items()} == table
    for name in ("sites", "later_sites"):
        sites = gpd.read_file(ROOT / "demo_data" / f"{name}.gpkg")
        if name == "sites":
            assert set(sites["phase"]) == set(table)  # every category used, no other
        assert set(sites["phase"]) <= set(table)
        years = np.array([table[p] for p in sites["phase"]])
        np.testing.assert_array_equal(sites[["start_year", "end_year"]].to_numpy(), years)


def test_demo_truth_and_neighbour_fit_the_study_grid():
    import geopandas as gpd
    import rasterio

    data = ROOT / "demo_data"
    with rasterio.open(data / "dem.tif") as dem, rasterio.open(data / "truth.tif") as truth, \
            rasterio.open(data / "neighbour_dem.tif") as nb, rasterio.open(data / "soil.tif") as soil:
        assert truth.crs == dem.crs and truth.transform == dem.transform and truth.shape == dem.shape
        t = truth.read(1)
        assert t.dtype == np.float32 and np.nanmin(t) >= 0 and np.nanmax(t) == 1
        # neighbouring area: same CRS and cell size, overlapping the study area
        assert nb.crs == dem.crs and nb.res == dem.res
        assert nb.bounds.left < dem.bounds.right < nb.bounds.right
        # the soil map covers both, so a model using it maps on the neighbour
        assert soil.bounds.left <= dem.bounds.left and soil.bounds.right >= nb.bounds.right
    later = gpd.read_file(data / "later_sites.gpkg")
    survey = gpd.read_file(data / "survey.gpkg").union_all()
    outside = ~later.within(survey)
    assert outside.mean() > 0.5  # brief: later-found sites, some outside the strips


def test_demo_sites_follow_the_truth_and_shift_over_time():
    # Constructed truth: the sites were drawn from truth.tif, so the truth at recorded
    # and later-found sites must beat the truth at random cells (AUC > 0.5 by a margin;
    # scikit-learn's roc_auc_score as the reference). The early phases were placed
    # near the water and the late ones on high ground, so early sites lie closer to
    # the channel lines than late ones (Mann-Whitney, scipy).
    import geopandas as gpd
    import rasterio
    from scipy.stats import mannwhitneyu
    from sklearn.metrics import roc_auc_score

    data = ROOT / "demo_data"
    with rasterio.open(data / "truth.tif") as src:
        truth = src.read(1)
        sites = gpd.read_file(data / "sites.gpkg")
        later = gpd.read_file(data / "later_sites.gpkg")
        at = {n: np.array([v[0] for v in src.sample(zip(f.geometry.x, f.geometry.y))])
              for n, f in (("sites", sites), ("later", later))}
    rng = np.random.default_rng(0)
    cells = truth[np.isfinite(truth)]
    bg = rng.choice(cells, 5000)
    for name, values in at.items():
        auc = roc_auc_score(np.r_[np.ones(values.size), np.zeros(bg.size)], np.r_[values, bg])
        assert auc > 0.7, (name, auc)
    streams = gpd.read_file(data / "streams.gpkg").union_all()
    dist = sites.geometry.distance(streams)
    early = sites["phase"].isin(["Reedbank phase", "Tallow Hill phase"])
    late = sites["phase"].isin(["Quernstone phase", "Lantern Road phase"])
    assert mannwhitneyu(dist[early], dist[late], alternative="less").pvalue < 0.01
