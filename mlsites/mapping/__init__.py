"""Maps of saved models: potential, zone, spread and applicability rasters, window by window, at any size;
checks of saved models on later-found sites."""

from mlsites.mapping._applicability import DEFAULT_CHUNK_SIZE, ApplicabilityModel, mean_pairwise_distance
from mlsites.mapping._check import CHECK_FILES, CheckResult, check_model
from mlsites.mapping._features import FeatureLayer, FeatureSource, resolve_features
from mlsites.mapping._map import EXTRA_LAYERS, MAP_FILES, ZONE_OUTSIDE, MapResult, map_model, zone_colours
from mlsites.mapping._predict import CHUNK_ROWS, predict_cells, spread_of

__all__ = [
    "check_model",
    "CheckResult",
    "CHECK_FILES",
    "ApplicabilityModel",
    "mean_pairwise_distance",
    "DEFAULT_CHUNK_SIZE",
    "map_model",
    "MapResult",
    "MAP_FILES",
    "EXTRA_LAYERS",
    "ZONE_OUTSIDE",
    "zone_colours",
    "FeatureLayer",
    "FeatureSource",
    "resolve_features",
    "CHUNK_ROWS",
    "predict_cells",
    "spread_of",
]
