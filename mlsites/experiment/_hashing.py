"""Hashes of input files and settings, for manifests, model cards and caches.

Kept apart from the heavier experiment modules so that hashing needs only the
standard library.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

__all__ = ["file_digest", "input_files", "input_hashes", "settings_digest"]


def file_digest(path, *, chunk=1 << 22) -> str:
    """SHA-256 of a file's bytes (for manifests and caches)."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while block := f.read(chunk):
            h.update(block)
    return h.hexdigest()


def input_files(exp) -> dict:
    """Every input file an experiment reads: role -> absolute path."""
    files = {"study.dem": exp["study"]["dem"], "sites.path": exp["sites"]["path"],
             "terrain.stream_lines": exp["terrain"]["stream_lines"],
             "sampling.survey_areas": exp["sampling"]["survey_areas"]}
    files.update({f"inputs.{n}": spec["path"] for n, spec in exp["inputs"].items()})
    files.update({f"distances.{n}": p for n, p in exp["distances"].items()})
    return {k: str(v) for k, v in files.items() if v}


def input_hashes(exp) -> dict:
    """SHA-256 of every input file of an experiment: role -> {"path", "sha256"}.

    A folder (a shapefile set and the like) hashes the names and bytes of its files.
    """
    hashes = {}
    for role, path in input_files(exp).items():
        p = Path(path)
        if p.is_dir():
            h = hashlib.sha256()
            for q in sorted(p.rglob("*")):
                if q.is_file():
                    h.update(q.relative_to(p).as_posix().encode() + file_digest(q).encode())
            hashes[role] = {"path": path, "sha256": h.hexdigest()}
        else:
            hashes[role] = {"path": path, "sha256": file_digest(p)}
    return hashes


def settings_digest(obj) -> str:
    """SHA-256 of a JSON-ready object (keys sorted), for cache keys."""
    return hashlib.sha256(json.dumps(obj, sort_keys=True, default=str).encode()).hexdigest()
