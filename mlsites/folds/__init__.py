"""Spatial cross-validation folds: blocks, splitters, block size and fold files.

Coordinates are metres of a projected CRS (x east, y north). The usual path:

1. :func:`suggest_block_size` estimates the autocorrelation range of the
   predictors (empirical variogram + fitted model) and suggests a block size.
2. :class:`SpatialBlockFolds` (or :class:`BufferedLeaveOneSiteOut`,
   :class:`EnvironmentalFolds`, :class:`RandomFolds`) builds the folds, keeping
   every cell of a site in one fold.
3. :func:`write_folds` saves ``folds.csv`` (sample_id, fold) and the blocks as a
   GeoPackage layer, once.
4. Every learner loads them with :meth:`PrecomputedFolds.from_dir`.

All splitters follow scikit-learn's ``split``/``get_n_splits`` protocol.
"""

from mlsites.folds._blocks import (
    BlockFoldAssignment,
    assign_blocks_to_folds,
    block_ids,
    block_polygons,
    decode_block_ids,
    hexagon_block_ids,
    site_codes,
    square_block_ids,
)
from mlsites.folds._io import FoldTable, fold_for_samples, read_folds, write_folds
from mlsites.folds._split import (
    BufferedLeaveOneSiteOut,
    EnvironmentalFolds,
    PrecomputedFolds,
    RandomFolds,
    SpatialBlockFolds,
    check_split_invariants,
)
from mlsites.folds._variogram import (
    VARIOGRAM_MODELS,
    BlockSizeSuggestion,
    EmpiricalVariogram,
    VariogramFit,
    empirical_variogram,
    fit_variogram,
    suggest_block_size,
    variogram_model,
)

__all__ = [
    "BlockFoldAssignment",
    "BlockSizeSuggestion",
    "BufferedLeaveOneSiteOut",
    "EmpiricalVariogram",
    "EnvironmentalFolds",
    "FoldTable",
    "PrecomputedFolds",
    "RandomFolds",
    "SpatialBlockFolds",
    "VARIOGRAM_MODELS",
    "VariogramFit",
    "assign_blocks_to_folds",
    "block_ids",
    "block_polygons",
    "check_split_invariants",
    "decode_block_ids",
    "empirical_variogram",
    "fit_variogram",
    "fold_for_samples",
    "hexagon_block_ids",
    "read_folds",
    "site_codes",
    "square_block_ids",
    "suggest_block_size",
    "variogram_model",
    "write_folds",
]
