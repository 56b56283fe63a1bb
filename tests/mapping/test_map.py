"""map_model: windowed maps equal whole-array prediction, zones at calibrated shares, bad input.

References: scikit-learn's in-memory ``predict_proba`` on the whole feature array
(read with rasterio, not with the mapping code), NumPy's standard deviation for the
spread, :func:`mlsites.evaluation.cut_for_area_share` on the whole potential array
for the zone cuts (the map uses an independent two-pass histogram), and the binomial
standard error for the held-out zone shares.
"""

import json
import shutil

import numpy as np
import pandas as pd
import pytest
import rasterio

from mlsites.errors import InputError, OutputExistsError
from mlsites.evaluation import assign_zones, cut_for_area_share
from mlsites.experiment._models import load_fold_models, load_model, save_model
from mlsites.mapping import CHUNK_ROWS, ZONE_OUTSIDE, ApplicabilityModel, map_model, zone_colours
from mlsites.mapping._predict import single_threaded

from tests.mapping.study import LEARNERS


def card_of(run, learner):
    return run.models_dir / f"{learner}.card.json"


def read_band(path):
    with rasterio.open(path) as src:
        return src.read(1, masked=True).astype(np.float64).filled(np.nan)


def whole_features(card):
    """Feature matrix of every cell with all values, read whole with rasterio."""
    stack = np.stack([read_band(e["path"]) for e in card["feature_layers"]])
    valid = np.isfinite(stack).all(axis=0)
    return pd.DataFrame(stack[:, valid].T, columns=card["features"]), valid


def padded_predict(estimator, X):
    """scikit-learn predict_proba in batches of CHUNK_ROWS rows, the last one padded."""
    out = []
    for start in range(0, len(X), CHUNK_ROWS):
        block = X.iloc[start:start + CHUNK_ROWS]
        m = len(block)
        if m < CHUNK_ROWS:
            block = pd.concat([block, block.iloc[[-1] * (CHUNK_ROWS - m)]])
        out.append(estimator.predict_proba(block)[:m, 1])
    return np.concatenate(out)


def potential_reference(card_path):
    saved = load_model(card_path)
    est = single_threaded(saved.estimator)  # a forest's vote sum in a fixed tree order
    X, valid = whole_features(saved.card)
    ref = np.full(valid.shape, np.nan, dtype=np.float32)
    ref[valid] = np.clip(padded_predict(est, X), 0, 1).astype(np.float32)
    plain = np.full(valid.shape, np.nan)
    plain[valid] = est.predict_proba(X)[:, 1]
    return ref, plain, saved, X, valid


@pytest.fixture(scope="module")
def maps(study_run, tmp_path_factory):
    """One default map per learner (whole-tile windows, one job)."""
    root = tmp_path_factory.mktemp("maps")
    return {n: map_model(card_of(study_run, n), root / n, quiet=True) for n in LEARNERS}


@pytest.mark.parametrize("learner", LEARNERS)
def test_windowed_map_equals_whole_array_prediction(study_run, maps, tmp_path, learner):
    ref, plain, _, _, _ = potential_reference(card_of(study_run, learner))
    # equal-sized batches give exactly the in-memory scores; the same as one unpadded
    # call within float32 rounding (BLAS may round the last float64 bit otherwise)
    np.testing.assert_allclose(ref, plain, rtol=0, atol=1e-6, equal_nan=True)
    default = read_band(maps[learner].out_dir / "potential.tif")
    np.testing.assert_array_equal(default, ref)
    for rows, cols, jobs in ((40, 64, 1), (64, 120, 2), (7, 256, 2)):
        out = map_model(card_of(study_run, learner), tmp_path / f"w{rows}x{cols}j{jobs}", n_jobs=jobs,
                        block_rows=rows, block_cols=cols, quiet=True)
        for name in ("potential.tif", "spread.tif", "zones.tif"):
            np.testing.assert_array_equal(read_band(out.out_dir / name), read_band(maps[learner].out_dir / name),
                                          err_msg=f"{name}, windows {rows} x {cols}, {jobs} job(s)")


@pytest.mark.parametrize("learner", LEARNERS)
def test_spread_is_the_sd_of_the_fold_models(study_run, maps, learner):
    saved = load_model(card_of(study_run, learner))
    folds = load_fold_models(saved)
    assert len(folds) == 4 == len(saved.card["fold_models"])
    X, valid = whole_features(saved.card)
    # reference: NumPy's sample standard deviation (ddof = 1) over the fold models
    preds = np.stack([single_threaded(m).predict_proba(X)[:, 1] for m in folds])
    expected = np.full(valid.shape, np.nan)
    expected[valid] = preds.std(axis=0, ddof=1)
    np.testing.assert_allclose(read_band(maps[learner].out_dir / "spread.tif"), expected, rtol=1e-5, atol=1e-7,
                               equal_nan=True)


@pytest.mark.parametrize("learner", ["logistic", "random_forest"])
def test_applicability_layers_equal_the_whole_array_model(study_run, maps, learner):
    # reference: ApplicabilityModel (tested against METHODS.md §8 and brute force)
    # fitted on the run's sample table and applied to the whole feature array at once
    saved = load_model(card_of(study_run, learner))
    card = saved.card
    table = pd.read_parquet(card["training_table"]["path"])
    # the run's explanation stage writes the layer weights into the card
    assert card.get("applicability_weights")
    model = ApplicabilityModel().fit(table[card["features"]], table["fold"].to_numpy(),
                                     weights=card["applicability_weights"],
                                     sample_weight=table["weight"].to_numpy(), categorical=card["categorical"])
    X, valid = whole_features(card)
    di = read_band(maps[learner].out_dir / "dissimilarity.tif")
    app = read_band(maps[learner].out_dir / "applicable.tif")
    expected = model.dissimilarity(X)
    np.testing.assert_allclose(di[valid], expected.astype(np.float32), rtol=0, atol=0)
    np.testing.assert_array_equal(app[valid], (expected <= model.threshold_).astype(np.float64))
    assert np.all(np.isnan(di[~valid])) and np.all(np.isnan(app[~valid]))  # nodata (255) read as NaN
    assert maps[learner].summary["applicability"]["threshold"] == pytest.approx(model.threshold_, rel=1e-12)


def test_spread_is_zero_where_all_fold_models_agree(study_run, tmp_path):
    # a constant surface of disagreement: every fold model is the same fitted model
    saved = load_model(card_of(study_run, "logistic"))
    extra = {k: saved.card[k] for k in ("feature_layers", "terrain", "zones")}
    copy = save_model(saved.estimator, tmp_path / "models", "logistic", features=saved.card["features"],
                      categorical=saved.card["categorical"], grid=saved.card["grid"], extra=extra,
                      fold_estimators=[saved.estimator] * 3)
    result = map_model(copy.card_path, tmp_path / "map", quiet=True)
    spread = read_band(result.out_dir / "spread.tif")
    potential = read_band(result.out_dir / "potential.tif")
    mapped = np.isfinite(potential)
    assert mapped.sum() > 0
    assert np.all(spread[mapped] == 0.0)
    assert np.all(np.isnan(spread[~mapped]))


@pytest.mark.parametrize("learner", LEARNERS)
def test_zone_areas_match_the_calibrated_shares(study_run, maps, learner):
    summary = maps[learner].summary
    saved = load_model(card_of(study_run, learner))
    calibrated = saved.card["zones"]["zones"]
    potential = read_band(maps[learner].out_dir / "potential.tif")
    values = potential[np.isfinite(potential)]
    n = values.size
    assert summary["cells"]["mapped"] == n
    # reference: the array cut of the evaluation package on the whole potential
    thresholds = [cut_for_area_share(values, z["area_share"]) for z in calibrated]
    expected = assign_zones(potential, thresholds)
    # cells outside the area of applicability carry a code of their own
    applicable = read_band(maps[learner].out_dir / "applicable.tif")
    outside = (applicable == 0) & (expected != 0)
    expected[outside] = ZONE_OUTSIDE
    zones = read_band(maps[learner].out_dir / "zones.tif")
    np.testing.assert_array_equal(np.nan_to_num(zones, nan=0), expected)
    assert summary["cells"]["outside_applicability"] == int(outside.sum())
    for z, row in zip(calibrated, summary["zones"]):
        assert row["name"] == z["name"]
        assert row["calibrated_area_share"] == z["area_share"]
        # cells of one score cannot be split between zones: the zone is within one
        # cell of a * N, or within the group of tied scores at its boundary
        above = values[values >= np.float32(row["threshold"])]
        boundary_ties = np.count_nonzero(values == above.min()) if above.size else 0
        assert abs(row["cumulative_area_share"] * n - z["area_share"] * n) <= max(1, boundary_ties)
    assert sum(r["cells"] for r in summary["zones"]) == n


@pytest.mark.parametrize("learner", ["logistic", "mlp"])
def test_continuous_scores_give_zones_within_one_cell(study_run, maps, learner):
    # float scores of these learners do not tie, so every zone is within one cell
    calibrated = load_model(card_of(study_run, learner)).card["zones"]["zones"]
    n = maps[learner].summary["cells"]["mapped"]
    for z, row in zip(calibrated, maps[learner].summary["zones"]):
        assert abs(row["cumulative_area_share"] - z["area_share"]) * n <= 1


def test_held_out_zone_shares_meet_their_targets_for_every_learner(study_run):
    # Virtual sites (mlsites.synthetic via the demo builder): each fold's zones come
    # from the other folds' calibration, so the pooled held-out share tests them. It
    # must reach the target within 2 binomial standard errors,
    # 2 sqrt(t (1 - t) / n) (common practice for a ~95 % band).
    zones = pd.read_csv(study_run.run_dir / "zones.csv")
    assert sorted(zones["learner"].unique()) == sorted(LEARNERS)
    for row in zones[zones["zone"] != "low"].itertuples():
        n = row.n_heldout_sites
        assert row.heldout_site_share >= row.target - 2 * np.sqrt(row.target * (1 - row.target) / n), row.learner
        assert row.heldout_site_share_ci_low <= row.heldout_site_share <= row.heldout_site_share_ci_high


def test_map_files_are_tiled_compressed_with_nodata_names_and_colours(maps):
    out = maps["gradient_boosting"].out_dir
    assert sorted(p.name for p in out.iterdir()) == ["applicable.tif", "dissimilarity.tif", "map.json",
                                                     "potential.tif", "spread.tif", "zones.tif"]
    for name, dtype in (("potential.tif", "float32"), ("spread.tif", "float32"), ("zones.tif", "uint8"),
                        ("dissimilarity.tif", "float32"), ("applicable.tif", "uint8")):
        with rasterio.open(out / name) as src:
            assert src.profile["tiled"] and src.profile["compress"] == "deflate", name
            assert src.dtypes[0] == dtype
            assert src.nodata is not None
    with rasterio.open(out / "zones.tif") as src:
        tags = src.tags()
        assert (tags["zone_3"], tags["zone_2"], tags["zone_1"]) == ("high", "medium", "low")
        assert tags[f"zone_{ZONE_OUTSIDE}"] == "outside the area of applicability"
        cmap = src.colormap(1)
    colours = zone_colours(3)
    for code in (1, 2, 3, ZONE_OUTSIDE):
        assert cmap[code] == colours[code]
    # the ramp darkens from low to high (relative luminance, ITU-R BT.709 weights)
    lum = [0.2126 * colours[c][0] + 0.7152 * colours[c][1] + 0.0722 * colours[c][2] for c in (1, 2, 3)]
    assert lum[0] > lum[1] > lum[2]
    summary = json.loads((out / "map.json").read_text())
    assert summary["model_card"]["learner"] == "gradient_boosting"
    assert summary["cells"]["outside_applicability"] == sum(z["cells_outside_applicability"] for z in summary["zones"])
    assert set(summary["seconds"]) >= {"features", "prediction", "zone_cuts", "zones", "total"}


def test_dask_local_cluster_gives_the_same_map(study_run, maps, tmp_path):
    pytest.importorskip("dask.distributed")
    out = map_model(card_of(study_run, "random_forest"), tmp_path / "dask", n_jobs=2, scheduler="local",
                    block_rows=40, block_cols=64, quiet=True)
    for name in ("potential.tif", "spread.tif", "zones.tif"):
        np.testing.assert_array_equal(read_band(out.out_dir / name),
                                      read_band(maps["random_forest"].out_dir / name), err_msg=name)
    assert out.summary["settings"]["scheduler"] == "local"


# ------------------------------------------------------------------ another DEM


def test_dem_option_rebuilds_the_same_features(study_run, study_data, maps, tmp_path):
    # the study's own DEM, given as a new DEM: its layers are derived again with the
    # card's settings, so the map must equal the map of the run's cached layers
    dem = tmp_path / "same_dem.tif"
    shutil.copy(study_data / "dem.tif", dem)
    lines = []
    out = map_model(card_of(study_run, "gradient_boosting"), tmp_path / "map", dem=dem,
                    cache_dir=tmp_path / "cache", quiet=True, log=lines.append)
    assert out.summary["features"]["source"] == "derived for DEM"
    assert not out.summary["features"]["aligned"]
    for name in ("potential.tif", "zones.tif"):
        np.testing.assert_array_equal(read_band(out.out_dir / name),
                                      read_band(maps["gradient_boosting"].out_dir / name), err_msg=name)


def _resampled_dem(src_path, dst_path, factor, shift=(0.0, 0.0)):
    from affine import Affine
    from rasterio.enums import Resampling

    with rasterio.open(src_path) as src:
        data = src.read(1, out_shape=(src.height // factor, src.width // factor), resampling=Resampling.average)
        t = src.transform @ Affine.scale(factor)
        t = Affine(t.a, t.b, t.c + shift[0], t.d, t.e, t.f + shift[1])
        profile = dict(src.profile, width=data.shape[1], height=data.shape[0], transform=t)
    with rasterio.open(dst_path, "w", **profile) as dst:
        dst.write(data, 1)
    return dst_path


def test_dem_in_another_resolution_is_aligned_and_said(study_run, study_data, tmp_path):
    dem = _resampled_dem(study_data / "dem.tif", tmp_path / "dem20.tif", 2)
    lines = []
    out = map_model(card_of(study_run, "logistic"), tmp_path / "map", dem=dem, cache_dir=tmp_path / "cache",
                    quiet=True, log=lines.append)
    assert any("aligned dem20.tif" in line and "model's cell size 10" in line for line in lines)
    assert out.summary["features"]["aligned"] is True
    assert out.summary["grid"]["transform"][0] == 10.0
    with rasterio.open(out.out_dir / "potential.tif") as src:
        assert src.res == (10.0, 10.0) and src.shape == (120, 120)


def test_dem_outside_the_inputs_is_refused(study_run, study_data, tmp_path):
    dem = _resampled_dem(study_data / "dem.tif", tmp_path / "far.tif", 1, shift=(100_000.0, 0.0))
    with pytest.raises(InputError, match=r"input layer 'soil' does not overlap far\.tif"):
        map_model(card_of(study_run, "logistic"), tmp_path / "map", dem=dem, cache_dir=tmp_path / "cache",
                  quiet=True)
    assert not (tmp_path / "map").exists()


# ------------------------------------------------------------------ bad input


def copy_card(run, learner, dest):
    """The card, model and fold model files of a learner, copied to ``dest``."""
    dest.mkdir(parents=True, exist_ok=True)
    for p in run.models_dir.glob(f"{learner}.*"):
        shutil.copy(p, dest / p.name)
    return dest / f"{learner}.card.json"


def edit_card(path, change):
    card = json.loads(path.read_text())
    change(card)
    path.write_text(json.dumps(card))
    return path


def no_leftovers(parent):
    return [p.name for p in parent.iterdir() if ".partial" in p.name] == []


def test_card_without_a_layer_for_a_feature_names_it(study_run, tmp_path):
    card = copy_card(study_run, "logistic", tmp_path / "models")
    edit_card(card, lambda c: c.update(feature_layers=[e for e in c["feature_layers"] if e["name"] != "slope"]))
    with pytest.raises(InputError, match=r"feature\(s\) slope of the model have no layer"):
        map_model(card, tmp_path / "map", quiet=True)
    assert not (tmp_path / "map").exists() and no_leftovers(tmp_path)


def test_missing_or_changed_layer_file_is_named(study_run, tmp_path):
    card = copy_card(study_run, "logistic", tmp_path / "models")
    edit_card(card, lambda c: c["feature_layers"][0].update(path=str(tmp_path / "gone.tif")))
    with pytest.raises(InputError, match=r"gone\.tif: layer 'slope' .* not found"):
        map_model(card, tmp_path / "map", quiet=True)
    card = copy_card(study_run, "logistic", tmp_path / "models2")
    edit_card(card, lambda c: c["feature_layers"][0].update(sha256="0" * 64))
    with pytest.raises(InputError, match="differs from the file the model was trained on"):
        map_model(card, tmp_path / "map", quiet=True)


def test_model_or_fold_model_failing_its_hash_is_refused(study_run, tmp_path):
    card = copy_card(study_run, "mlp", tmp_path / "models")
    model = card.with_name("mlp.skops")
    model.write_bytes(model.read_bytes() + b"x")
    with pytest.raises(InputError, match=r"mlp\.skops: SHA-256 .* refusing to load"):
        map_model(card, tmp_path / "map", quiet=True)
    card = copy_card(study_run, "mlp", tmp_path / "models2")
    fold = card.with_name("mlp.fold1.skops")
    fold.write_bytes(fold.read_bytes() + b"x")
    with pytest.raises(InputError, match=r"mlp\.fold1\.skops: SHA-256"):
        map_model(card, tmp_path / "map", quiet=True)
    assert not (tmp_path / "map").exists() and no_leftovers(tmp_path)


def test_existing_output_folder_is_refused_without_fresh(study_run, tmp_path):
    out = tmp_path / "map"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(OutputExistsError, match="--fresh"):
        map_model(card_of(study_run, "fuzzy"), out, quiet=True)
    assert (out / "keep.txt").read_text() == "mine"
    result = map_model(card_of(study_run, "fuzzy"), out, fresh=True, quiet=True)
    assert not (out / "keep.txt").exists() and (out / "zones.tif").exists()
    assert result.summary["model_card"]["sha256"]
