"""``mlsites sample EXPERIMENT.toml``: build the sample table and folds only."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


@click.command()
@click.argument("experiment", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Output folder (default: RUNS_DIR/NAME/samples).")
@click.option("--fresh", is_flag=True, help="Replace existing sample files and ignore cached layers and samples.")
@quiet_option
@handle_errors
def sample(experiment, out_dir, fresh, quiet):
    """Write the sample table of EXPERIMENT (samples.parquet, folds.csv, dropped_records.csv, sampling.json)."""
    from mlsites.experiment._run import sample_experiment

    samples = sample_experiment(experiment, out_dir=out_dir, fresh=fresh, quiet=quiet, log=echo_unless(quiet))
    if not quiet:
        s = samples.summary
        click.echo(f"wrote {s['n_presence_cells']} site cells of {s['n_sites_used']} sites and "
                   f"{s['n_background_cells']} background cells to {samples.folder}", err=True)
