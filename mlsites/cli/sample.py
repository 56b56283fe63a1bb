"""``mlsites sample``: build the sample table and folds, from an experiment file or flags."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import comma_floats, comma_names, echo_unless, quiet_option
from mlsites.experiment._config import FOLD_METHODS, SURVEY_MODES


def _layer_pairs(ctx, param, values):
    out = {}
    for v in values:
        name, sep, rest = v.partition("=")
        path, _, kind = rest.partition(":")
        if not sep or not name or not path or kind not in ("", "continuous", "categorical"):
            raise click.BadParameter(f"expected NAME=PATH or NAME=PATH:categorical, got {v!r}")
        out[name] = (path, kind or "continuous")
    return out


@click.command()
@click.argument("experiment", required=False, type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Output folder (default: RUNS_DIR/NAME/samples).")
@click.option("--dem", type=click.Path(dir_okay=False), help="DEM defining the study grid.")
@click.option("--sites", type=click.Path(dir_okay=False), help="Site records (vector file or CSV).")
@click.option("--id-field", help="Site id column (default site_id).")
@click.option("--x-field", help="CSV x column.")
@click.option("--y-field", help="CSV y column.")
@click.option("--crs", help="CRS of CSV coordinates, e.g. EPSG:32631.")
@click.option("--layer", "inputs", multiple=True, callback=_layer_pairs, metavar="NAME=PATH[:categorical]",
              help="Extra raster layer (repeatable).")
@click.option("--terrain-layers", callback=comma_names, help="Comma-separated terrain layers to derive.")
@click.option("--tpi-radii", "tpi_radii_m", callback=comma_floats, help="TPI radii in metres, comma-separated.")
@click.option("--site-buffer", "site_buffer_m", type=float, help="Site buffer radius, metres.")
@click.option("--background", "background_count", type=int, help="Number of background cells.")
@click.option("--exclusion", "exclusion_m", type=float, help="Keep background this far from sites, metres.")
@click.option("--survey", "survey_areas", type=click.Path(dir_okay=False), help="Survey-coverage polygons.")
@click.option("--survey-mode", type=click.Choice(SURVEY_MODES), help="Use of the survey polygons.")
@click.option("--effort-field", help="Survey effort column (weighted mode).")
@click.option("--fold-method", type=click.Choice(FOLD_METHODS), help="How folds are made.")
@click.option("--folds", "n_splits", type=int, help="Number of folds.")
@click.option("--block-size", "block_size_m", type=float, help="Block size in metres (default: from variograms).")
@click.option("--buffer", "buffer_m", type=float, help="Buffer of buffered leave-one-out, metres.")
@click.option("--seed", type=int, help="Random seed.")
@click.option("--fresh", is_flag=True, help="Replace existing sample files and ignore cached layers and samples.")
@quiet_option
@handle_errors
def sample(experiment, out_dir, inputs, fresh, quiet, **flags):
    """Write the sample table and folds (samples.parquet, folds.csv, blocks.gpkg,
    dropped_records.csv, sampling.json) of EXPERIMENT, or of a study given by flags.
    Flags override the experiment file's settings."""
    from mlsites.experiment._config import experiment_from_flags
    from mlsites.experiment._run import sample_experiment

    if experiment is None and not (flags["dem"] and flags["sites"] and out_dir):
        raise click.UsageError("give an EXPERIMENT file, or --dem, --sites and --out")
    for key in ("terrain_layers", "tpi_radii_m"):  # TOML lists, not tuples
        if flags[key] is not None:
            flags[key] = list(flags[key])
    if experiment is None:
        # Flags alone: the layer and sample cache lives inside the output folder.
        flags.update(name="samples", runs_dir=out_dir)
    exp = experiment_from_flags(experiment, inputs=inputs, **flags)
    samples = sample_experiment(exp, out_dir=out_dir, fresh=fresh, quiet=quiet, log=echo_unless(quiet))
    if not quiet:
        s = samples.summary
        click.echo(f"wrote {s['n_presence_cells']} site cells of {s['n_sites_used']} sites and "
                   f"{s['n_background_cells']} background cells to {samples.folder}", err=True)
