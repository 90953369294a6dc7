"""Small line charts as inline SVG, drawn on the server (no scripts, no fetched assets).

A chart has a time axis (local hours), one value axis, lines (gaps where a value is
missing) and optionally a shaded band between two series. It scales to the width of the
page through its viewBox, so it stays readable on a phone.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field
from html import escape

WIDTH = 640
HEIGHT = 240
LEFT, RIGHT, TOP, BOTTOM = 60, 12, 12, 26


@dataclass(frozen=True)
class Line:
    label: str
    values: list[float | None]
    colour: str
    dash: str = ""


@dataclass(frozen=True)
class Band:
    label: str
    lower: list[float | None]
    upper: list[float | None]
    colour: str


@dataclass
class Chart:
    title: str
    unit: str
    times: list[float]
    lines: list[Line] = field(default_factory=list)
    bands: list[Band] = field(default_factory=list)


def _nice_step(span: float) -> float:
    raw = span / 5.0
    mag = 10.0 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if m * mag >= raw:
            return m * mag
    return 10 * mag


def _runs(ts: list[float], vs: list[float | None]) -> list[list[tuple[float, float]]]:
    """Consecutive present values; a gap longer than 3 median steps breaks the line too."""
    steps = sorted(b - a for a, b in zip(ts, ts[1:], strict=False))
    gap = 3 * steps[len(steps) // 2] if steps else math.inf
    runs: list[list[tuple[float, float]]] = []
    cur: list[tuple[float, float]] = []
    last_t = -math.inf
    for t, v in zip(ts, vs, strict=True):
        if v is None or not math.isfinite(v) or t - last_t > gap:
            if cur:
                runs.append(cur)
            cur = []
        if v is not None and math.isfinite(v):
            cur.append((t, v))
        last_t = t
    if cur:
        runs.append(cur)
    return runs


def render(chart: Chart, start: float, end: float, tz: dt.tzinfo) -> str:
    """The chart as an ``<svg>`` element (a ``<figure>`` with its title and legend)."""
    values = [v for ln in chart.lines for v in ln.values if v is not None and math.isfinite(v)]
    values += [v for b in chart.bands for v in (*b.lower, *b.upper)
               if v is not None and math.isfinite(v)]
    legend = "".join(
        f'<span class="key"><svg width="18" height="8" aria-hidden="true"><line x1="0" y1="4" '
        f'x2="18" y2="4" stroke="{c}" stroke-width="3"{d}/></svg>{escape(label)}</span>'
        for label, c, d in ([(b.label, b.colour, "") for b in chart.bands]
                            + [(ln.label, ln.colour,
                                f' stroke-dasharray="{ln.dash}"' if ln.dash else "")
                               for ln in chart.lines]))
    head = f'<figure class="chart"><figcaption>{escape(chart.title)}' \
           f'{f" ({escape(chart.unit)})" if chart.unit else ""}</figcaption>'
    if not values or end <= start:
        return head + '<p class="muted">No stored values in this period yet.</p></figure>'
    lo, hi = min(values), max(values)
    if hi - lo < 1.0:
        lo, hi = lo - 0.5, hi + 0.5
    step = _nice_step(hi - lo)
    lo = math.floor(lo / step) * step
    hi = math.ceil(hi / step) * step
    pw, ph = WIDTH - LEFT - RIGHT, HEIGHT - TOP - BOTTOM

    def x(t: float) -> float:
        return LEFT + (t - start) / (end - start) * pw

    def y(v: float) -> float:
        return TOP + (hi - v) / (hi - lo) * ph

    parts = [f'<svg class="plot" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" '
             f'aria-label="{escape(chart.title)}" preserveAspectRatio="xMidYMid meet">']
    v = lo
    while v <= hi + step / 1000:
        yy = y(v)
        parts.append(f'<line x1="{LEFT}" y1="{yy:.1f}" x2="{WIDTH - RIGHT}" y2="{yy:.1f}" '
                     'class="grid"/>')
        # each value with its unit, as everywhere on the page
        label = f"{v:g}{'' if chart.unit in ('%', '') else ' '}{chart.unit}"
        parts.append(f'<text x="{LEFT - 4}" y="{yy + 4:.1f}" text-anchor="end">'
                     f'{escape(label)}</text>')
        v += step
    first = dt.datetime.fromtimestamp(start, tz).replace(minute=0, second=0, microsecond=0)
    hours = max(1, round((end - start) / 3600 / 8))
    tick = first
    while tick.timestamp() <= end:
        if tick.timestamp() >= start and tick.hour % hours == 0:
            xx = x(tick.timestamp())
            parts.append(f'<line x1="{xx:.1f}" y1="{TOP}" x2="{xx:.1f}" y2="{TOP + ph}" '
                         'class="grid"/>')
            parts.append(f'<text x="{xx:.1f}" y="{HEIGHT - 8}" text-anchor="middle">'
                         f'{tick:%H:%M}</text>')
        tick += dt.timedelta(hours=1)
    for b in chart.bands:
        pairs = [(t, lw, up) for t, lw, up in zip(chart.times, b.lower, b.upper, strict=True)
                 if lw is not None and up is not None]
        if pairs:
            top = " ".join(f"{x(t):.1f},{y(up):.1f}" for t, _, up in pairs)
            bottom = " ".join(f"{x(t):.1f},{y(lw):.1f}" for t, lw, _ in reversed(pairs))
            parts.append(f'<polygon points="{top} {bottom}" fill="{b.colour}" '
                         'fill-opacity="0.25" stroke="none"/>')
    for ln in chart.lines:
        dash = f' stroke-dasharray="{ln.dash}"' if ln.dash else ""
        for run in _runs(chart.times, ln.values):
            if len(run) == 1:
                t, val = run[0]
                parts.append(f'<circle cx="{x(t):.1f}" cy="{y(val):.1f}" r="2" '
                             f'fill="{ln.colour}"/>')
                continue
            pts = " ".join(f"{x(t):.1f},{y(val):.1f}" for t, val in run)
            parts.append(f'<polyline points="{pts}" fill="none" stroke="{ln.colour}" '
                         f'stroke-width="2"{dash}/>')
    parts.append(f'<rect x="{LEFT}" y="{TOP}" width="{pw}" height="{ph}" class="frame"/>')
    parts.append("</svg>")
    return head + "".join(parts) + f'<div class="legend">{legend}</div></figure>'
