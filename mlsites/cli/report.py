"""``mlsites report RUN_DIR``: rebuild a finished run's HTML report, without refitting."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


@click.command()
@click.argument("run_dir", type=click.Path(file_okay=False))
@click.option("--out", "out_file", type=click.Path(dir_okay=False),
              help="HTML file to write. Default: RUN_DIR/report.html (RUN_DIR/report_exact_sites.html with "
                   "--show-sites, so the shareable report is never replaced by one with exact positions).")
@click.option("--show-sites", is_flag=True,
              help="Draw exact site positions on the maps. Default: sites shown as counts per square of "
                   "[report] site_cell_m (default 1000 m). Do not share such a report: site locations attract "
                   "looting.")
@click.option("--fresh", is_flag=True, help="Replace an existing report file.")
@quiet_option
@handle_errors
def report(run_dir, out_file, show_sites, fresh, quiet):
    """Write the self-contained HTML report of the finished run in RUN_DIR (runs/NAME).

    The report holds the study, the folds, the comparison of learners, capture
    curves, the zones, potential, zone, spread and applicability maps over a
    hillshade, the explanations, the period charts and the checks the run made,
    and a methods paragraph with references. Images are embedded, so the one
    file opens in any browser without a network; print it from the browser
    for a PDF. Nothing is refitted.
    """
    from mlsites.report import build_report

    result = build_report(run_dir, out=out_file, show_sites=show_sites, fresh=fresh, log=echo_unless(quiet))
    if result.absent and not quiet:
        click.echo(f"left out: {', '.join(result.absent)} (files not in the run; see the report)", err=True)
    click.echo(str(result.path))
