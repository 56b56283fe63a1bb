"""Small multiples of density maps: every panel shows the whole grid extent."""

import numpy as np

from mlsites.periods._plots import plot_density_maps


def test_every_panel_covers_exactly_the_map_extent(tmp_path):
    # Regression: a generalised square centred beyond the grid's edge (a site in the
    # last cells, its square reaching outside) used to widen that panel's axes, so the panels
    # no longer showed the same extent.
    extent = (1000.0, 3000.0, 500.0, 1500.0)  # left, right, bottom, top (CRS units)
    shade = np.full((10, 20), 0.5)
    dens = [np.zeros((10, 20)), np.ones((10, 20))]
    squares = [(np.array([900.0]), np.array([1600.0]), np.array([1.0])),  # outside, top left
               (np.array([2000.0]), np.array([1000.0]), np.array([2.0]))]  # inside
    sites = [(np.array([3100.0]), np.array([400.0]), np.array([1.0])),
             (np.array([1500.0]), np.array([800.0]), np.array([0.5]))]
    out = tmp_path / "d.png"
    limits = plot_density_maps(shade, dens, ["a", "b"], extent, out, squares=squares)
    assert out.stat().st_size > 0
    for lim in limits:  # the extent given, exactly (imshow's own limits; no autoscale margin)
        np.testing.assert_allclose(lim, extent)
    limits = plot_density_maps(shade, dens, ["a", "b"], extent, tmp_path / "e.png", sites=sites)
    for lim in limits:
        np.testing.assert_allclose(lim, extent)
