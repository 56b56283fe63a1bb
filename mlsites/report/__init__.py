"""The run report: one self-contained HTML file a heritage officer can read.

``build_report(run_dir)`` writes ``report.html`` from a finished run's files
(tables, figures, maps, explanations, periods, checks) without refitting; runs
call it as their last stage (:func:`mlsites.report._in_run.report_in_run`) and
``mlsites report RUN_DIR`` rebuilds it. ``compare_with_reference`` ranks a map
against a reference surface (for example the demo's true preferences).
"""

from mlsites.report._build import REPORT_FILE, REPORT_FILE_EXACT_SITES, ReportResult, build_report
from mlsites.report._reference import ReferenceComparison, compare_with_reference

__all__ = ["build_report", "ReportResult", "REPORT_FILE", "REPORT_FILE_EXACT_SITES", "compare_with_reference",
           "ReferenceComparison"]
