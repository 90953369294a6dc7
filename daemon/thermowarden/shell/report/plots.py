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
    fig.savefig(buf, format="svg", metadata={"Date": None})
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    # no text a browser could show but the figure's own: the file's metadata goes, and the
    # style sheet matplotlib writes becomes the (inherited) style of the drawing
    text = re.sub(r"\s*<metadata>.*?</metadata>", "", text, flags=re.S)
    text = re.sub(r"\s*<style[^>]*>.*?</style>", "", text, flags=re.S)
    return text.replace("<svg ", '<svg style="stroke-linejoin:round;stroke-linecap:butt" ',
                        1)


WIDTH_IN = 6.4
"""Every plot of a space is this wide (inches), its axes at the same place: the hours line
up from one plot to the next. The legend goes under the axes (a phone shows the plot at the
screen's width)."""
LEFT_IN, RIGHT_IN = 0.62, 0.15
AXES_IN = 1.9
TICKS_IN = 0.34
LEGEND_ROW_IN = 0.2
FONT = 9


def _frame(axes_in: float, legend_rows: int) -> tuple[Any, Any]:
    """A figure of :data:`WIDTH_IN` with one axes ``axes_in`` high at the common place, and
    room under it for the time labels and ``legend_rows`` rows of legend."""
    import matplotlib.pyplot as plt

    below = TICKS_IN + LEGEND_ROW_IN * legend_rows + (0.08 if legend_rows else 0.0)
    height = 0.1 + axes_in + below
    fig = plt.figure(figsize=(WIDTH_IN, height))
    ax = fig.add_axes((LEFT_IN / WIDTH_IN, below / height,
                       (WIDTH_IN - LEFT_IN - RIGHT_IN) / WIDTH_IN, axes_in / height))
    ax.tick_params(labelsize=FONT)
    return fig, ax


def _legend(fig: Any, ax: Any, columns: int = 2) -> None:
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower left", bbox_to_anchor=(LEFT_IN / WIDTH_IN, 0.0),
               ncol=columns, fontsize=FONT, frameon=False, borderaxespad=0.2,
               handlelength=1.8, columnspacing=1.2)


def space_plots(rep: SpaceReport, tz: dt.tzinfo, start: float, end: float) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.dates as mdates

    out = []
    if not rep.t:
        return "<p class=note>No samples in this period.</p>"

    def num(t: float) -> float:
        return float(mdates.date2num(dt.datetime.fromtimestamp(t, tz)))  # type: ignore[no-untyped-call]

    def axis(ax: Any) -> None:
        ax.xaxis_date(tz)
        ax.xaxis.set_major_formatter(fmt)
        ax.set_xlim(num(start), num(end))  # every plot of a space on the same time axis

    def finish(fig: Any, ax: Any, columns: int = 2) -> None:
        ax.set_ylabel("°C", fontsize=FONT)
        axis(ax)
        ax.grid(alpha=0.3)
        _legend(fig, ax, columns)
        out.append(_svg(fig))

    def label(name: str) -> str:
        return catalogue.BY_NAME[name].label

    times = [num(t) for t in rep.t]
    fmt = mdates.DateFormatter("%H:%M" if end - start <= 2 * 86_400 else "%d %b",  # type: ignore[no-untyped-call]
                               tz=tz)
    if rep.outdoor and any(math.isfinite(v) for line in rep.outdoor_lines.values()
                           for v in line):
        drawn = catalogue.drawn("outdoor")
        fig, ax = _frame(AXES_IN, (len(drawn) + 1) // 2)
        for k, e in enumerate(drawn):
            ax.plot(times, rep.outdoor_lines[e.name], color=OUTDOOR_COLOURS[k % 3], lw=1.3,
                    label=e.label)
        finish(fig, ax)
    if not rep.outdoor and any(math.isfinite(v) for v in rep.operative):
        banded = not rep.hot_work  # a comfort band means nothing in a hot workplace
        fig, ax = _frame(AXES_IN, 1)
        ax.plot(times, rep.operative, color="#1f4e79", lw=1.4,
                label=label("operative_temperature"))
        if banded:
            lo = next((v for v in rep.band_lower if math.isfinite(v)), math.nan)
            hi = next((v for v in rep.band_upper if math.isfinite(v)), math.nan)
            ax.fill_between(times, rep.band_lower, rep.band_upper, color="#cfe8d4",
                            label="EN 16798-1 category II band" if rep.natural else
                            f"Comfort band {lo:g}-{hi:g} °C (the space's)")
        finish(fig, ax)
    if rep.hot_work and any(math.isfinite(v) for v in rep.wbgt + rep.wbgt_spot):
        fig, ax = _frame(AXES_IN, 4)
        if any(math.isfinite(v) for v in rep.wbgt):  # a gap where the mean did not exist
            ax.plot(times, rep.wbgt, color="#8b1e1e", lw=1.8, label=label("wbgt_mean_60min"))
        if any(math.isfinite(v) for v in rep.wbgt_spot):
            ax.plot(times, rep.wbgt_spot, color="#d4a5a5", lw=0.8,
                    label=label("wbgt_spot_adjusted") + " (not the 60-minute mean)")
        ax.plot(times, rep.ref_u, color="#d98c1f", lw=1.2, ls="--",
                label=label("wbgt_reference_unacclimatised") + ": the action value")
        ax.plot(times, rep.ref_a, color="#555555", lw=1.2, ls=":",
                label=label("wbgt_reference_acclimatised") + ": the limit")
        finish(fig, ax, columns=1)
    if rep.advisories:
        colours = {"low": "#9bbbd4", "medium": "#e0b040", "high": "#d9712b",
                   "urgent": "#b22222"}
        used = [p for p in PRIORITY_ORDER
                if any(lv["priority"] == p for a in rep.advisories for lv in a["levels"])]
        n = len(rep.advisories)
        fig, ax = _frame(0.3 + 0.28 * n, (len(used) + 3) // 4)
        spans = timeline_spans(rep, start, end)
        for k, t0, t1, priority in spans:
            ax.barh(k, num(t1) - num(t0), left=num(t0), color=colours[priority], height=0.6)
        x0, x1 = num(start), num(end)
        for k, a in enumerate(rep.advisories):
            own = [(t0, t1) for row, t0, t1, _ in spans if row == k]
            if not own:
                continue
            first, last = num(min(t for t, _ in own)), num(max(t for _, t in own))
            if (last - x0) / (x1 - x0) < 0.62:  # the words after the bar
                ax.text(last, k, "  " + rule_words(a), va="center", ha="left", fontsize=8)
            elif (first - x0) / (x1 - x0) > 0.38:  # before it
                ax.text(first, k, rule_words(a) + "  ", va="center", ha="right", fontsize=8)
            else:  # on it, on a light ground
                ax.text(first, k, " " + rule_words(a), va="center", ha="left", fontsize=8,
                        bbox={"facecolor": "white", "alpha": 0.8, "edgecolor": "none",
                              "pad": 1.0})
        for priority in used:
            ax.barh(0, 0, color=colours[priority], label=f"priority {priority}")
        ax.set_yticks([])
        ax.set_ylim(-0.6, n - 0.4)
        ax.invert_yaxis()  # the first raised at the top
        axis(ax)
        ax.grid(axis="x", alpha=0.3)
        _legend(fig, ax, columns=4)
        out.append(_svg(fig))
    return "\n".join(out)
