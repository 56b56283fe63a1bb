"""A fictional study on virtual sites, for the science benchmarks (not a test).

:func:`virtual_samples` writes a landscape with virtual sites (clustered, recorded
mostly inside survey strips; :mod:`mlsites.synthetic`) with the demo builder, writes
an experiment file like the demo's (terrain layers, soil classes, background drawn
inside the survey strips, square-block folds) and returns its sample table. The same
seed gives the same table.
"""

from __future__ import annotations

import numpy as np

EXPERIMENT = """
[study]
name = "virtual_{seed}"
dem = "dem.tif"
seed = {seed}

[inputs]
soil = {{ path = "soil.tif", kind = "categorical" }}

[terrain]
layers = ["slope", "northness", "eastness", "tpi", "ruggedness", "profile_curvature",
          "plan_curvature", "landform", "stream_distance", "height_above_drainage"]
tpi_radii_m = [100.0, 300.0]
stream_lines = "streams.gpkg"

[sites]
path = "sites.gpkg"

[sampling]
site_buffer_m = 20.0
background_count = {n_background}
survey_areas = "survey.gpkg"
survey_mode = "inside"
exclusion_m = {exclusion_m}

[folds]
method = "square_blocks"
n_splits = 5
block_size_m = 1000.0
"""


def _prepare(folder, seed, shape, n_sites, n_background, exclusion_m):
    import warnings

    from mlsites.experiment import load_experiment
    from mlsites.experiment._demo import write_demo_data
    from mlsites.experiment._samples import prepare_samples

    folder.mkdir(parents=True, exist_ok=True)
    write_demo_data(folder, shape=shape, cellsize=10.0, n_sites=n_sites, random_state=seed, overwrite=True)
    path = folder / "virtual.toml"
    path.write_text(EXPERIMENT.format(seed=seed, n_background=n_background, exclusion_m=float(exclusion_m)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # data-quality notes of the virtual records
        return prepare_samples(load_experiment(path), folder / "samples", cache_dir=folder / "cache",
                               quiet=True, fresh=True)


def virtual_samples(folder, seed, *, shape=(500, 500), n_sites=300, n_background=4000, exclusion_m=0.0):
    """Sample table of a virtual study built in ``folder`` (created), and its feature lists.

    Returns
    -------
    table : pandas.DataFrame
    features, categorical : list of str
    """
    samples = _prepare(folder, seed, shape, n_sites, n_background, exclusion_m)
    return samples.table, samples.features, samples.categorical


def virtual_study(seed, work, *, shape=(600, 600), n_sites=360, n_background=5000, exclusion_m=50.0):
    """Sample set and feature table of every valid cell of one virtual study.

    The defaults are those the random-forest table of the README was measured with
    (including ``exclusion_m = 50``, as the demo then had).

    Returns
    -------
    samples : SampleSet
    cells : DataFrame
        One row per valid cell in raster order, one column per feature.
    """
    import pandas as pd
    import rasterio

    folder = work / f"study_{seed}"
    samples = _prepare(folder, seed, shape, n_sites, n_background, exclusion_m)
    terrain = next((folder / "cache").glob("terrain-*"))
    columns = {}
    for name in samples.features:
        path = folder / "soil.tif" if name == "soil" else terrain / f"{name}.tif"
        with rasterio.open(path) as src:
            columns[name] = src.read(1, masked=True).astype(float).filled(np.nan).ravel()
    cells = pd.DataFrame(columns)
    return samples, cells[~cells.isna().any(axis=1)].reset_index(drop=True)


def balanced_weights(table):
    """The weights of the sample table before the mean-1 rescaling (sites 1 each, background balanced)."""
    pres = (table["label"] == 1).to_numpy()
    per_site = table.loc[pres].groupby("site_id")["site_id"].transform("size").to_numpy()
    w = np.empty(len(table))
    w[pres] = 1.0 / per_site
    w[~pres] = table.loc[pres, "site_id"].nunique() / int((~pres).sum())
    return w
