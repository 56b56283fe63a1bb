"""The template grid: one CRS, transform and shape per study, windows, raster IO."""

from mlsites.grid._io import (
    RESAMPLING_BY_KIND,
    AlignedRaster,
    RasterWriter,
    bounded_gdal_cache,
    open_raster,
    read_array,
    read_grid,
    write_array,
)
from mlsites.grid._spec import GridSpec, metric_cell_sizes
from mlsites.grid._windows import HaloWindow, iter_windows

__all__ = [
    "GridSpec",
    "metric_cell_sizes",
    "HaloWindow",
    "iter_windows",
    "AlignedRaster",
    "RasterWriter",
    "RESAMPLING_BY_KIND",
    "open_raster",
    "read_array",
    "read_grid",
    "write_array",
    "bounded_gdal_cache",
]
