"""Writing files so that a failure never leaves a half-written output.

Two helpers cover every output of the package: :func:`replacing` for one file and
:func:`staged_folder` for a set of files built together (a run, a sample table,
terrain layers). Both write under a hidden temporary name beside the destination
and rename into place only when the block succeeded.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
import time
from pathlib import Path

__all__ = ["replacing", "staged_folder", "link_or_copy"]


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


def _hidden_folder(parent: Path, prefix: str) -> Path:
    """A fresh hidden folder in ``parent`` with the usual permissions.

    ``tempfile.mkdtemp`` creates folders readable by their owner only (0700); an
    output folder gets the permissions any new folder gets (0777 minus the umask).
    """
    parent.mkdir(parents=True, exist_ok=True)
    folder = Path(tempfile.mkdtemp(prefix=prefix, dir=parent))
    umask = os.umask(0)
    os.umask(umask)
    folder.chmod(0o777 & ~umask)
    return folder


@contextlib.contextmanager
def staged_folder(target, *, files=None):
    """Yield a hidden staging folder whose content replaces ``target`` if the block succeeds.

    Parameters
    ----------
    target : path-like
        The destination folder.
    files : sequence of str, optional
        Without it, ``target`` is the block's own folder: the staging folder is
        made beside it and renamed to ``target`` as a whole (an old ``target`` is
        moved aside first and removed afterwards). With it, ``target`` may hold
        other things (a cache, other layers): the staging folder is made inside
        it and only the files are moved in. ``files`` names every file the block
        may produce; one it did not produce this time is removed from ``target``,
        so the folder never mixes two versions. The last name is the marker
        readers look for (a table, a summary): an old one is removed first and
        the new one moved in last, so a folder with the marker is complete.

    Yields
    ------
    pathlib.Path
        The staging folder (empty).

    Notes
    -----
    On error the staging folder is removed and ``target`` is left as it was.
    Renames stay on one file system, so each is atomic.
    """
    target = Path(target)
    if files is None:
        staging = _hidden_folder(target.parent, f".{target.name}.partial-")
    else:
        files = list(files)
        staging = _hidden_folder(target, ".partial-")
    try:
        yield staging
        if files is None:
            old = None
            if target.exists():
                old = target.with_name(f".{target.name}.old-{os.getpid()}-{time.time_ns()}")
                os.replace(target, old)
            os.replace(staging, target)
            if old is not None:
                shutil.rmtree(old, ignore_errors=True)
        else:
            produced = {p.name for p in staging.iterdir()}
            if files:
                (target / files[-1]).unlink(missing_ok=True)
            for name in files:
                if name not in produced:
                    (target / name).unlink(missing_ok=True)
            order = sorted(produced - set(files)) + [n for n in files if n in produced]
            for name in order:
                os.replace(staging / name, target / name)
    finally:
        shutil.rmtree(staging, ignore_errors=True)


def link_or_copy(src, dst):
    """Hard-link ``src`` to ``dst`` (a copy where links are not possible).

    For files that are only ever replaced by renaming a new file over them, never
    changed in place (every output of this package), a link is as safe as a copy
    and costs neither time nor disk.
    """
    try:
        os.link(src, dst)
    except OSError:
        shutil.copy2(src, dst)
