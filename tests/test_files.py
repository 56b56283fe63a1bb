"""mlsites._files: the one staged-folder helper and the single-file helper."""

import os
import stat

import pytest

from mlsites._files import link_or_copy, replacing, staged_folder


def _mode(path):
    return stat.S_IMODE(path.stat().st_mode)


def test_folder_mode_replaces_the_target_as_a_whole(tmp_path):
    target = tmp_path / "run"
    target.mkdir()
    (target / "old.txt").write_text("old")
    with staged_folder(target) as staging:
        assert staging.parent == tmp_path and staging.name.startswith(".run.partial-")
        (staging / "new.txt").write_text("new")
        assert (target / "old.txt").exists()  # nothing visible before the block ends
    assert sorted(p.name for p in target.iterdir()) == ["new.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]  # no staging or old folder left
    # reference: the permissions the OS gives any new folder (os.mkdir honours the umask),
    # not mkdtemp's owner-only 0700
    os.mkdir(tmp_path / "plain")
    assert _mode(target) == _mode(tmp_path / "plain")


def test_failure_leaves_the_target_as_it_was(tmp_path):
    target = tmp_path / "run"
    target.mkdir()
    (target / "old.txt").write_text("old")
    with pytest.raises(RuntimeError):
        with staged_folder(target) as staging:
            (staging / "new.txt").write_text("new")
            raise RuntimeError("boom")
    assert [p.name for p in target.iterdir()] == ["old.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]
    with pytest.raises(RuntimeError):
        with staged_folder(tmp_path / "never") as staging:
            raise RuntimeError("boom")
    assert not (tmp_path / "never").exists() and sorted(p.name for p in tmp_path.iterdir()) == ["run"]


def test_files_mode_keeps_other_content_and_removes_stale_files(tmp_path, monkeypatch):
    target = tmp_path / "samples"
    target.mkdir()
    for name in ("keep.txt", "blocks.gpkg", "table.parquet"):
        (target / name).write_text("old")
    (target / ".cache").mkdir()
    moved = []
    real_replace = os.replace

    def recording_replace(src, dst):
        moved.append(os.path.basename(dst))
        real_replace(src, dst)

    monkeypatch.setattr(os, "replace", recording_replace)
    with staged_folder(target, files=["blocks.gpkg", "folds.csv", "table.parquet"]) as staging:
        assert staging.parent == target
        (staging / "table.parquet").write_text("new")
        (staging / "folds.csv").write_text("new")
        assert not (target / "table.parquet").read_text() == "new"
    assert sorted(p.name for p in target.iterdir()) == [".cache", "folds.csv", "keep.txt", "table.parquet"]
    assert (target / "table.parquet").read_text() == "new" and (target / "keep.txt").read_text() == "old"
    assert moved[-1] == "table.parquet"  # the marker comes last


def test_replacing_and_link_or_copy(tmp_path):
    path = tmp_path / "a.csv"
    with replacing(path) as tmp:
        tmp.write_text("x")
        assert not path.exists()
    assert path.read_text() == "x"
    link_or_copy(path, tmp_path / "b.csv")
    assert (tmp_path / "b.csv").read_text() == "x"
