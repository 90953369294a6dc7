"""The plots of a report's space (matplotlib, embedded as SVG): operative temperature
against its comfort band, WBGT against its references, heat index and UTCI outdoors, and a
timeline of advisories (each level of an advisory in its priority's colour, ending with the
data)."""

from __future__ import annotations

import datetime as dt
import io
import math
import re
from typing import Any

from thermowarden.core import catalogue
from thermowarden.shell.report.numbers import (
    PRIORITY_ORDER,
    SpaceReport,
    rule_words,
    timeline_spans,
)

OUTDOOR_COLOURS = ("#b5651d", "#6a3d9a", "#1f5f8b")


def _svg(fig: Any) -> str:
    import matplotlib.pyplot as plt

    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    # no text a browser could show but the figure's own: the file's metadata goes, and the
    # style sheet matplotlib writes becomes the (inherited) style of the drawing
    text = re.sub(r"\s*<metadata>.*?</metadata>", "", text, flags=re.S)
    text = re.sub(r"\s*<style[^>]*>.*?</style>", "", text, flags=re.S)
    return text.replace("<svg ", '<svg style="stroke-linejoin:round;stroke-linecap:butt" ',
                        1)


def space_plots(rep: SpaceReport, tz: dt.tzinfo, start: float, end: float) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.dates as mdates
    import matplotlib.pyplot as plt

    out = []
    if not rep.t:
        return "<p class=note>No samples in this period.</p>"
    def num(t: float) -> float:
        return float(mdates.date2num(dt.datetime.fromtimestamp(t, tz)))  # type: ignore[no-untyped-call]

    def finish(ax: Any) -> None:
        ax.set_ylabel("°C")
        ax.xaxis_date(tz)
        ax.xaxis.set_major_formatter(fmt)
        ax.set_xlim(num(start), num(end))  # every plot of a space on the same time axis
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
        ax.grid(alpha=0.3)

    times = [num(t) for t in rep.t]
    fmt = mdates.DateFormatter("%H:%M" if end - start <= 2 * 86_400 else "%d %b",  # type: ignore[no-untyped-call]
                               tz=tz)
    if rep.outdoor and any(math.isfinite(v) for line in rep.outdoor_lines.values()
                           for v in line):
        fig, ax = plt.subplots(figsize=(7.5, 2.6))
        for k, e in enumerate(catalogue.drawn("outdoor")):
            ax.plot(times, rep.outdoor_lines[e.name], color=OUTDOOR_COLOURS[k % 3], lw=1.3,
                    label=e.label)
        finish(ax)
        out.append(_svg(fig))
    if not rep.outdoor and any(math.isfinite(v) for v in rep.operative):
        fig, ax = plt.subplots(figsize=(7.5, 2.6))
        if not rep.hot_work and not rep.outdoor:  # a comfort band means nothing there
            lo = next((v for v in rep.band_lower if math.isfinite(v)), math.nan)
            hi = next((v for v in rep.band_upper if math.isfinite(v)), math.nan)
            ax.fill_between(times, rep.band_lower, rep.band_upper, color="#cfe8d4",
                            label="EN 16798-1 category II band" if rep.natural else
                            f"comfort band {lo:g}-{hi:g} °C (space parameters)")
        ax.plot(times, rep.operative, color="#1f4e79", lw=1.4, label="operative temperature")
        finish(ax)
        out.append(_svg(fig))
    if rep.hot_work and any(math.isfinite(v) for v in rep.wbgt + rep.wbgt_spot):
        fig, ax = plt.subplots(figsize=(7.5, 2.6))
        if any(math.isfinite(v) for v in rep.wbgt_spot):
            ax.plot(times, rep.wbgt_spot, color="#d4a5a5", lw=0.8,
                    label="WBGT, spot value (not the 60-minute mean)")
        if any(math.isfinite(v) for v in rep.wbgt):  # a gap where the mean did not exist
            ax.plot(times, rep.wbgt, color="#8b1e1e", lw=1.6,
                    label="WBGT, 60-minute mean (with the clothing adjustment)")
        ax.plot(times, rep.ref_u, color="#d98c1f", lw=1, ls="--",
                label="unacclimatised reference (action)")
        ax.plot(times, rep.ref_a, color="#555555", lw=1, ls=":",
                label="acclimatised reference (limit)")
        finish(ax)
        out.append(_svg(fig))
    if rep.advisories:
        fig, ax = plt.subplots(figsize=(7.5, 0.9 + 0.28 * len(rep.advisories)))
        colours = {"low": "#9bbbd4", "medium": "#e0b040", "high": "#d9712b",
                   "urgent": "#b22222"}
        for k, t0, t1, priority in timeline_spans(rep, start, end):
            ax.barh(k, num(t1) - num(t0), left=num(t0), color=colours[priority], height=0.6)
        for k, a in enumerate(rep.advisories):
            ax.text(num(max(a["raised"], start)), k, " " + rule_words(a), va="center",
                    fontsize=7)
        for priority in PRIORITY_ORDER:
            if any(lv["priority"] == priority for a in rep.advisories for lv in a["levels"]):
                ax.barh(0, 0, color=colours[priority], label=f"priority {priority}")
        ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
        ax.set_yticks([])
        ax.set_ylim(-0.6, len(rep.advisories) - 0.4)
        ax.xaxis_date(tz)
        ax.xaxis.set_major_formatter(fmt)
        ax.set_xlim(num(start), num(end))
        ax.grid(axis="x", alpha=0.3)
        out.append(_svg(fig))
    return "\n".join(out)
