"""``mlsites terrain DEM --out DIR``: one GeoTIFF per terrain layer plus a JSON summary."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import comma_floats, comma_names, echo_unless, overwrite_option, quiet_option


def _pairs(ctx, param, values):
    out = {}
    for v in values:
        name, sep, path = v.partition("=")
        if not sep or not name or not path:
            raise click.BadParameter(f"expected NAME=PATH, got {v!r}")
        out[name] = path
    return out


@click.command()
@click.argument("dem", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False),
              help="Folder for one GeoTIFF per layer and terrain.json.")
@click.option("--layers", callback=comma_names,
              help="Layers to derive, comma-separated, e.g. slope,northness,tpi (default: the standard set; "
              "the README lists every layer).")
@click.option("--tpi-radii", callback=comma_floats,
              help="Disc radii of the topographic position index in metres, comma-separated (default 100,500).")
@click.option("--landform-lookup", type=int, default=20, show_default=True,
              help="How far the landform classes (geomorphons) look in each direction, in cells.")
@click.option("--landform-flatness", type=float, default=1.0, show_default=True,
              help="Slope below which the landform classes count a direction as level, in degrees.")
@click.option("--stream-threshold", type=float, default=0.5, show_default=True,
              help="Area draining into a cell, in km2, from which it counts as a stream (for stream_distance and "
              "height_above_drainage).")
@click.option("--distance-to", "vectors", multiple=True, callback=_pairs, metavar="NAME=PATH",
              help="A vector layer (lines, points or polygons) turned into a layer distance_NAME in metres. "
              "Repeatable (default: none).")
@click.option("--stream-lines", type=click.Path(dir_okay=False),
              help="Measure stream_distance to these mapped channel lines (default: to the streams derived from "
              "the DEM).")
@click.option("--block-rows", type=int,
              help="Rows per processing window; lower it if memory runs short (default: about 8 million cells a "
              "window).")
@overwrite_option
@quiet_option
@handle_errors
def terrain(dem, out_dir, layers, tpi_radii, landform_lookup, landform_flatness, stream_threshold,
            vectors, stream_lines, block_rows, overwrite, quiet):
    """Derive terrain layers from DEM into OUT as LAYER.tif plus terrain.json."""
    from mlsites.terrain import DEFAULT_LAYERS, TerrainSettings, compute_terrain

    settings = TerrainSettings(
        layers=layers or DEFAULT_LAYERS,
        tpi_radii_m=tpi_radii or (100.0, 500.0),
        landform_lookup_cells=landform_lookup,
        landform_flatness_deg=landform_flatness,
        stream_threshold_km2=stream_threshold,
        vectors=vectors,
        stream_vector=stream_lines,
        block_rows=block_rows,
    )
    summary = compute_terrain(dem, out_dir, settings, overwrite=overwrite, quiet=quiet,
                              log=echo_unless(quiet))
    if not quiet:
        click.echo(f"wrote {len(summary['layers'])} layers to {out_dir} in {summary['seconds']:.1f} s", err=True)
