"""``mlsites check MODEL_CARD --sites NEW_SITES``: a saved model checked on later-found sites."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


def _share(v):
    return f"{100 * v:5.1f} %"


def format_check_table(table) -> str:
    """The zone rows of ``check.csv`` as a short text table, then the verdicts."""
    lines = [f"{'zone':<10} {'sites':>7} {'share of sites (95 % interval)':>32} {'area':>8} {'gain':>6} "
             f"{'p (more than chance)':>21}"]
    zones = table[table["zone"] != "all"]
    for r in zones.itertuples():
        gain = "  n/a" if r.gain != r.gain else f"{r.gain:6.2f}"  # NaN: no site in the zone
        lines.append(f"{r.zone:<10} {r.sites_in_zone:>7.4g} {_share(r.site_share):>12} "
                     f"({_share(r.site_share_low)} to {_share(r.site_share_high)}) {_share(r.area_share):>8} "
                     f"{gain} {r.p_value:>21.3g}")
    lines.append("")
    lines.append(f"{zones.iloc[0]['zone']} zone: {zones.iloc[0]['verdict']}")
    lines.append(table.iloc[-1]["verdict"])
    return "\n".join(lines)


@click.command(name="check")
@click.argument("model_card", type=click.Path(dir_okay=False))
@click.option("--sites", "sites", required=True, type=click.Path(dir_okay=False),
              help="The later-found sites: points or polygons (GeoPackage, GeoJSON, Shapefile) or a CSV with "
              "coordinate columns, in any CRS (reprojected to the map's).")
@click.option("--out", "out_dir", type=click.Path(file_okay=False),
              help="Folder to create for check.csv, check_sites.csv, dropped_sites.csv and check.json "
              "(refused if it exists, unless --fresh). Default: check_LEARNER in the current folder.")
@click.option("--map", "map_dir", type=click.Path(file_okay=False),
              help="A folder written by `mlsites map` for this card. Default: the run's maps/LEARNER/ when it "
              "was made from this card, else the card is mapped into a temporary folder first.")
@click.option("--layer", help="Layer of a multi-layer site file (GeoPackage). Default: its only layer.")
@click.option("--id-field", default="site_id", show_default=True, help="Column with the site ids.")
@click.option("--x-field", help="Column of x coordinates in a CSV (CRS units). Default: the first of x, easting, "
              "lon, longitude.")
@click.option("--y-field", help="Column of y coordinates in a CSV (CRS units). Default: the first of y, northing, "
              "lat, latitude.")
@click.option("--crs", help="CRS of the coordinates, e.g. EPSG:4326. Required for a CSV; default: the file's own.")
@click.option("--jobs", "n_jobs", type=click.IntRange(1), default=1, show_default=True,
              help="Worker processes for a temporary map.")
@click.option("--with-coordinates", is_flag=True,
              help="Add the sites' x and y (map CRS) to check_sites.csv. Default: site ids only.")
@click.option("--fresh", is_flag=True, help="Replace an existing output folder.")
@quiet_option
@handle_errors
def check(model_card, sites, out_dir, map_dir, layer, id_field, x_field, y_field, crs, n_jobs, with_coordinates,
          fresh, quiet):
    """Check the model of MODEL_CARD (models/NAME/LEARNER.card.json) on later-found sites.

    For each zone of the model's map: the share of the new sites in it with a
    95 % Wilson interval, its share of the area, Kvamme's gain and the one-sided
    binomial test of more sites than its area share gives by chance; then AUC
    and the Boyce index against the mapped landscape and the share of sites
    inside the area of applicability. Sites outside the map are listed in
    dropped_sites.csv. A check on a few sites is weak, and only sites found by
    survey that did not follow the map can test it.
    """
    from pathlib import Path

    from mlsites.mapping import check_model

    if out_dir is None:
        name = Path(model_card).name
        out_dir = f"check_{name.removesuffix('.card.json')}"
    result = check_model(model_card, sites, out_dir=out_dir, map_dir=map_dir, layer=layer, id_field=id_field,
                         x_field=x_field, y_field=y_field, crs=crs, fresh=fresh, quiet=quiet, log=echo_unless(quiet),
                         n_jobs=n_jobs, with_coordinates=with_coordinates)
    counts = result.summary["counts"]
    click.echo(f"{counts['used']} of {counts['read']} site records checked"
               + (f"; {counts['dropped']} dropped (see dropped_sites.csv)" if counts["dropped"] else ""))
    click.echo(format_check_table(result.table))
    if result.summary["training_sites"]["n_matching"]:
        click.echo(f"{result.summary['training_sites']['n_matching']} of these sites are training sites of the "
                   "model (training_site in check_sites.csv): a check on them is not independent.")
    if not quiet:
        click.echo(f"check in {result.out_dir}", err=True)
