"""``mlsites map MODEL_CARD --out DIR``: potential, zone and spread rasters of a saved model."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


@click.command(name="map")
@click.argument("model_card", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
              help="Folder to create for the map (refused if it exists, unless --fresh).")
@click.option("--dem", type=click.Path(dir_okay=False),
              help="Map this DEM instead of the study's, for example a neighbouring area: its terrain layers are "
              "derived with the model card's settings; it must lie inside the model's other input layers "
              "(default: the study's own layers).")
@click.option("--jobs", "n_jobs", type=click.IntRange(1), default=1, show_default=True,
              help="Worker processes (or local dask workers); the result does not depend on it.")
@click.option("--scheduler", metavar="ADDRESS|local",
              help="Send the windows to a dask.distributed scheduler (tcp://HOST:PORT), or 'local' for a local "
              "cluster of --jobs workers; needs the scale extra and the same files on every worker (default: "
              "worker processes on this machine).")
@click.option("--fresh", is_flag=True, help="Replace an existing output folder and derive --dem layers again.")
@quiet_option
@handle_errors
def map_command(model_card, out_dir, dem, n_jobs, scheduler, fresh, quiet):
    """Map the model of MODEL_CARD (models/NAME/LEARNER.card.json) into OUT.

    OUT gets potential.tif (score 0-1), zones.tif (zones cut at the area shares
    calibrated on held-out sites), spread.tif (disagreement of the fold models)
    and map.json (grid, model card hash, zone areas and cell counts, timings).
    A potential map never replaces field survey.
    """
    from mlsites.mapping import map_model

    result = map_model(model_card, out_dir, dem=dem, n_jobs=n_jobs, scheduler=scheduler, fresh=fresh,
                       quiet=quiet, log=echo_unless(quiet))
    if not quiet:
        for z in result.summary["zones"]:
            click.echo(f"  {z['name']:<12} {z['cells']:>12} cells  {100 * z['area_share']:6.2f} % of the area  "
                       f"(held-out sites: {100 * z['heldout_site_share']:.0f} % cumulative)", err=True)
        click.echo(f"map in {result.out_dir} ({result.summary['seconds']['total']:.1f} s)", err=True)
