"""``mlsites run EXPERIMENT.toml``: the whole modelling job from one experiment file."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


@click.command()
@click.argument("experiment", type=click.Path(dir_okay=False))
@click.option("--fresh", is_flag=True, help="Replace an existing run of this name and ignore cached layers and samples.")
@click.option("--name", "name", metavar="NEW_NAME", help="Run name (default: the experiment name); "
              "results go to RUNS_DIR/NAME and MODELS_DIR/NAME.")
@click.option("--jobs", "n_jobs", type=click.IntRange(1), default=None,
              help="Parallel model fits during cross-validation (default: CPU cores, at most 4; "
              "results do not depend on it).")
@quiet_option
@handle_errors
def run(experiment, fresh, name, n_jobs, quiet):
    """Run EXPERIMENT: samples, spatial cross-validation of every learner, models, tables.

    Writes RUNS_DIR/NAME/ (manifest.json, metrics_by_fold.csv, metrics_summary.csv,
    zones.csv, curves.csv and PNGs, dropped_records.csv, run.log, samples/, maps/)
    and MODELS_DIR/NAME/ (one model file and model card per learner, plus its fold
    models). An existing run is never replaced without --fresh.
    """
    from mlsites.experiment import run_experiment

    result = run_experiment(experiment, fresh=fresh, name=name, quiet=quiet, log=echo_unless(quiet), n_jobs=n_jobs)
    if not quiet:
        cols = [c for c in ("rank", "learner", "auc_mean", "auc_sd", "boyce_mean", "auc_pooled")
                if c in result.summary.columns]
        click.echo(result.summary[cols].to_string(index=False, float_format=lambda v: f"{v:.3f}"), err=True)
        click.echo(f"results in {result.run_dir}, models in {result.models_dir}", err=True)
