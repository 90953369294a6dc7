"""Periodic reports: one self-contained HTML file per site and period (and per building or
area), for the ``report`` command and the service's daily job alike.

``numbers`` sums the hours and advisories of each space, ``plots`` draws them, ``document``
writes the HTML, ``stored`` reads the service's store and writes the daily files.
"""

from thermowarden.shell.report.document import CAUTION, render_html
from thermowarden.shell.report.numbers import (
    EN_LABELS,
    ISO_LABELS,
    PLOT_LIMIT,
    SAMPLE_GAP_MAX_S,
    SpaceReport,
    build_report,
    rollup_rows,
)
from thermowarden.shell.report.stored import stored_events, stored_samples, write_reports

__all__ = ["CAUTION", "EN_LABELS", "ISO_LABELS", "PLOT_LIMIT", "SAMPLE_GAP_MAX_S",
           "SpaceReport", "build_report", "render_html", "rollup_rows", "stored_events",
           "stored_samples", "write_reports"]
