"""The report stage inside ``mlsites run`` (see mlsites.experiment._stages)."""

from __future__ import annotations

import datetime as _dt


def _manifest(ctx) -> dict:
    """What the report reads from ``manifest.json``, which the run writes only after this stage."""
    from mlsites.experiment._models import library_versions

    exp = ctx.exp
    return {"run": ctx.name, "experiment": exp.name, "experiment_file": str(exp.path), "settings": exp.settings,
            "seed": ctx.seed, "versions": library_versions(), "learners": list(ctx.factories),
            "samples": {"features": list(ctx.features), "categorical": list(ctx.categorical)},
            "run_dir": str(ctx.run_dir), "models_dir": str(ctx.models_dir), "maps": sorted(ctx.maps),
            "stages": dict(ctx.results),
            "finished_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")}


def report_in_run(ctx):
    """Write ``report.html`` into the run being built; return its summary for the manifest.

    The report is drawn from the files the run has written into ``ctx.staging``
    (its model cards are still in ``ctx.model_staging``); sites are shown
    generalised, never at their exact positions (``mlsites report --show-sites``
    makes such a report from the finished run when it is needed).
    """
    from mlsites.report import REPORT_FILE, build_report

    result = build_report(ctx.staging, out=ctx.staging / REPORT_FILE, manifest=_manifest(ctx),
                          models_dir=ctx.model_staging, fresh=True)
    left_out = f"; left out: {', '.join(result.absent)}" if result.absent else ""
    ctx.log(f"report: {REPORT_FILE}, {len(result.sections)} sections, {result.size_bytes / 1e6:.1f} MB{left_out}")
    return result.summary()
