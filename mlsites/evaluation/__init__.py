"""Evaluation: validation measures and potential zones for held-out sites."""

from mlsites.evaluation._checks import FEW_NEW_SITES, binomial_greater_pvalue, new_site_check, wilson_interval
from mlsites.evaluation._calibration import (
    area_ranks,
    calibrate_zone_areas,
    cut_for_area_share,
    nearest_tie_cut,
)
from mlsites.evaluation._crossval import CrossValResult, cross_validate, write_crossval
from mlsites.evaluation._metrics import (
    DEFAULT_TOP_AREA_SHARES,
    DEFAULT_ZONE_TARGETS,
    area_under_capture_curve,
    boyce_curve,
    boyce_index,
    capture_curve,
    evaluate_scores,
    kvamme_gain,
    roc_auc,
    site_share_in_top_area,
)
from mlsites.evaluation._zones import (
    NODATA_ZONE,
    assign_zones,
    relative_site_density,
    zone_density_gini,
    zone_gains,
    zone_table,
    zone_thresholds,
)

__all__ = [
    "roc_auc",
    "capture_curve",
    "area_under_capture_curve",
    "site_share_in_top_area",
    "kvamme_gain",
    "boyce_curve",
    "boyce_index",
    "evaluate_scores",
    "DEFAULT_TOP_AREA_SHARES",
    "DEFAULT_ZONE_TARGETS",
    "zone_thresholds",
    "assign_zones",
    "zone_table",
    "relative_site_density",
    "zone_gains",
    "zone_density_gini",
    "NODATA_ZONE",
    "wilson_interval",
    "binomial_greater_pvalue",
    "new_site_check",
    "FEW_NEW_SITES",
    "area_ranks",
    "calibrate_zone_areas",
    "cut_for_area_share",
    "nearest_tie_cut",
    "CrossValResult",
    "cross_validate",
    "write_crossval",
]
