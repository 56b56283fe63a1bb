"""One fictional study for the benchmarks: sample table and feature rasters.

The demo landscape generator with virtual, clustered, survey-biased sites
(:func:`mlsites.experiment._demo.write_demo_data`), background drawn inside the
survey strips, 5 square-block folds of 1 km; the features are the demo's layers.
"""

import shutil

import numpy as np
import pandas as pd

EXPERIMENT = """
[study]
name = "forest_{seed}"
dem = "{data}/dem.tif"
seed = {seed}
[inputs]
soil = {{ path = "{data}/soil.tif", kind = "categorical" }}
[terrain]
layers = ["slope", "northness", "eastness", "tpi", "ruggedness", "profile_curvature",
          "plan_curvature", "landform", "stream_distance", "height_above_drainage"]
tpi_radii_m = [100.0, 300.0]
stream_lines = "{data}/streams.gpkg"
[sites]
path = "{data}/sites.gpkg"
[sampling]
site_buffer_m = 20.0
background_count = 5000
exclusion_m = 50.0
survey_areas = "{data}/survey.gpkg"
survey_mode = "inside"
[folds]
method = "square_blocks"
n_splits = 5
block_size_m = 1000.0
[learners]
use = ["random_forest"]
[outputs]
runs_dir = "{work}/runs"
models_dir = "{work}/models"
"""


def virtual_study(seed, work):
    """Sample set and feature table of every valid cell of one fictional study.

    Parameters
    ----------
    seed : int
        Seed of the landscape, the sites and the samples.
    work : Path
        Scratch folder (data, samples and the terrain cache go there).

    Returns
    -------
    samples : SampleSet
    cells : DataFrame
        One row per valid cell in raster order, one column per feature.
    """
    import rasterio

    from mlsites.experiment._demo import write_demo_data
    from mlsites.experiment._run import sample_experiment

    data = work / f"data_{seed}"
    write_demo_data(data, shape=(600, 600), cellsize=10.0, n_sites=360, random_state=seed)
    toml = work / f"study_{seed}.toml"
    toml.write_text(EXPERIMENT.format(seed=seed, data=data.as_posix(), work=work.as_posix()))
    samples = sample_experiment(toml, out_dir=work / f"samples_{seed}", quiet=True)
    terrain = next((work / "runs" / ".cache").glob("terrain-*"))
    columns = {}
    for name in samples.features:
        path = data / "soil.tif" if name == "soil" else terrain / f"{name}.tif"
        with rasterio.open(path) as src:
            columns[name] = src.read(1, masked=True).astype(float).filled(np.nan).ravel()
    cells = pd.DataFrame(columns)
    cells = cells[~cells.isna().any(axis=1)].reset_index(drop=True)
    for p in (work / "runs" / ".cache").glob("terrain-*"):  # the next study derives its own
        shutil.rmtree(p)
    return samples, cells
