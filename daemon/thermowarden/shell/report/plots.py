"""The plots of a report's space (matplotlib, embedded as SVG): operative temperature
against its comfort band, WBGT against its references, heat index and UTCI outdoors, and a
timeline of advisories."""

from __future__ import annotations

import datetime as dt
import io
import math
from typing import Any

from thermowarden.core import catalogue
from thermowarden.shell.report.numbers import SpaceReport

OUTDOOR_COLOURS = ("#b5651d", "#6a3d9a", "#1f5f8b")


def _svg(fig: Any) -> str:
    import matplotlib.pyplot as plt

    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    plt.close(fig)
    text = buf.getvalue()
    return text[text.index("<svg"):]


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
        ax.legend(loc="upper left", fontsize=8, frameon=False)
        ax.grid(alpha=0.3)

    times = [num(t) for t in rep.t]
    fmt = mdates.DateFormatter("%H:%M" if end - start <= 2 * 86_400 else "%d %b",  # type: ignore[no-untyped-call]
                               tz=tz)
    if rep.outdoor and any(math.isfinite(v) for line in rep.outdoor_lines.values()
                           for v in line):
        fig, ax = plt.subplots(figsize=(9, 2.6))
        for k, e in enumerate(catalogue.drawn("outdoor")):
            ax.plot(times, rep.outdoor_lines[e.name], color=OUTDOOR_COLOURS[k % 3], lw=1.3,
                    label=e.label)
        finish(ax)
        out.append(_svg(fig))
    if not rep.outdoor and any(math.isfinite(v) for v in rep.operative):
        fig, ax = plt.subplots(figsize=(9, 2.6))
        if not rep.hot_work and not rep.outdoor:  # a comfort band means nothing there
            lo = next((v for v in rep.band_lower if math.isfinite(v)), math.nan)
            hi = next((v for v in rep.band_upper if math.isfinite(v)), math.nan)
            ax.fill_between(times, rep.band_lower, rep.band_upper, color="#cfe8d4",
                            label="EN 16798-1 category II band" if rep.natural else
                            f"comfort band {lo:g}-{hi:g} °C (space parameters)")
        ax.plot(times, rep.operative, color="#1f4e79", lw=1.4, label="operative temperature")
        finish(ax)
        out.append(_svg(fig))
    if rep.hot_work and any(math.isfinite(v) for v in rep.wbgt):
        fig, ax = plt.subplots(figsize=(9, 2.6))
        ax.plot(times, rep.wbgt, color="#8b1e1e", lw=1.4, label="WBGT (60-min, with "
                "clothing adjustment)")
        ax.plot(times, rep.ref_u, color="#d98c1f", lw=1, ls="--",
                label="unacclimatised reference (action)")
        ax.plot(times, rep.ref_a, color="#555555", lw=1, ls=":",
                label="acclimatised reference (limit)")
        finish(ax)
        out.append(_svg(fig))
    if rep.advisories:
        fig, ax = plt.subplots(figsize=(9, 0.5 + 0.28 * len(rep.advisories)))
        colours = {"low": "#9bbbd4", "medium": "#e0b040", "high": "#d9712b",
                   "urgent": "#b22222"}
        for k, a in enumerate(rep.advisories):
            s0 = num(max(a["raised"], start))
            s1 = num(min(a["cleared"] or end, end))
            ax.barh(k, s1 - s0, left=s0, color=colours[a["priority"]], height=0.6)
            ax.text(s0, k, " " + a["rule"], va="center", fontsize=7)
        ax.set_yticks([])
        ax.xaxis_date(tz)
        ax.xaxis.set_major_formatter(fmt)
        ax.set_xlim(num(start), num(end))
        ax.grid(axis="x", alpha=0.3)
        out.append(_svg(fig))
    return "\n".join(out)
