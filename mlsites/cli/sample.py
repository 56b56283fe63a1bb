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


_FILE = "default: the experiment file's value"


@click.command()
@click.argument("experiment", required=False, type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Output folder (default: RUNS_DIR/NAME/samples; required without EXPERIMENT).")
@click.option("--dem", type=click.Path(dir_okay=False),
              help=f"DEM whose CRS, cell size and extent define the study grid ({_FILE}; required without "
              "EXPERIMENT).")
@click.option("--sites", type=click.Path(dir_okay=False),
              help=f"Site records: points or polygons (GeoPackage, GeoJSON, Shapefile) or a CSV with coordinate "
              f"columns ({_FILE}; required without EXPERIMENT).")
@click.option("--id-field", help="Column with the site ids (default: the experiment file's, else site_id).")
@click.option("--x-field", help=f"Column of x coordinates in a CSV, in the units of --crs ({_FILE}).")
@click.option("--y-field", help=f"Column of y coordinates in a CSV, in the units of --crs ({_FILE}).")
@click.option("--crs", help=f"CRS of the CSV coordinates, e.g. EPSG:32631 ({_FILE}; a vector file brings its own).")
@click.option("--layer", "inputs", multiple=True, callback=_layer_pairs, metavar="NAME=PATH[:categorical]",
              help="Another raster layer, aligned onto the study grid; add :categorical for class codes such as "
              "soil types. Repeatable (default: the experiment file's [inputs]).")
@click.option("--terrain-layers", callback=comma_names,
              help=f"Terrain layers to derive from the DEM, comma-separated, e.g. slope,tpi ({_FILE}, else the "
              "standard set).")
@click.option("--tpi-radii", "tpi_radii_m", callback=comma_floats,
              help=f"Disc radii of the topographic position index in metres, comma-separated, e.g. 100,500 "
              f"({_FILE}, else 100,500).")
@click.option("--site-buffer", "site_buffer_m", type=float,
              help=f"Every cell within this many metres of a site counts as a site cell ({_FILE}, else 0: the "
              "cell holding the point).")
@click.option("--background", "background_count", type=int,
              help=f"Number of background cells drawn from the study area ({_FILE}, else 10000).")
@click.option("--exclusion", "exclusion_m", type=float,
              help=f"No background cell within this many metres of a site ({_FILE}, else 0; above 0 the "
              "background becomes pseudo-absences).")
@click.option("--survey", "survey_areas", type=click.Path(dir_okay=False),
              help=f"Polygons of the surveyed areas ({_FILE}, else none: background from the whole study area).")
@click.option("--survey-mode", type=click.Choice(SURVEY_MODES),
              help=f"inside: background only inside the surveyed areas; weighted: everywhere, in proportion to "
              f"--effort-field ({_FILE}, else inside).")
@click.option("--effort-field", help=f"Column of survey effort in --survey, for --survey-mode weighted ({_FILE}).")
@click.option("--fold-method", type=click.Choice(FOLD_METHODS),
              help=f"How samples are split for spatial cross-validation ({_FILE}, else square_blocks).")
@click.option("--folds", "n_splits", type=int,
              help=f"Number of folds, at least 2 ({_FILE}, else 5).")
@click.option("--block-size", "block_size_m", type=float,
              help=f"Edge of the square or hexagon blocks in metres ({_FILE}, else suggested from the layers' "
              "spatial autocorrelation).")
@click.option("--buffer", "buffer_m", type=float,
              help=f"Radius in metres left out around the held-out site in buffered_leave_one_out ({_FILE}).")
@click.option("--seed", type=int, help=f"Whole-number seed of every random draw ({_FILE}, else 0).")
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
