"""Near-copies among feature layers, found by rank correlation over the study area.

Two layers that are monotone functions of each other over the study area (a layer
and its standardised copy, two distances to nearly the same features) carry one
piece of information twice: logistic regression sees perfectly collinear inputs and
the fuzzy baseline counts the same evidence twice. :func:`redundant_layer_pairs`
reads the layers on a regular lattice of the study grid and reports every pair of
continuous layers whose Spearman correlation exceeds a threshold.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd
from scipy.stats import rankdata

from mlsites.errors import InputError
from mlsites.grid import GridSpec
from mlsites.sampling._extract import extract_values

__all__ = ["redundant_layer_pairs", "lattice_cells"]

#: Largest number of lattice cells read per layer (bounds time and memory).
MAX_LATTICE_CELLS = 250_000
#: |Spearman rho| above which two layers count as copies of each other.
REDUNDANT_RHO = 0.99


def lattice_cells(grid: GridSpec, max_cells: int = MAX_LATTICE_CELLS):
    """Rows, columns and step of a regular lattice over the grid with at most ``max_cells`` cells.

    Every ``step``-th row and column from the centre of the first ``step`` x ``step``
    block, ``step = ceil(sqrt(n_cells / max_cells))`` (1 when the grid is small).
    """
    if max_cells < 1:
        raise InputError(f"max_cells={max_cells}; expected a positive number of cells")
    step = max(1, int(np.ceil(np.sqrt(grid.n_cells / max_cells))))
    start = (step - 1) // 2
    r = np.arange(min(start, grid.height - 1), grid.height, step)
    c = np.arange(min(start, grid.width - 1), grid.width, step)
    rows, cols = np.meshgrid(r, c, indexing="ij")
    return rows.ravel(), cols.ravel(), step


def redundant_layer_pairs(layers: Mapping, grid: GridSpec, *, kinds=None, threshold: float = REDUNDANT_RHO,
                          max_cells: int = MAX_LATTICE_CELLS) -> pd.DataFrame:
    """Pairs of continuous layers whose Spearman correlation over the study area exceeds ``threshold``.

    Parameters
    ----------
    layers : mapping of str to path-like or ndarray
        Layer name -> raster (aligned onto ``grid`` on the fly) or array, as for
        :func:`extract_values`.
    grid : GridSpec
        The study grid.
    kinds : mapping of str to str, optional
        Layer kinds; "categorical" layers are left out (their codes are labels,
        so a rank correlation of codes means nothing).
    threshold : float, default 0.99
        Pairs with ``|rho| > threshold`` are reported.
    max_cells : int, default 250 000
        Largest number of lattice cells read (see :func:`lattice_cells`).

    Returns
    -------
    pandas.DataFrame
        Columns ``first``, ``second`` (layer names in the order of ``layers``),
        ``spearman`` (signed rho), sorted by decreasing ``|rho|``. ``attrs`` holds
        ``n_cells`` (lattice cells with a value in every continuous layer) and
        ``step`` (lattice spacing in cells).

    Notes
    -----
    The study area is read on a regular lattice (every ``step``-th row and column),
    not a random sample, so the result does not depend on a seed; cells where any
    continuous layer is nodata are left out. rho is the Pearson correlation of the
    average ranks (ties share their mean rank), which is what
    :func:`scipy.stats.spearmanr` computes; a layer constant over the lattice has
    no defined rho and is never reported. Spearman rather than Pearson: a layer and
    any monotone transform of it (a distance and its logarithm) are as redundant as
    a layer and an affine copy.
    """
    if not 0 < threshold <= 1:
        raise InputError(f"threshold={threshold}; expected a correlation in (0, 1]")
    kinds = dict(kinds or {})
    names = [n for n in layers if kinds.get(n, "continuous") == "continuous"]
    rows, cols, step = lattice_cells(grid, max_cells)
    if len(names) < 2:
        out = pd.DataFrame(columns=["first", "second", "spearman"])
        out.attrs.update(n_cells=0, step=step)
        return out
    values = extract_values({n: layers[n] for n in names}, rows, cols, grid).to_numpy()
    values = values[np.isfinite(values).all(axis=1)]
    pairs = []
    if values.shape[0] >= 3:
        ranks = rankdata(values, axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            rho = np.corrcoef(ranks, rowvar=False)
        for i in range(len(names)):
            for j in range(i + 1, len(names)):
                if np.isfinite(rho[i, j]) and abs(rho[i, j]) > threshold:
                    pairs.append((names[i], names[j], float(rho[i, j])))
    out = pd.DataFrame(pairs, columns=["first", "second", "spearman"])
    out = out.reindex(out["spearman"].abs().sort_values(ascending=False, kind="stable").index).reset_index(drop=True)
    out.attrs.update(n_cells=int(values.shape[0]), step=step)
    return out
