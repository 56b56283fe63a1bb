"""The two-phase virtual study shared by the synthetic and periods tests."""

from mlsites.synthetic import make_landscape, make_phased_sites
from mlsites.terrain import distance_to_cells, slope, tpi


def phased_study(n_sites=240):
    """(grid, layers, PhasedSites) on a 160 x 160 landscape of 20 m cells (fixed seeds)."""
    land = make_landscape((160, 160), cellsize=20.0, random_state=3, valley_width_m=900.0, relief_m=150.0)
    dem = land.dem.astype(float)
    layers = {"slope": slope(dem, 20.0), "tpi": tpi(dem, 20.0, radius=200.0),
              "stream_distance": distance_to_cells(land.streams > 0, 20.0)}
    return land.grid, layers, make_phased_sites(layers, land.grid, n_sites=n_sites, random_state=5)
