"""Hashes of input files and settings, for manifests, model cards and caches.

Kept apart from the heavier experiment modules so that hashing needs only the
standard library.

A dataset can be several files: a Shapefile is ``.shp`` plus ``.dbf`` (the
attributes, such as site ids), ``.prj`` (the CRS), ``.shx``, ``.cpg`` and more, and
GDAL reads side files beside rasters too (``dem.tif.aux.xml`` with nodata or
statistics, a ``dem.tfw`` world file, external ``dem.tif.ovr`` overviews). Every
input is hashed with its side files, so editing any of them changes the cache keys.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from pathlib import Path

__all__ = ["file_digest", "input_files", "input_hashes", "entry_digest", "side_files", "settings_digest",
           "SIDE_SUFFIXES"]

#: Suffixes (lower case, after ``<stem>.`` or ``<name>.``) of the files GDAL reads
#: beside a dataset: Shapefile parts and indexes, MapInfo parts, raster
#: auxiliary metadata, world files, external overviews and masks, ENVI headers,
#: RPC and image metadata.
SIDE_SUFFIXES = frozenset({
    "shp", "shx", "dbf", "prj", "cpg", "qix", "sbn", "sbx", "shp.xml", "qpj", "fix",
    "tab", "dat", "map", "id", "ind",
    "aux.xml", "aux", "ovr", "msk", "tfw", "tifw", "tiffw", "wld", "jgw", "pgw", "gfw",
    "hdr", "rpb", "rpc", "imd",
})
#: A file's recorded hash is trusted from its size and times only when it was last
#: changed this long before it was hashed (a change within the same clock tick
#: could otherwise go unseen, the "racy" case known from version control).
_RACY_NS = 2_000_000_000
_MEMO_NAME = "file_hashes.json"


def file_digest(path, *, chunk=1 << 22) -> str:
    """SHA-256 of a file's bytes (for manifests and caches)."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while block := f.read(chunk):
            h.update(block)
    return h.hexdigest()


def side_files(path) -> list[Path]:
    """Files beside ``path`` that belong to the same dataset, sorted by name.

    A side file is named ``<stem>.<suffix>`` or ``<name>.<suffix>`` (case is
    ignored, as GDAL tries both) with a suffix in :data:`SIDE_SUFFIXES`: for
    ``sites.shp`` these are ``sites.dbf``, ``sites.prj``, ...; for ``dem.tif``
    ``dem.tif.aux.xml``, ``dem.tfw``, ``dem.tif.ovr``, ...
    """
    path = Path(path)
    bases = {path.name.lower() + ".", path.stem.lower() + "."}
    found = []
    with os.scandir(path.parent) as entries:
        for e in entries:
            low = e.name.lower()
            if e.name != path.name and e.is_file() and any(
                    low.startswith(b) and low[len(b):] in SIDE_SUFFIXES for b in bases):
                found.append(Path(e.path))
    return sorted(found, key=lambda p: p.name)


def input_files(exp) -> dict:
    """Every input file an experiment reads: role -> absolute path."""
    files = {"study.dem": exp["study"]["dem"], "sites.path": exp["sites"]["path"],
             "terrain.stream_lines": exp["terrain"]["stream_lines"],
             "sampling.survey_areas": exp["sampling"]["survey_areas"]}
    files.update({f"inputs.{n}": spec["path"] for n, spec in exp["inputs"].items()})
    files.update({f"distances.{n}": p for n, p in exp["distances"].items()})
    return {k: str(v) for k, v in files.items() if v}


class _Memo:
    """Hashes recorded by file size and times, so unchanged inputs are not read again."""

    def __init__(self, folder):
        self.path = Path(folder) / _MEMO_NAME if folder is not None else None
        self.entries, self.changed = {}, False
        if self.path is not None and self.path.is_file():
            try:
                self.entries = json.loads(self.path.read_text())
            except (OSError, ValueError):
                self.entries = {}  # a damaged memo only costs hashing again

    def digest(self, path: Path) -> str:
        st = path.stat()
        stamp = [st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_ino]
        key = str(path.resolve())
        known = self.entries.get(key)
        if known and known["stat"] == stamp and known["hashed_ns"] - max(st.st_mtime_ns, st.st_ctime_ns) > _RACY_NS:
            return known["sha256"]
        hashed_ns = time.time_ns()
        digest = file_digest(path)
        if self.path is not None:
            self.entries[key] = {"stat": stamp, "hashed_ns": hashed_ns, "sha256": digest}
            self.changed = True
        return digest

    def save(self):
        if self.path is None or not self.changed:
            return
        from mlsites._files import replacing

        self.path.parent.mkdir(parents=True, exist_ok=True)
        with replacing(self.path) as tmp:
            tmp.write_text(json.dumps(self.entries))


def input_hashes(exp, *, memo_dir=None) -> dict:
    """SHA-256 of every input file of an experiment, with its side files.

    Parameters
    ----------
    exp : Experiment
    memo_dir : path-like, optional
        Folder (the run cache) where hashes are recorded with each file's size and
        times; a file whose size and times have not changed since is not read
        again. Without it every file is read.

    Returns
    -------
    dict
        Role -> ``{"path", "sha256", "side_files"}``: ``sha256`` of the named file's
        bytes and ``side_files`` mapping each side file's name (see
        :func:`side_files`) to its SHA-256. A folder (a dataset stored as a
        directory) hashes the names and bytes of its files. Use
        :func:`entry_digest` for one key over all files of a role.
    """
    memo = _Memo(memo_dir)
    hashes = {}
    for role, path in input_files(exp).items():
        p = Path(path)
        if p.is_dir():
            h = hashlib.sha256()
            for q in sorted(p.rglob("*")):
                if q.is_file():
                    h.update(q.relative_to(p).as_posix().encode() + memo.digest(q).encode())
            hashes[role] = {"path": path, "sha256": h.hexdigest(), "side_files": {}}
        else:
            hashes[role] = {"path": path, "sha256": memo.digest(p),
                            "side_files": {q.name: memo.digest(q) for q in side_files(p)}}
    memo.save()
    return hashes


def entry_digest(entry: dict) -> str:
    """One SHA-256 over a file and its side files (an entry of :func:`input_hashes`)."""
    if not entry.get("side_files"):
        return entry["sha256"]
    return settings_digest({"file": entry["sha256"], "side_files": entry["side_files"]})


def settings_digest(obj) -> str:
    """SHA-256 of a JSON-ready object (keys sorted), for cache keys."""
    return hashlib.sha256(json.dumps(obj, sort_keys=True, default=str).encode()).hexdigest()
