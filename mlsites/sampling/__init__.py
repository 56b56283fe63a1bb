"""Site records, presence samples, background samples and value extraction.

``read_sites`` reads and validates site records (points or polygons) onto the study
grid, ``presence_cells`` turns sites into weighted grid cells, ``sample_background``
draws background cells (optionally away from sites and restricted to, or weighted by,
survey coverage) and ``extract_values`` reads layer values at sample cells window by
window; ``sample_weights`` weights the table (each site once, mean 1);
``redundant_layer_pairs`` finds layers that copy each other over the study area;
``site_squares`` generalises site positions to squares for shared maps.
"""

from mlsites.sampling._background import (
    SURVEY_MODES,
    balance_weights,
    in_survey,
    sample_background,
    sample_weights,
)
from mlsites.sampling._extract import extract_values, read_valid_mask
from mlsites.sampling._generalise import site_squares
from mlsites.sampling._presence import presence_cells
from mlsites.sampling._redundancy import lattice_cells, redundant_layer_pairs
from mlsites.sampling._sites import SiteRecords, check_n_splits, read_sites

__all__ = [
    "SiteRecords",
    "read_sites",
    "check_n_splits",
    "presence_cells",
    "sample_background",
    "balance_weights",
    "sample_weights",
    "in_survey",
    "SURVEY_MODES",
    "extract_values",
    "read_valid_mask",
    "redundant_layer_pairs",
    "lattice_cells",
    "site_squares",
]
