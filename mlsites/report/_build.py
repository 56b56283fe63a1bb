"""Build the report of a run: gather the sections, render the template, write one HTML file."""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path

from mlsites._files import replacing
from mlsites.errors import OutputExistsError

__all__ = ["ReportResult", "build_report", "REPORT_FILE", "REPORT_FILE_EXACT_SITES"]

#: Report file of a run (shareable: sites generalised).
REPORT_FILE = "report.html"
#: Default name of a report with exact site positions (never replaces the shareable one).
REPORT_FILE_EXACT_SITES = "report_exact_sites.html"


@dataclass(frozen=True)
class ReportResult:
    """What :func:`build_report` wrote.

    Attributes
    ----------
    path : Path
        The HTML file.
    sections : list of str
        Ids of the sections drawn.
    absent : dict of str to str
        Section id -> why it was left out.
    size_bytes : int
    seconds : float
    """

    path: Path
    sections: list
    absent: dict
    size_bytes: int
    seconds: float

    def summary(self) -> dict:
        """JSON-ready summary (for the run manifest)."""
        return {"file": self.path.name, "sections": self.sections, "left_out": self.absent,
                "size_bytes": self.size_bytes, "seconds": round(self.seconds, 2)}


def _environment():
    import jinja2

    return jinja2.Environment(loader=jinja2.PackageLoader("mlsites.report", "templates"),
                              autoescape=jinja2.select_autoescape(["html", "j2"], default=True),
                              trim_blocks=False, lstrip_blocks=False, undefined=jinja2.StrictUndefined)


def _section_makers():
    """The section functions in report order."""
    from mlsites.report import _sections as s
    from mlsites.report._methods import methods_section
    from mlsites.report._reference import reference_section

    return (s.glance, s.study, s.folds, s.comparison, s.curves, s.zones, s.maps, s.reliability, reference_section,
            s.explanations, s.periods, s.check, methods_section)


def render_report(context: dict) -> str:
    """Render the report template with ``context`` (title, run, sections, ...)."""
    env = _environment()
    css = env.loader.get_source(env, "report.css")[0]
    return env.get_template("report.html.j2").render(css=css, **context)


def build_report(run_dir, *, out=None, show_sites=False, fresh=False, manifest=None, models_dir=None,
                 log=None) -> ReportResult:
    """Write the self-contained HTML report of a finished run, without refitting anything.

    Parameters
    ----------
    run_dir : path-like
        The run folder (``runs/NAME``): its tables, figures, maps and manifest.
    out : path-like, optional
        HTML file to write. Default ``RUN_DIR/report.html``, or
        ``RUN_DIR/report_exact_sites.html`` with ``show_sites`` so that the
        shareable report is never replaced by one with exact positions.
    show_sites : bool, default False
        Draw exact site positions on the maps; by default sites are drawn as
        counts per square of ``[report] site_cell_m`` (1000 m).
    fresh : bool, default False
        Replace an existing report file.
    manifest : dict, optional
        The run's manifest when ``manifest.json`` is not written yet (inside a run).
    models_dir : path-like, optional
        Folder of the model cards (default: the manifest's ``models_dir``).
    log : callable, optional
        Receives one line per step.

    Returns
    -------
    ReportResult

    Raises
    ------
    OutputExistsError
        ``out`` exists and ``fresh`` is false (checked before any work).
    InputError
        ``run_dir`` is not a run folder.

    Notes
    -----
    Sections are drawn from the run's files (``manifest.json``, ``sampling.json``,
    ``dropped_records.csv``, ``samples/blocks.gpkg``, ``metrics_summary.csv``,
    ``zones.csv``, the curve PNGs, ``maps/LEARNER/``, ``explain/``, ``periods/``,
    ``check/``); a section whose files are missing is left out with one line.
    Maps are drawn from rasters read at most 600 cells per side; every image is
    embedded as a PNG data URI without metadata, so the file opens in any
    browser without a network. No table holds coordinates, and unless
    ``show_sites`` sites appear only as counts per square. The file is written
    under a temporary name and renamed when complete.
    """
    from mlsites import __version__
    from mlsites.report._run_files import open_run

    t0 = time.perf_counter()
    emit = log or (lambda message: None)
    run_dir = Path(run_dir)
    out = Path(out) if out is not None else run_dir / (REPORT_FILE_EXACT_SITES if show_sites else REPORT_FILE)
    if out.exists() and not fresh:
        raise OutputExistsError(f"{out}: the report exists already; use --fresh to replace it or --out for "
                                "another file")
    run = open_run(run_dir, manifest=manifest, models_dir=models_dir, show_sites=show_sites)
    built = [make(run) for make in _section_makers()]
    for s in built:
        emit(f"report: {s['title']}" + (f" left out ({s['absent']})" if s["absent"] else ""))
    m = run.manifest
    title = run.section.get("title") or f"Site potential: {m.get('experiment', run_dir.name)}"
    html = render_report({"title": title, "run": m.get("run", run_dir.name), "experiment": m.get("experiment", ""),
                          "finished": (m.get("finished_utc") or "").replace("T", " ").replace("+00:00", " UTC"),
                          "version": __version__, "show_sites": show_sites, "sections": built,
                          "notes": run.notes})
    out.parent.mkdir(parents=True, exist_ok=True)
    with replacing(out) as tmp:
        tmp.write_text(html, encoding="utf-8")
    seconds = time.perf_counter() - t0
    emit(f"report: {out} ({len(html.encode('utf-8')) / 1e6:.1f} MB) in {seconds:.1f} s")
    return ReportResult(path=out, sections=[s["id"] for s in built if not s["absent"]],
                        absent={s["id"]: s["absent"] for s in built if s["absent"]},
                        size_bytes=out.stat().st_size, seconds=seconds)
