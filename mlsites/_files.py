"""Writing files so that a failure never leaves a half-written output."""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

__all__ = ["replacing"]


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
