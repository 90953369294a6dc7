"""Pieces of HTML the web app's pages share: escaping (every value from outside is escaped
with :func:`h`), times in the site's zone, a value with its unit or why there is none, the
age of a reading, priority and state badges, and one advisory in a list."""

from __future__ import annotations

import datetime as dt
import math
from html import escape
from typing import Any
from urllib.parse import quote

from thermowarden.core.labels import COUNT_UNITS, readable

FRESH = '<span class="fresh">fresh</span>'
STALE = '<span class="stale">stale</span>'


def h(v: object) -> str:
    return escape(str(v), quote=True)


def parse_iso(s: str) -> float:
    return dt.datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


def local(s: str | None, tz: dt.tzinfo, fmt: str = "%H:%M") -> str:
    if not s:
        return "–"
    return dt.datetime.fromtimestamp(parse_iso(s), tz).strftime(fmt)


def fmt_value(item: dict[str, Any] | None, compact: bool = False) -> str:
    """An index or input value with its unit; a dash with the reason when absent (the
    reason only as a tooltip when ``compact``)."""
    if not item:
        return '<span class="muted">–</span>'
    v = item.get("value")
    unit = item.get("unit") or ""
    if unit in ("1", "category"):
        unit = ""
    if v is None:
        reason = readable(item.get("reason") or "no fresh value")
        if compact:
            return f'<span class="muted" title="{h(reason)}">–</span>'
        return f'<span class="muted" title="{h(reason)}">– <small>({h(reason)})</small></span>'
    if isinstance(v, bool):
        text = "yes" if v else "no"
    elif unit in COUNT_UNITS and isinstance(v, int | float):
        n = round(v)
        return h(f"{n} {unit if n != 1 else unit[:-1]}")
    elif isinstance(v, float):
        text = f"{v:.3f}" if unit == "kg/kg" else f"{v:.1f}" if abs(v) >= 0.1 or v == 0 \
            else f"{v:.2f}"
    else:
        text = str(v)
    sep = "" if unit in ("%", "") else " "
    return f"{h(text)}{sep}{h(unit)}"


def age_text(age_s: float | None) -> str:
    if age_s is None or not math.isfinite(age_s):
        return "never"
    if age_s < 1:  # a reading stamped a moment ahead of the service's clock
        return "just now"
    if age_s < 90:
        return f"{age_s:.0f} s ago"
    if age_s < 5400:
        return f"{age_s / 60:.0f} min ago"
    return f"{age_s / 3600:.1f} h ago"


def badge(priority: str) -> str:
    return f'<span class="badge {h(priority)}">{h(priority)}</span>'


def state_badge(state: str) -> str:
    return f'<span class="badge state">{h(state)}</span>'


def shown_state(a: dict[str, Any]) -> str:
    """Where an advisory stands, in words: its lifecycle state, and once the sensors show
    the advice carried out (``acted_on``) while it waits to clear, that instead of
    ``active`` (``acted on, waiting for its effect``)."""
    state = str(a.get("state", ""))
    acted = a.get("acted_on")
    if a.get("cleared_at") or not acted or state == "shelved":
        return state
    if acted.get("helped") is False:
        return "acted on, no effect yet" if state == "active" else f"{state}, no effect yet"
    return ("acted on, waiting for its effect" if state == "active"
            else f"{state}, acted on")


def advisory_item(a: dict[str, Any], tz: dt.tzinfo, with_space: bool = True) -> str:
    space = f'{h(a["space"]["name"])} · ' if with_space else ""
    return (f'<li class="{h(a["priority"])}">{badge(a["priority"])} '
            f'{state_badge(shown_state(a))} '
            f'<a href="/advisories/{quote(a["id"], safe="")}">{h(a["title"])}</a>'
            f'<div class="note">{space}{h(a["audience"])} · raised '
            f'{local(a["raised_at"], tz)}</div></li>')
