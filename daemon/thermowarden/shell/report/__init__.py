"""Periodic reports: one self-contained HTML file per site and period (and per building or
area), for the ``report`` command and the service's daily job alike.

``numbers`` sums the hours and advisories of each space, ``plots`` draws them, ``document``
writes the HTML, ``files`` says where a report may be written (never over a file a report
did not create), ``stored`` reads the service's store and writes the daily files.
"""

from thermowarden.shell.report.document import CAUTION, render_html
from thermowarden.shell.report.files import (
    GENERATOR,
    ReportFileError,
    made_by_report,
    report_destination,
    write_report_file,
)
from thermowarden.shell.report.numbers import (
    EN_LABELS,
    ISO_LABELS,
    PLOT_LIMIT,
    PRIORITY_ORDER,
    SAMPLE_GAP_MAX_S,
    RuleFacts,
    SpaceReport,
    ahead_figures,
    build_report,
    rollup_rows,
    rule_words,
    timeline_spans,
)
from thermowarden.shell.report.stored import (
    last_stored_time,
    rule_facts,
    stored_events,
    stored_samples,
    write_reports,
)

__all__ = ["CAUTION", "EN_LABELS", "GENERATOR", "ISO_LABELS", "PLOT_LIMIT", "PRIORITY_ORDER",
           "SAMPLE_GAP_MAX_S", "ReportFileError", "RuleFacts", "SpaceReport", "ahead_figures",
           "build_report",
           "last_stored_time", "made_by_report", "render_html", "report_destination",
           "rollup_rows", "rule_facts", "rule_words", "stored_events", "stored_samples",
           "timeline_spans", "write_report_file", "write_reports"]
