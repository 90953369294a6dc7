"""Where a report is written: never over a file a report did not create (every report's
head carries :data:`GENERATOR`), and never half written (a new file renamed over the old)."""

from __future__ import annotations

import os
import pathlib

GENERATOR = "thermowarden report"
"""The mark in every report's head: a file that has it was written by a report, and a
report may write over it; any other file is never written over."""


class ReportFileError(Exception):
    """The report would write over a file it did not create."""


def made_by_report(path: pathlib.Path) -> bool:
    """Whether ``path`` is a report this program wrote (its head carries the mark)."""
    try:
        with path.open("rb") as fh:
            head = fh.read(2048)
    except OSError:
        return False
    return f'<meta name="generator" content="{GENERATOR}">'.encode() in head


def report_destination(output: str | None, default: pathlib.Path) -> tuple[pathlib.Path, str]:
    """Where to write a report, and what to tell the person about it.

    ``output`` given: that file, unless it exists and is not a report (refused with
    :class:`ReportFileError`: nothing is written over). Not given: ``default``, or where a
    file of that name exists that a report did not write, the first free
    ``<name>-2.html``, ``<name>-3.html``... (and the note says so)."""
    if output is not None:
        path = pathlib.Path(output)
        if path.exists() and not made_by_report(path):
            raise ReportFileError(
                f"{path} exists and is not a report written by thermowarden: not written "
                "over (give another --output, or move that file)")
        return path, ""
    if not default.exists() or made_by_report(default):
        return default, ""
    k = 2
    while True:
        other = default.with_name(f"{default.stem}-{k}{default.suffix}")
        if not other.exists() or made_by_report(other):
            return other, (f"{default} exists and is not a report written by thermowarden: "
                           f"left as it is, the report went to {other} instead")
        k += 1


def write_report_file(path: pathlib.Path, text: str) -> None:
    """Write ``text`` to ``path`` through a new file beside it, renamed over it when whole
    (a report being read is never half written; a file created meanwhile that is not a
    report is never written over)."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    with tmp.open("x", encoding="utf-8") as fh:
        fh.write(text)
    try:
        if path.exists() and not made_by_report(path):
            raise ReportFileError(f"{path} appeared meanwhile and is not a report: not "
                                  "written over")
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
