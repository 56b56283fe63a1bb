"""Write a fold assignment once; read it back in every learner.

A fold directory holds

``folds.csv``
    Columns ``sample_id,fold``, one row per sample.
``blocks.gpkg`` (optional)
    Layer ``blocks`` with columns ``block_id``, ``fold`` (and any extra block
    columns) and the block polygons, for maps of the blocks.
``folds_meta.json``
    Method, parameters and counts, as given by the caller.
"""

import json
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites._files import staged_folder
from mlsites.errors import (
    DataQualityWarning,
    InputError,
    OutputExistsError,
    VectorReadError,
)

__all__ = ["FoldTable", "write_folds", "read_folds", "fold_for_samples"]

FOLDS_CSV = "folds.csv"
BLOCKS_GPKG = "blocks.gpkg"
BLOCKS_LAYER = "blocks"
META_JSON = "folds_meta.json"


@dataclass(frozen=True)
class FoldTable:
    """A fold assignment read by :func:`read_folds`.

    Attributes
    ----------
    folds : pandas.DataFrame
        Columns ``sample_id`` (text, as written) and ``fold`` (int64), in file
        order.
    blocks : geopandas.GeoDataFrame or None
        The ``blocks`` layer, if the directory has one.
    meta : dict
        Contents of ``folds_meta.json`` ({} if absent).
    """

    folds: pd.DataFrame
    blocks: object
    meta: dict

    @property
    def n_splits(self):
        """Number of folds."""
        return int(self.folds["fold"].max()) + 1


def _check_fold_values(fold, where):
    """Return ``fold`` as int64 or raise naming the first bad row of ``where``."""
    values = pd.to_numeric(pd.Series(fold), errors="coerce").to_numpy(dtype=np.float64)
    bad = ~np.isfinite(values) | (values < 0) | (values != np.round(values))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{where}: row {i + 1} has fold {np.asarray(fold, dtype=object)[i]!r}; expected a "
            "whole number >= 0. Fix or rewrite the fold file."
        )
    fold = values.astype(np.int64)
    missing = np.setdiff1d(np.arange(fold.max() + 1 if fold.size else 0), fold)
    if missing.size:
        raise InputError(
            f"{where}: fold {int(missing[0])} has no samples (folds present: "
            f"{np.unique(fold).tolist()[:10]}); expected folds numbered 0..k-1 without gaps."
        )
    return fold


def _check_sample_ids(sample_id, where):
    ids = pd.Series(sample_id)
    if ids.isna().any():
        i = int(np.flatnonzero(ids.isna().to_numpy())[0])
        raise InputError(f"{where}: row {i + 1} has no sample_id; every row needs one.")
    dup = ids.duplicated().to_numpy()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        raise InputError(
            f"{where}: row {i + 1} repeats sample_id {ids.iloc[i]!r}; expected each sample "
            "once."
        )
    return ids


def write_folds(path_dir, sample_id, fold, blocks=None, meta=None, *, overwrite=False):
    """Write a fold assignment atomically.

    Parameters
    ----------
    path_dir : str or Path
        Directory (created if missing).
    sample_id : array-like, shape (n_samples,)
        Unique sample identifiers (int or str).
    fold : array-like of int, shape (n_samples,)
        Fold per sample, 0..k-1, each fold used.
    blocks : geopandas.GeoDataFrame, optional
        Block polygons with at least ``block_id`` and ``fold`` columns, e.g.
        ``SpatialBlockFolds.assign(crs=...).blocks``.
    meta : dict, optional
        JSON-serialisable description (method, parameters), e.g. the splitter's
        ``describe()``; ``n_samples`` and ``n_splits`` are added.
    overwrite : bool, default False
        Replace an existing assignment in ``path_dir``.

    Returns
    -------
    pathlib.Path
        Path of ``folds.csv``.

    Raises
    ------
    OutputExistsError
        If ``folds.csv`` exists and ``overwrite`` is False.

    Notes
    -----
    Every file is first written in a hidden staging folder inside ``path_dir``
    and then moved into place (:func:`mlsites._files.staged_folder`; each move
    is atomic on one file system). An old ``folds.csv`` is deleted before and
    the new one moved in last, so a directory with a ``folds.csv`` always has
    the matching blocks and metadata. An old ``blocks.gpkg`` is removed when
    the new assignment has no blocks.
    """
    path_dir = Path(path_dir)
    target = path_dir / FOLDS_CSV
    if target.exists() and not overwrite:
        raise OutputExistsError(
            f"{target} already exists; pass overwrite=True to replace the fold assignment "
            "or choose another directory."
        )
    ids = _check_sample_ids(sample_id, "sample_id")
    fold = _check_fold_values(fold, "fold")
    if len(ids) != fold.size:
        raise InputError(
            f"sample_id has {len(ids)} value(s) but fold has {fold.size}; expected one fold "
            "per sample."
        )
    if blocks is not None:
        lacking = {"block_id", "fold", "geometry"} - set(blocks.columns)
        if lacking:
            raise InputError(
                f"blocks lacks column(s) {sorted(lacking)}; expected block_id, fold and "
                "geometry (use SpatialBlockFolds.assign().blocks)."
            )
    meta = dict(meta or {})
    meta.update(n_samples=int(fold.size), n_splits=int(fold.max()) + 1)
    # folds.csv last: a folder with a folds.csv always has the matching blocks and
    # metadata; an old blocks.gpkg goes when the new assignment has none.
    with staged_folder(path_dir, files=(META_JSON, BLOCKS_GPKG, FOLDS_CSV)) as staging:
        (staging / META_JSON).write_text(json.dumps(meta, indent=2, sort_keys=True, default=str) + "\n")
        if blocks is not None:
            blocks.to_file(staging / BLOCKS_GPKG, layer=BLOCKS_LAYER, driver="GPKG")
        pd.DataFrame({"sample_id": ids.to_numpy(), "fold": fold}).to_csv(staging / FOLDS_CSV, index=False)
    return target


def read_folds(path_dir):
    """Read and validate a fold assignment written by :func:`write_folds`.

    Parameters
    ----------
    path_dir : str or Path

    Returns
    -------
    FoldTable

    Raises
    ------
    InputError
        If ``folds.csv`` is missing, lacks a column, has a missing or repeated
        sample id, a fold that is not a whole number >= 0, or a gap in the fold
        numbers; the message names the file and the data row (1 = first row after
        the header).
    VectorReadError
        If ``blocks.gpkg`` exists but cannot be read or lacks ``block_id``/``fold``.
    """
    path_dir = Path(path_dir)
    path = path_dir / FOLDS_CSV
    if not path.is_file():
        raise InputError(
            f"{path} not found; expected a fold directory written by write_folds (run the "
            "fold step first)."
        )
    # Read as text so ids like "007" keep their zeros; folds are parsed below.
    df = pd.read_csv(path, dtype=str)
    lacking = [c for c in ("sample_id", "fold") if c not in df.columns]
    if lacking:
        raise InputError(
            f"{path}: missing column(s) {lacking}; found {list(df.columns)}, expected "
            "sample_id,fold."
        )
    ids = _check_sample_ids(df["sample_id"], str(path))
    fold = _check_fold_values(df["fold"], str(path))
    folds = pd.DataFrame({"sample_id": ids.to_numpy(), "fold": fold})

    blocks = None
    gpkg = path_dir / BLOCKS_GPKG
    if gpkg.exists():
        import geopandas as gpd

        try:
            blocks = gpd.read_file(gpkg, layer=BLOCKS_LAYER)
        except Exception as exc:
            raise VectorReadError(f"{gpkg}: cannot read layer {BLOCKS_LAYER!r} ({exc}).") from exc
        lacking = [c for c in ("block_id", "fold") if c not in blocks.columns]
        if lacking:
            raise VectorReadError(
                f"{gpkg}: layer {BLOCKS_LAYER!r} lacks column(s) {lacking}; expected "
                "block_id and fold."
            )
        _check_fold_values(blocks["fold"].to_numpy(), f"{gpkg} layer {BLOCKS_LAYER}")
    meta = {}
    meta_path = path_dir / META_JSON
    if meta_path.exists():
        try:
            meta = json.loads(meta_path.read_text())
        except json.JSONDecodeError as exc:
            raise InputError(f"{meta_path}: not valid JSON ({exc}).") from exc
    return FoldTable(folds=folds, blocks=blocks, meta=meta)


def fold_for_samples(table, sample_id):
    """Fold of each of ``sample_id``, looked up in a :class:`FoldTable`.

    Parameters
    ----------
    table : FoldTable
    sample_id : array-like, shape (n_samples,)
        The learner's samples, in its order. Ids are matched as written; if the
        types differ (e.g. int ids against str ids) both sides are compared as text.

    Returns
    -------
    ndarray of int64, shape (n_samples,)

    Raises
    ------
    InputError
        If a sample id is not in the fold file (names the first and the count).

    Warns
    -----
    DataQualityWarning
        If the fold file has ids not among ``sample_id`` (gives the count).
    """
    wanted = pd.Index(pd.Series(np.asarray(sample_id).ravel()))
    have = pd.Index(table.folds["sample_id"])
    pos = have.get_indexer(wanted)
    if (pos < 0).any() and wanted.dtype != have.dtype:
        have, wanted = have.astype(str), wanted.astype(str)
        pos = have.get_indexer(wanted)
    missing = np.flatnonzero(pos < 0)
    if missing.size:
        raise InputError(
            f"{missing.size} of {len(wanted)} sample(s) are not in the fold file (first: "
            f"sample_id {wanted[missing[0]]!r}); rebuild the folds for these samples."
        )
    extra = len(have) - np.unique(pos).size
    if extra:
        warnings.warn(
            f"The fold file lists {extra} sample(s) not among the {len(wanted)} given; they "
            "are ignored.",
            DataQualityWarning,
            stacklevel=2,
        )
    return table.folds["fold"].to_numpy()[pos]
