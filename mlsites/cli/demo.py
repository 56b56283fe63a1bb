"""``mlsites demo --out DIR``: run the bundled fictional demo study end to end."""

import click

from mlsites.cli.main import handle_errors
from mlsites.cli.options import echo_unless, quiet_option


@click.command()
@click.option("--out", "out_dir", default="mlsites-demo", show_default=True, type=click.Path(file_okay=False),
              help="Folder for the demo's data, experiment files and results; created if missing.")
@click.option("--fresh", is_flag=True, help="Replace an earlier demo run in OUT and derive every layer again "
              "(default: keep it, and reuse cached layers and samples).")
@click.option("--jobs", "n_jobs", type=click.IntRange(1), default=None,
              help="Parallel model fits during cross-validation (default: CPU cores, at most 4; the results do "
              "not depend on it).")
@quiet_option
@handle_errors
def demo(out_dir, fresh, n_jobs, quiet):
    """Write the fictional demo study into OUT and run it end to end.

    The study is an invented river valley (6 x 6 km at 10 m) with invented site
    records of five invented phases, placed by known preferences and recorded
    mostly inside survey strips. OUT gets demo_data/ (DEM, soils, channel lines,
    survey strips, sites, later-found sites, the true preference surface, a
    neighbouring DEM), experiments/ (demo.toml and its variants), runs/demo/
    (tables, curves, maps, the check on the later-found sites, explanations,
    sites through time, report.html) and models/demo/ (one model and model card
    per learner). Takes a few minutes; open runs/demo/report.html when it is done.
    """
    from mlsites.experiment import run_experiment
    from mlsites.experiment._demo import prepare_demo_folder

    log = echo_unless(quiet)
    experiment = prepare_demo_folder(out_dir, log=log)
    result = run_experiment(experiment, fresh=fresh, quiet=quiet, log=log, n_jobs=n_jobs)
    cols = [c for c in ("rank", "learner", "auc_mean", "boyce_mean", "auc_pooled") if c in result.summary.columns]
    click.echo(result.summary[cols].to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    report = result.run_dir / "report.html"
    click.echo(f"results: {result.run_dir}\nmodels: {result.models_dir}\nexperiment: {experiment}"
               + (f"\nreport: {report}" if report.exists() else ""))
