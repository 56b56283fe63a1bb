"""Shared fixtures and helpers for the mlsites test suite."""

import shutil

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin

from mlsites.grid import GridSpec


def assert_raster_allclose(actual, expected, *, rtol=None, atol=0.0, err_msg=""):
    """Compare rasters with NaN as nodata; rtol defaults by dtype (STYLE.md §8)."""
    actual = np.asarray(actual)
    expected = np.asarray(expected)
    if rtol is None:
        rtol = 1e-4 if np.float32 in (actual.dtype, expected.dtype) else 1e-7
    np.testing.assert_allclose(actual, expected, rtol=rtol, atol=atol, equal_nan=True, err_msg=err_msg)


@pytest.fixture
def global_random_seed():
    """The one seed the suite uses (change it locally to explore other draws)."""
    return 0


@pytest.fixture
def metric_grid():
    """A small projected grid of 10 m cells (an arbitrary metric CRS, fictional place)."""
    return GridSpec(rasterio.crs.CRS.from_epsg(32631), from_origin(400000.0, 5000000.0, 10.0, 10.0), 60, 50)


requires_gdaldem = pytest.mark.skipif(shutil.which("gdaldem") is None, reason="gdaldem (gdal-bin) not installed")


@pytest.fixture(scope="session")
def study_data(tmp_path_factory):
    """Files of the tiny fictional mapping study (tests/mapping/study.py)."""
    from tests.mapping.study import build_study_data

    return build_study_data(tmp_path_factory.mktemp("map_study_data"))


@pytest.fixture(scope="session")
def study_run(tmp_path_factory, study_data):
    """The mapping study run once: five learners, models with fold models, no maps."""
    from tests.mapping.study import run_study

    return run_study(tmp_path_factory.mktemp("map_study"), study_data)
