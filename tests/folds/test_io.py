"""Tests for writing and reading fold assignments."""

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest

from mlsites.errors import DataQualityWarning, InputError, OutputExistsError, VectorReadError
from mlsites.folds import (
    PrecomputedFolds,
    SpatialBlockFolds,
    fold_for_samples,
    read_folds,
    write_folds,
)


@pytest.fixture
def assignment():
    rng = np.random.default_rng(0)
    n = 300
    x, y = rng.uniform(0, 3000, (2, n))
    site = np.where(rng.random(n) < 0.25, rng.integers(0, 30, n), -1)
    cv = SpatialBlockFolds(x, y, site_id=site, block_size=600, n_splits=4, random_state=0)
    res = cv.assign(crs="EPSG:32632")
    ids = np.array([f"c{i:05d}" for i in range(n)])
    return cv, res, ids


def test_round_trip(tmp_path, assignment):
    cv, res, ids = assignment
    out = write_folds(tmp_path / "folds", ids, res.fold, res.blocks, cv.describe())
    assert out.name == "folds.csv"
    assert sorted(p.name for p in out.parent.iterdir()) == ["blocks.gpkg", "folds.csv", "folds_meta.json"]
    # outside reader: plain pandas / pyogrio see the documented columns and layer
    raw = pd.read_csv(out, dtype=str)
    assert list(raw.columns) == ["sample_id", "fold"]
    assert [name for name, _ in pyogrio.list_layers(out.parent / "blocks.gpkg")] == ["blocks"]
    table = read_folds(tmp_path / "folds")
    assert table.folds["sample_id"].tolist() == ids.tolist()
    assert np.array_equal(table.folds["fold"].to_numpy(), res.fold)
    assert table.n_splits == 4
    assert table.blocks.crs.to_epsg() == 32632
    assert table.blocks["block_id"].tolist() == res.blocks["block_id"].tolist()
    assert table.blocks["fold"].tolist() == res.blocks["fold"].tolist()
    assert table.blocks.geom_equals_exact(res.blocks.geometry, tolerance=1e-9).all()
    assert table.meta["method"] == "square_blocks" and table.meta["n_samples"] == 300


def test_precomputed_folds_from_dir_follow_the_learner_order(tmp_path, assignment):
    _, res, ids = assignment
    write_folds(tmp_path, ids, res.fold, res.blocks)
    order = np.random.default_rng(1).permutation(ids.size)
    cv = PrecomputedFolds.from_dir(tmp_path, ids[order])
    assert np.array_equal(cv.fold_array(), res.fold[order])


def test_ids_keep_leading_zeros_and_int_ids_match(tmp_path):
    write_folds(tmp_path / "a", ["007", "010", "3"], [0, 1, 0])
    assert read_folds(tmp_path / "a").folds["sample_id"].tolist() == ["007", "010", "3"]
    write_folds(tmp_path / "b", [5, 6, 7], [1, 0, 1])
    with pytest.warns(DataQualityWarning, match="1 sample"):
        folds = fold_for_samples(read_folds(tmp_path / "b"), np.array([7, 5]))
    assert folds.tolist() == [1, 1]


def test_missing_and_extra_samples(tmp_path):
    write_folds(tmp_path, ["a", "b", "c"], [0, 1, 1])
    table = read_folds(tmp_path)
    with pytest.raises(InputError, match=r"1 of 2 sample\(s\).*'z'"):
        fold_for_samples(table, ["a", "z"])
    with pytest.warns(DataQualityWarning, match=r"1 sample\(s\) not among"):
        assert fold_for_samples(table, ["c", "a"]).tolist() == [1, 0]


def test_refuses_to_overwrite_unless_asked(tmp_path, assignment):
    cv, res, ids = assignment
    write_folds(tmp_path, ids, res.fold, res.blocks)
    with pytest.raises(OutputExistsError, match="overwrite=True"):
        write_folds(tmp_path, ids, res.fold)
    write_folds(tmp_path, ids[:4], [0, 1, 0, 1], overwrite=True)
    # the new assignment has no blocks, so the old layer must not linger
    assert not (tmp_path / "blocks.gpkg").exists()
    assert read_folds(tmp_path).folds.shape == (4, 2)
    assert not list(tmp_path.glob("*partial*"))


def test_failed_write_leaves_old_files_and_no_partials(tmp_path, assignment, monkeypatch):
    cv, res, ids = assignment
    write_folds(tmp_path, ids, res.fold, res.blocks)
    before = (tmp_path / "folds.csv").read_bytes()

    def broken(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(gpd.GeoDataFrame, "to_file", broken)
    with pytest.raises(OSError, match="disk full"):
        write_folds(tmp_path, ids, np.zeros(ids.size, int) + (np.arange(ids.size) % 2), res.blocks, overwrite=True)
    assert (tmp_path / "folds.csv").read_bytes() == before
    assert not list(tmp_path.glob("*partial*"))


def _write_csv(path, text):
    path.mkdir(parents=True, exist_ok=True)
    (path / "folds.csv").write_text(text)


@pytest.mark.parametrize(
    "text, match",
    [
        ("sample_id,fold\na,0\nb,1\nc,x\n", r"folds\.csv: row 3 has fold 'x'"),
        ("sample_id,fold\na,0\nb,1.5\n", r"row 2 has fold '1\.5'"),
        ("sample_id,fold\na,0\nb,-1\n", r"row 2 has fold '-1'"),
        ("sample_id,fold\na,0\na,1\n", r"row 2 repeats sample_id 'a'"),
        ("sample_id,fold\na,0\n,1\n", r"row 2 has no sample_id"),
        ("sample_id,fold\na,0\nb,2\n", r"fold 1 has no samples"),
        ("id,fold\na,0\n", r"missing column\(s\) \['sample_id'\]"),
    ],
)
def test_read_folds_names_file_and_row(tmp_path, text, match):
    _write_csv(tmp_path, text)
    with pytest.raises(InputError, match=match):
        read_folds(tmp_path)


def test_read_folds_missing_file_and_bad_blocks(tmp_path):
    with pytest.raises(InputError, match="folds.csv not found"):
        read_folds(tmp_path / "nowhere")
    _write_csv(tmp_path, "sample_id,fold\na,0\nb,1\n")
    (tmp_path / "blocks.gpkg").write_text("not a geopackage")
    with pytest.raises(VectorReadError, match="blocks.gpkg"):
        read_folds(tmp_path)


def test_write_folds_validates_input(tmp_path, assignment):
    _, res, ids = assignment
    with pytest.raises(InputError, match="row 2 repeats"):
        write_folds(tmp_path / "a", ["x", "x"], [0, 1])
    with pytest.raises(InputError, match="one fold per sample"):
        write_folds(tmp_path / "b", ["x", "y", "z"], [0, 1])
    with pytest.raises(InputError, match=r"blocks lacks column\(s\) \['fold'\]"):
        write_folds(tmp_path / "c", ids, res.fold, res.blocks.drop(columns="fold"))
    meta = json.loads((write_folds(tmp_path / "d", ["x", "y"], [1, 0]).parent / "folds_meta.json").read_text())
    assert meta == {"n_samples": 2, "n_splits": 2}
