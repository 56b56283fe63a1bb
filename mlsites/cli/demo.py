"""``mlsites demo --out DIR``: run the bundled fictional demo study end to end."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


@click.command()
@click.option("--out", "out_dir", default="demo_run", show_default=True, type=click.Path(file_okay=False),
              help="Folder for the demo's data, experiment file and results.")
@click.option("--fresh", is_flag=True, help="Replace an earlier demo run in DIR.")
@quiet_option
@handle_errors
def demo(out_dir, fresh, quiet):
    """Copy (or build) the fictional demo study into OUT and run experiments/demo.toml.

    OUT gets demo_data/, experiments/demo.toml, runs/demo/ (tables, curves,
    manifest, log) and models/demo/ (one model and model card per learner).
    """
    from mlsites.experiment import run_experiment
    from mlsites.experiment._demo import prepare_demo_folder

    log = echo_unless(quiet)
    experiment = prepare_demo_folder(out_dir, log=log)
    result = run_experiment(experiment, fresh=fresh, quiet=quiet, log=log)
    cols = [c for c in ("rank", "learner", "auc_mean", "boyce_mean", "auc_pooled") if c in result.summary.columns]
    click.echo(result.summary[cols].to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    click.echo(f"results: {result.run_dir}\nmodels: {result.models_dir}\nexperiment: {experiment}")
