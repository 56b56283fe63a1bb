"""Experiment files: load, merge (``extends``) and validate TOML settings."""

from mlsites.experiment._config import SCHEMA, Experiment, experiment_from_dict, load_experiment
from mlsites.experiment._run import run_experiment

__all__ = ["SCHEMA", "Experiment", "experiment_from_dict", "load_experiment", "run_experiment"]
