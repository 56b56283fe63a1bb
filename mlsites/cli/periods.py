"""``mlsites periods EXPERIMENT``: sites through time, without fitting models."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option

#: Columns of the per-block table printed on the terminal (all are in blocks.csv).
_SHOWN = ["block_start", "block_end", "aoristic_sum", "mc_mean", "mc_low", "mc_high", "change_mean",
          "change_low", "change_high", "change_beyond_null"]


@click.command()
@click.argument("experiment", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Output folder (default: RUNS_DIR/NAME_periods).")
@click.option("--fresh", is_flag=True, help="Replace an existing output folder.")
@click.option("--show-sites", is_flag=True,
              help="Draw exact site points on the maps (default: sites generalised to squares).")
@quiet_option
@handle_errors
def periods(experiment, out_dir, fresh, show_sites, quiet):
    """Time blocks, aoristic sums, Monte Carlo envelopes and density maps of EXPERIMENT.

    Writes blocks.csv (per block: aoristic sum, Monte Carlo mean and 95 %
    envelope, rate of change and its envelope, against a uniform-through-time
    null), site_dates.csv, site_blocks.csv, dropped_dates.csv, window tables,
    site_counts.png, density_maps.png, density/*.tif and periods.json, and
    prints the per-block table. No model is fitted.
    """
    from mlsites.periods import run_periods

    result = run_periods(experiment, out_dir=out_dir, fresh=fresh, show_sites=show_sites, quiet=quiet,
                         log=echo_unless(quiet))
    click.echo(result.table[_SHOWN].to_string(index=False, float_format=lambda v: f"{v:.2f}", na_rep=""))
    if not quiet:
        click.echo(f"results in {result.out_dir}", err=True)
