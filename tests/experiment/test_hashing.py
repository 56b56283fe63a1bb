"""Input hashes: side files of multi-file formats, and the size-and-time memo."""

import hashlib

import mlsites.experiment._hashing as hashing
from mlsites.experiment._hashing import entry_digest, input_hashes, side_files


class _Exp:
    """Just enough of an Experiment for input_hashes."""

    def __init__(self, dem, sites):
        self.settings = {"study": {"dem": str(dem)}, "sites": {"path": str(sites)},
                         "terrain": {"stream_lines": None}, "sampling": {"survey_areas": None},
                         "inputs": {}, "distances": {}}

    def __getitem__(self, key):
        return self.settings[key]


def test_side_files_of_shapefiles_and_rasters(tmp_path):
    # GDAL's side-file names (from memory): a Shapefile is .shp + .shx/.dbf/.prj/.cpg,
    # rasters get NAME.aux.xml, world files STEM.tfw and external NAME.ovr overviews.
    for name in ("sites.shp", "sites.shx", "sites.dbf", "sites.prj", "sites.CPG", "sites_old.dbf",
                 "sites.csv", "dem.tif", "dem.tif.aux.xml", "dem.tfw", "dem.tif.ovr", "dem2.tif", "dem.txt"):
        (tmp_path / name).write_bytes(name.encode())
    assert [p.name for p in side_files(tmp_path / "sites.shp")] == ["sites.CPG", "sites.dbf", "sites.prj",
                                                                    "sites.shx"]
    assert [p.name for p in side_files(tmp_path / "dem.tif")] == ["dem.tfw", "dem.tif.aux.xml", "dem.tif.ovr"]
    assert side_files(tmp_path / "dem2.tif") == []


def test_editing_a_side_file_changes_the_key(tmp_path):
    for name in ("dem.tif", "sites.shp", "sites.dbf", "sites.prj"):
        (tmp_path / name).write_bytes(name.encode())
    exp = _Exp(tmp_path / "dem.tif", tmp_path / "sites.shp")
    before = input_hashes(exp)
    # the named file's own digest is plain SHA-256 of its bytes (hashlib reference)
    assert before["sites.path"]["sha256"] == hashlib.sha256(b"sites.shp").hexdigest()
    assert entry_digest(before["study.dem"]) == hashlib.sha256(b"dem.tif").hexdigest()
    (tmp_path / "sites.dbf").write_bytes(b"other ids")
    after = input_hashes(exp)
    assert after["sites.path"]["sha256"] == before["sites.path"]["sha256"]
    assert entry_digest(after["sites.path"]) != entry_digest(before["sites.path"])


def test_memo_skips_unchanged_files_and_sees_changed_ones(tmp_path, monkeypatch):
    for name in ("dem.tif", "sites.gpkg"):
        (tmp_path / name).write_bytes(name.encode() * 100)
    exp = _Exp(tmp_path / "dem.tif", tmp_path / "sites.gpkg")
    read = []
    real = hashing.file_digest
    monkeypatch.setattr(hashing, "file_digest", lambda p, **kw: read.append(p.name) or real(p, **kw))
    first = input_hashes(exp, memo_dir=tmp_path / "cache")
    # files changed within the racy interval before hashing are read again every time
    input_hashes(exp, memo_dir=tmp_path / "cache")
    assert sorted(read) == ["dem.tif", "dem.tif", "sites.gpkg", "sites.gpkg"]
    monkeypatch.setattr(hashing, "_RACY_NS", -10**15)  # as if the files were old
    read.clear()
    assert input_hashes(exp, memo_dir=tmp_path / "cache") == first
    assert read == []
    (tmp_path / "sites.gpkg").write_bytes(b"changed!")
    changed = input_hashes(exp, memo_dir=tmp_path / "cache")
    assert read == ["sites.gpkg"]
    assert changed["sites.path"]["sha256"] == hashlib.sha256(b"changed!").hexdigest()


def test_damaged_memo_only_costs_hashing(tmp_path):
    (tmp_path / "dem.tif").write_bytes(b"z")
    (tmp_path / "sites.gpkg").write_bytes(b"s")
    (tmp_path / "cache").mkdir()
    (tmp_path / "cache" / "file_hashes.json").write_text("{not json")
    got = input_hashes(_Exp(tmp_path / "dem.tif", tmp_path / "sites.gpkg"), memo_dir=tmp_path / "cache")
    assert got["study.dem"]["sha256"] == hashlib.sha256(b"z").hexdigest()
