"""Writing files so that a failure never leaves a half-written output."""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
import time
from pathlib import Path

__all__ = ["replacing", "staging_dir", "swap_into_place"]


@contextlib.contextmanager
def replacing(path):
    """Yield a temporary path beside ``path``; rename it to ``path`` if the block succeeds.

    The temporary name keeps the suffix (``.NAME.partial.gpkg``) because some
    drivers choose the format from it. On error the temporary file is removed and
    an existing ``path`` is left as it was.
    """
    path = Path(path)
    tmp = path.with_name(f".{path.stem}.partial{path.suffix}")
    tmp.unlink(missing_ok=True)
    try:
        yield tmp
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def staging_dir(parent, prefix: str) -> Path:
    """A fresh hidden folder in ``parent`` with the usual permissions (mkdtemp gives 0700)."""
    folder = Path(tempfile.mkdtemp(prefix=prefix, dir=parent))
    umask = os.umask(0)
    os.umask(umask)
    folder.chmod(0o777 & ~umask)
    return folder


def swap_into_place(staging, target):
    """Rename folder ``staging`` to ``target``; an old ``target`` is removed only afterwards."""
    staging, target = Path(staging), Path(target)
    old = None
    if target.exists():
        old = target.with_name(f".{target.name}.old-{os.getpid()}-{time.time_ns()}")
        os.replace(target, old)
    os.replace(staging, target)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
