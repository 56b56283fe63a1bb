"""``check_*`` helpers shared by several stages; each returns the cleaned value."""

from __future__ import annotations

import math
import numbers
import re

import numpy as np

from mlsites.errors import InputError

__all__ = ["check_cell_pair", "masked_as_nan", "gdal_reason"]


def check_cell_pair(cellsize, *, hint: str = "") -> tuple[float, float]:
    """Return ``(dx, dy)`` in metres from a number or a pair of numbers.

    Parameters
    ----------
    cellsize : float or (float, float)
        Square cell size, or east-west and north-south sizes, metres.
    hint : str
        Extra advice appended to the message when the form is wrong (for example
        why per-row spacing is not accepted by the caller).

    Raises
    ------
    InputError
        Not a number or a pair, or not finite and positive.
    """
    if isinstance(cellsize, numbers.Real) and not isinstance(cellsize, bool):
        pair = (cellsize, cellsize)
    else:
        try:
            pair = tuple(cellsize)
        except TypeError:
            pair = ()
        if len(pair) != 2 or not all(isinstance(v, numbers.Real) for v in pair):
            raise InputError(
                f"cellsize {cellsize!r} is not a number or a (dx, dy) pair of numbers in metres, "
                f"e.g. 30.0 or (30.0, 25.0){'; ' + hint if hint else ''}"
            )
    dx, dy = float(pair[0]), float(pair[1])
    if not (math.isfinite(dx) and math.isfinite(dy) and dx > 0 and dy > 0):
        raise InputError(
            f"cellsize (dx={dx}, dy={dy}) must be finite and positive (metres); pass absolute "
            "values, e.g. (abs(transform.a), abs(transform.e))"
        )
    return dx, dy


def masked_as_nan(array):
    """A masked array with its masked cells as NaN (float64); anything else unchanged.

    Kernels see plain arrays, so a mask would otherwise be dropped and the values
    under it used as data.
    """
    if isinstance(array, np.ma.MaskedArray):
        return np.ma.filled(array.astype(np.float64), np.nan)
    return array


#: GDAL's advice to prefix the path with a driver name: meant for GDAL's own tools,
#: not something a user of mlsites can do.
_DRIVER_HINT = re.compile(r"[.;\s]*It might help to specify the correct driver.*$", re.S)


def gdal_reason(exc) -> str:
    """The reason in a GDAL/pyogrio/rasterio error, for one-line messages.

    The first line only, without the quoted path (the message names the file
    already) and without GDAL's driver-prefix advice.
    """
    text = str(exc).strip()
    if not text:
        return type(exc).__name__
    text = _DRIVER_HINT.sub("", text.splitlines()[0])
    text = re.sub(r"^'[^']*'\s*", "", text).strip().rstrip(".;")
    return text or type(exc).__name__
