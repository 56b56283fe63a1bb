"""A tiny fictional study for the mapping tests: five learners, saved models.

The study is the demo builder's invented landscape with virtual sites (120 x 120
cells of 10 m), with small learner settings so the run takes seconds; the run
itself maps nothing (``[maps] learners = "none"``), the tests map its cards. The
fixtures ``study_data`` and ``study_run`` (tests/conftest.py) build it once per session.
"""

import json

from mlsites.experiment import run_experiment
from mlsites.experiment._demo import write_demo_data

LEARNERS = ("random_forest", "logistic", "mlp", "gradient_boosting", "fuzzy")

EXPERIMENT = """
[study]
name = "mapstudy"
dem = "{data}/dem.tif"
seed = 11

[inputs]
soil = {{ path = "{data}/soil.tif", kind = "categorical" }}

[terrain]
layers = ["slope", "northness", "tpi", "stream_distance"]
tpi_radii_m = [50.0]
stream_lines = "{data}/streams.gpkg"

[sites]
path = "{data}/sites.gpkg"

[sampling]
site_buffer_m = 10.0
background_count = 700

[folds]
method = "square_blocks"
n_splits = 4
block_size_m = 300.0

[learners]
use = {use}
[learners.random_forest]
n_estimators = 20
min_samples_leaf = 3
[learners.mlp]
hidden_layer_sizes = [6]
max_iter = 80
learning_rate_init = 0.01
tol = 0.01
[learners.gradient_boosting]
max_iter = 20

[maps]
learners = "{maps}"
"""


def write_study_experiment(folder, data, *, maps="none", use=LEARNERS, name="mapstudy.toml"):
    path = folder / name
    path.write_text(EXPERIMENT.format(data=data, use=json.dumps(list(use)), maps=maps))
    return path


def build_study_data(folder):
    write_demo_data(folder, shape=(120, 120), cellsize=10.0, n_sites=200, random_state=4)
    return folder


def run_study(folder, data):
    return run_experiment(write_study_experiment(folder, data), quiet=True, n_jobs=2)
