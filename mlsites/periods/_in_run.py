"""The periods stage inside ``mlsites run`` (see mlsites.experiment._stages)."""

from __future__ import annotations

import time


def check_periods_in_run(exp) -> None:
    """The run's early check of dates, blocks and windows (with its other checks, before sampling).

    Without dates there is nothing to check. Raises the errors of
    :func:`mlsites.periods.check_dated_sites` (an end year before its start, an
    unmapped category, a window outside every range, too narrow or too many
    blocks), so a run with bad dates stops before any work.
    """
    from mlsites.periods._run import check_dated_sites, has_dates

    if has_dates(exp):
        check_dated_sites(exp)


def periods_in_run(ctx):
    """Time blocks, Monte Carlo envelopes, density maps and period-specific models of a run.

    Writes ``periods/`` into the run folder being built (the files of
    :func:`mlsites.periods.run_periods`, by the same code) and, when ``[periods]
    windows`` names windows, ``periods/windows/`` (:func:`fit_window_models` on
    the run's sample table, factories and folds; :func:`write_window_models`).

    Returns
    -------
    dict or None
        For the manifest: counts, the windows' best learners and top layers,
        seconds. None (and one log line saying why) when the sites carry no dates.
    """
    from mlsites.periods._models import fit_window_models, write_window_models
    from mlsites.periods._run import has_dates, read_dated_sites, write_periods

    exp, log = ctx.exp, ctx.log
    if not has_dates(exp):
        log("periods: no periods stage; the sites carry no dates (set [sites] start_field and end_field, or "
            "[periods] category_field with a [periods.categories] table)")
        return None
    t0 = time.perf_counter()
    folder = ctx.staging / "periods"
    folder.mkdir()
    dated = read_dated_sites(exp, log=lambda m: log(f"periods: {m}"))
    summary = write_periods(folder, exp, dated, quiet=ctx.quiet, log=lambda m: log(f"periods: {m}"), t0=t0)
    out = {"folder": "periods", "n_sites_dated": summary["n_sites_dated"], "n_blocks": summary["blocks"]["n_blocks"],
           "n_simulations": summary["n_simulations"], "windows": None}
    if dated.windows is None:
        log("periods: no [periods.windows]; no period-specific models")
        return out
    splitter = None
    if ctx.splitter is not None:
        from mlsites.experiment._samples import buffered_splitter

        def splitter(table):
            return buffered_splitter(exp, table, ctx.grid)

    from tqdm.auto import tqdm

    ev = exp["evaluation"]
    n_fits = len(dated.windows.windows) * len(ctx.factories) * (
        ctx.splitter.get_n_splits() if ctx.splitter is not None else int(ctx.table["fold"].nunique()))
    with tqdm(total=n_fits, desc="period models", unit="fit", disable=ctx.quiet, leave=False) as bar:
        models = fit_window_models(ctx.table, dated.windows, features=ctx.features, categorical=ctx.categorical,
                                   learners=_window_factories(ctx), fold_column="fold", splitter=splitter,
                                   random_state=ctx.seed, zone_targets=ev["zone_targets"],
                                   top_area_shares=tuple(ev["top_area_shares"]),
                                   n_repeats=exp["explain"]["n_repeats"], n_jobs=ctx.n_jobs, progress=bar,
                                   log=lambda m: log(f"periods: {m}"))
    write_window_models(models, folder / "windows")
    best = models.metrics[models.metrics["rank"] == 1]
    out["windows"] = {r.window: {"best": r.learner, "auc_mean": float(r.auc_mean), "top_layer": r.top_layer,
                                 "n_sites": int(r.n_sites)} for r in best.itertuples()}
    out["n_dropped_site_windows"] = int(len(models.dropped))
    out["seconds"] = round(time.perf_counter() - t0, 2)
    return out


def _window_factories(ctx):
    """Learner factories per window table: the forest draws rows for the window's own sites."""
    from mlsites.experiment._run import _learner_factories

    def factories(table):
        return _learner_factories(ctx.exp, ctx.categorical, ctx.seed, table)

    return factories
