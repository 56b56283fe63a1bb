"""Experiment files: load, merge (``extends``) and validate TOML settings."""

from mlsites.experiment._config import SCHEMA, Experiment, experiment_from_dict, load_experiment

__all__ = ["SCHEMA", "Experiment", "experiment_from_dict", "load_experiment"]
