"""The web app's page of one space: its values (the catalogue's entries that apply to the
kind of place, with a value or why there is none), its charts over the history, its
points and its advisories."""

from __future__ import annotations

import datetime as dt
from typing import Any
from urllib.parse import quote

from thermowarden.core import catalogue
from thermowarden.core.labels import point_tags, quantity_label, readable, state_text
from thermowarden.shell.web import plots
from thermowarden.shell.web.fragments import (
    FRESH,
    STALE,
    advisory_item,
    age_text,
    fmt_value,
    h,
    local,
)
from thermowarden.shell.web.layout import page
from thermowarden.shell.web.live import SiteDirectory, SpaceInfo
from thermowarden.shell.web.shown_values import SPACE_VALUES, applies, reference_label
from thermowarden.shell.web.users import Session


def _series(samples: list[dict[str, Any]], key: str) -> list[float | None]:
    return [s.get(key) for s in samples]


LINE_STYLES = (("#b3471d", ""), ("#1f5f8b", "6 4"), ("#6a3d9a", "2 3"), ("#9a6b00", "8 3 2 3"),
               ("#4f6d7a", "4 2"))
"""Colour and dash of a chart's lines in their order (colours told apart also in grey)."""


def space_charts(space: SpaceInfo, samples: list[dict[str, Any]], start: float, end: float,
                 tz: dt.tzinfo) -> str:
    """The catalogue's charts for the kind of space, each with the lines it draws (the
    comfort chart also with the space's comfort band, or its EN 16798-1 band)."""
    times = [s["t"] for s in samples]
    charts = []
    for chart in catalogue.CHARTS:
        if space.kind not in chart.kinds:
            continue
        drawn = [e for e in catalogue.drawn(chart.key) if applies(e, space)]
        if not drawn:
            continue
        lines = [plots.Line(e.label, _series(samples, e.name), *LINE_STYLES[k % len(LINE_STYLES)])
                 for k, e in enumerate(drawn)]
        bands = []
        if chart.key == "comfort" and space.kind == "indoor":
            bands.append(plots.Band("comfort band", _series(samples, "comfort_band_lower"),
                                    _series(samples, "comfort_band_upper"), "#2f7d32"))
        if chart.key == "comfort" and space.ventilation == "natural":
            bands.append(plots.Band("EN 16798-1 category II",
                                    _series(samples, "adaptive_en_II_lower"),
                                    _series(samples, "adaptive_en_II_upper"), "#4f6d7a"))
        charts.append(plots.Chart(catalogue.chart_title(chart), chart.unit, times, lines=lines,
                                  bands=bands))
    return '<div class="charts">' + "".join(plots.render(c, start, end, tz)
                                            for c in charts) + "</div>"


def points_table(c: dict[str, Any] | None) -> str:
    if c is None:
        return '<p class="muted">No readings evaluated yet.</p>'
    pts = c.get("points")
    if pts:
        rows = []
        for p in pts:
            fresh = p.get("fresh")
            status = '<span class="fresh">fresh</span>' if fresh else \
                '<span class="stale">stale</span>' if p.get("value") is not None else \
                '<span class="muted">no reading</span>'
            tags = point_tags(p.get("side"), p.get("height"), p.get("sensor"))
            rows.append(
                f'<tr><td data-label="Point">{h(quantity_label(p["quantity"]))}'
                f'{f" <small class=muted>({h(tags)})</small>" if tags else ""}</td>'
                f'<td class="num" data-label="Last value">{point_value(p)}</td>'
                f'<td data-label="Freshness">{status}</td>'
                f'<td data-label="Received">{h(age_text(p.get("age_s")))}</td></tr>')
        assumed = [f"{quantity_label(q)}: {v['assumed'].removeprefix('assumed: ')}"
                   for q, v in sorted(c.get("inputs", {}).items()) if v.get("assumed")]
        note = (f'<p class="note">Not measured here, assumed: {h("; ".join(assumed))}.</p>'
                if assumed else "")
        return ('<div class="scroll"><table class="fit"><thead><tr><th>Point</th>'
                '<th>Last value</th><th>Freshness</th><th>Received</th></tr></thead><tbody>'
                + "".join(rows) + "</tbody></table></div>" + note)
    rows = [f'<tr><td data-label="Input">{h(quantity_label(q))}</td>'
            f'<td class="num" data-label="Value">'
            f'{point_value({**v, "quantity": q}) if "value" in v else "–"}</td>'
            f'<td data-label="Freshness">'
            f'{h(v["assumed"]) if v.get("assumed") else FRESH if v.get("fresh") else STALE}'
            f"</td></tr>" for q, v in sorted(c.get("inputs", {}).items())]
    return ('<div class="scroll"><table class="fit"><thead><tr><th>Input</th><th>Value</th>'
            '<th>Freshness</th></tr></thead><tbody>' + "".join(rows) + "</tbody></table></div>")


def point_value(p: dict[str, Any]) -> str:
    """A point's last value: an equipment or occupancy state in words (``on``,
    ``lowered``), any other quantity as a number with its unit."""
    v = p.get("value")
    if isinstance(v, int | float) and not isinstance(v, bool):
        words = state_text(str(p.get("quantity", "")), float(v))
        if words is not None:
            return h(words)
    return fmt_value(p)


def space_page(directory: SiteDirectory, space: SpaceInfo, c: dict[str, Any] | None,
               live: list[dict[str, Any]], recent: list[dict[str, Any]],
               samples: list[dict[str, Any]], start: float, end: float,
               session: Session | None, tz: dt.tzinfo) -> str:
    tags = ([space.group] if space.group else []) + [space.kind] + (
        ["hot work"] if space.hot_work else []) + (
        ["natural ventilation"] if space.ventilation == "natural" else [])
    parts = [f'<h2>{h(space.name)}</h2><p class="note">{h(" · ".join(tags))}'
             + (f' · as of {local(c["at"], tz, "%d %b %H:%M")} · '
                f'{"occupied" if c.get("occupied") else "unoccupied"}' if c else "") + "</p>"]
    parts.append("<h2>Advisories</h2>")
    if live:
        parts.append('<ul class="adv">' + "".join(advisory_item(a, tz, False) for a in live)
                     + "</ul>")
    else:
        parts.append('<p class="muted">No live advisory.</p>')
    if recent:
        parts.append('<details><summary>Cleared in the last 24 hours '
                     f'({len(recent)})</summary><ul class="adv">'
                     + "".join(advisory_item(a, tz, False) for a in recent) + "</ul></details>")
    if c is not None:
        rows = []
        for e in SPACE_VALUES:
            key, label = e.name, e.label
            item = c["indices"].get(key)
            if item is None or not applies(e, space, item):
                continue
            if key == "wbgt_reference":
                label = reference_label(space)
            rows.append(f'<tr><td data-label="Index">{h(label)}</td>'
                        f'<td class="num bare" data-label="Value">{fmt_value(item)}</td>'
                        f'<td class="note method" data-label="Method">'
                        f'{h(readable(item.get("method", "")))}</td></tr>')
        # table.fit: on a phone each row stacks, so the method wraps instead of running
        # off the right edge
        parts.append('<h2>Conditions now</h2><div class="scroll"><table class="fit stack">'
                     '<thead><tr><th>Index</th><th>Value</th><th>Method</th></tr></thead>'
                     '<tbody>' + "".join(rows) + "</tbody></table></div>")
    parts.append("<h2>Last 24 hours</h2>" + space_charts(space, samples, start, end, tz))
    parts.append("<h2>Points</h2>" + points_table(c))
    return page(space.name, "".join(parts), directory, session, refresh=True,
                here=f"/spaces/{quote(space.id, safe='')}")
