"""The web page's HTML: overview, one space, one advisory, sign-in. Plain server-rendered
HTML with inline CSS and inline SVG charts; every value from outside is escaped here. No
scripts and no style attributes: the Content-Security-Policy (:data:`SECURITY_HEADERS`)
allows the one stylesheet by its hash."""

from __future__ import annotations

import base64
import datetime as dt
import hashlib
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from html import escape
from typing import Any
from urllib.parse import quote, urlencode

from thermowarden.core import catalogue
from thermowarden.core.labels import (
    COUNT_UNITS,
    event_words,
    point_tags,
    quantity_label,
    readable,
    state_text,
    value_label,
    value_unit,
)
from thermowarden.shell.web import plots
from thermowarden.shell.web.live import SiteDirectory, SpaceInfo
from thermowarden.shell.web.users import Session

REFRESH_S = 30
CSS = """
:root{--fg:#1d2327;--muted:#5d6870;--bg:#f6f7f8;--card:#fff;--line:#d5dade;
--low:#4f6d7a;--medium:#9a6b00;--high:#b3471d;--urgent:#a1002a;--ok:#2f7d32}
*{box-sizing:border-box}
body{margin:0;font:16px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;
color:var(--fg);background:var(--bg)}
header{background:#233440;color:#fff;padding:.6rem 1rem;display:flex;flex-wrap:wrap;
gap:.4rem 1rem;align-items:baseline;justify-content:space-between}
header a{color:#fff}
header h1{font-size:1.15rem;margin:0}
main{max-width:70rem;margin:0 auto;padding:.8rem}
h2{font-size:1.1rem;margin:1.2rem 0 .5rem}
a{color:#1f5f8b}
.note{font-size:.85rem;color:var(--muted)}
.muted{color:var(--muted)}
.cards{display:grid;grid-template-columns:repeat(auto-fill,minmax(min(16rem,100%),1fr));
gap:.7rem}
.card{background:var(--card);border:1px solid var(--line);border-radius:.5rem;padding:.7rem}
.card h3{margin:0 0 .3rem;font-size:1rem}
.kv{display:grid;grid-template-columns:auto auto;gap:.1rem .8rem;margin:0}
.kv dt{color:var(--muted)}
.kv dd{margin:0;text-align:right;font-variant-numeric:tabular-nums;overflow-wrap:anywhere}
.badge{display:inline-block;border-radius:.3rem;padding:0 .4rem;font-size:.8rem;
color:#fff;background:var(--low);vertical-align:middle}
.badge.medium{background:var(--medium)}.badge.high{background:var(--high)}
.badge.urgent{background:var(--urgent)}.badge.state{background:#56606a}
.badge.plain{background:#e4e8eb;color:var(--fg)}
ul.adv{list-style:none;margin:0;padding:0}
ul.adv li{background:var(--card);border:1px solid var(--line);border-left:.35rem solid
var(--low);border-radius:.4rem;padding:.5rem .7rem;margin:0 0 .5rem}
ul.adv li.medium{border-left-color:var(--medium)}ul.adv li.high{border-left-color:var(--high)}
ul.adv li.urgent{border-left-color:var(--urgent)}
table{border-collapse:collapse;width:100%;background:var(--card)}
th,td{border-bottom:1px solid var(--line);padding:.3rem .4rem;text-align:left;
vertical-align:top}
td.num{text-align:right;font-variant-numeric:tabular-nums}
.scroll{overflow-x:auto}
.stale{color:var(--high);font-weight:600}.fresh{color:var(--ok)}
.charts{display:grid;grid-template-columns:repeat(auto-fill,minmax(min(26rem,100%),1fr));
gap:.7rem}
figure.chart{margin:0;background:var(--card);border:1px solid var(--line);
border-radius:.5rem;padding:.5rem}
figcaption{font-weight:600;margin-bottom:.2rem}
svg.plot{width:100%;height:auto;display:block}
svg.plot text{font-size:11px;fill:#4a545c}
svg.plot .grid{stroke:#e3e7ea;stroke-width:1}
svg.plot .frame{fill:none;stroke:#b7c0c6}
.legend{font-size:.8rem;color:var(--muted);display:flex;flex-wrap:wrap;gap:.2rem .8rem}
.key svg{margin-right:.25rem;vertical-align:middle}
form.act{background:var(--card);border:1px solid var(--line);border-radius:.5rem;
padding:.7rem;margin:0 0 .7rem}
form.act label{display:block;margin:.3rem 0}
input,select,textarea,button{font:inherit;max-width:100%}
input[type=text],input[type=password],textarea{width:100%;padding:.35rem}
button{padding:.4rem .9rem;border-radius:.35rem;border:1px solid #1f5f8b;
background:#1f5f8b;color:#fff;cursor:pointer}
.flash{background:#e8f2e8;border:1px solid #9cc59e;padding:.5rem .7rem;border-radius:.4rem}
.flash.error{background:#fbeaea;border-color:#d79a9a}
.cautions li{margin:.2rem 0}
form.inline{display:inline}
button.small{padding:.1rem .5rem}
form.search{display:flex;flex-wrap:wrap;gap:.4rem .6rem;align-items:flex-end;
background:var(--card);border:1px solid var(--line);border-radius:.5rem;padding:.6rem}
form.search .field{display:flex;flex-direction:column;font-size:.85rem;color:var(--muted)}
form.search .grow{flex:1 1 12rem}
form.search input[type=search]{width:100%;padding:.35rem}
table.rollup tr.top td{font-weight:600}
table.rollup tr.sub td:first-child{padding-left:1.2rem}
nav.pager{display:flex;flex-wrap:wrap;gap:.3rem .6rem;margin:.8rem 0}
nav.pager .here{font-weight:700}
@media (max-width:40rem){
table.fit thead{display:none}
table.fit tr{display:block;border-bottom:1px solid var(--line);padding:.2rem 0}
table.fit td{display:flex;justify-content:space-between;gap:.6rem;border:0;
padding:.1rem .4rem;text-align:right}
table.fit td::before{content:attr(data-label);color:var(--muted);text-align:left}
table.fit tr.sub td:first-child{padding-left:.4rem}
table.fit td.method{flex-direction:column;gap:0;text-align:left}
table.stack tr{display:flex;flex-wrap:wrap;align-items:baseline;column-gap:.6rem}
table.stack td:first-child{flex:1 1 10rem;text-align:left;font-weight:600}
table.stack td:first-child::before,table.stack td.bare::before,
table.stack td.method::before{content:none}
table.stack td.method{flex:1 1 100%;font-size:.8rem}
}
"""

SECURITY_HEADERS: dict[str, str] = {
    # no scripts, no plug-ins, no frames; only the page's own stylesheet (by its hash),
    # forms back to this site, and no framing by other sites (clickjacking); the page
    # keeps working with all of it
    "Content-Security-Policy": (
        "default-src 'none'; style-src 'sha256-"
        + base64.b64encode(hashlib.sha256(CSS.encode("utf-8")).digest()).decode("ascii")
        + "'; img-src 'self' data:; form-action 'self'; frame-ancestors 'none'; "
        "base-uri 'none'"),
    "X-Frame-Options": "DENY",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "same-origin",
}
"""Sent with every response of the web page and API (W3C CSP Level 3, including
``frame-ancestors``; ``X-Frame-Options`` for browsers without it)."""

OVERVIEW_VALUES = catalogue.shown("overview")
"""On every space's card: the catalogue's overview entries (one for a kind of place only
with a value)."""
SPACE_VALUES = catalogue.shown("space")
"""On the space's page, with a value or why there is none."""
CAUTION = ("Advisory only: thermowarden never switches or moves anything. Heat-stress figures "
           "are screening values; follow local regulations and a qualified occupational "
           "hygienist.")


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


def page(title: str, body: str, directory: SiteDirectory, session: Session | None,
         refresh: bool = False, here: str = "/") -> str:
    return page_html(title, body, directory, session, refresh, here)


def page_html(title: str, body: str, directory: SiteDirectory, session: Session | None,
              refresh: bool = False, here: str = "/") -> str:
    who = (f'{h(session.user.name)} <form method="post" action="/logout" class="inline">'
           f'<input type="hidden" name="csrf" value="{h(session.csrf)}">'
           '<button type="submit" class="small">Sign out</button></form>'
           if session else f'<a href="/login?next={quote(here, safe="")}">Sign in</a>')
    flash = ""
    if session and session.flash:
        msgs, session.flash[:] = list(session.flash), []
        flash = "".join(
            f'<p class="flash{" error" if m.startswith("!") else ""}" role="status">'
            f'{h(m.lstrip("!"))}</p>' for m in msgs)
    meta = f'<meta http-equiv="refresh" content="{REFRESH_S}">' if refresh else ""
    return (f'<!doctype html><html lang="en"><head><meta charset="utf-8">'
            f'<meta name="viewport" content="width=device-width, initial-scale=1">{meta}'
            f'<title>{h(title)} · thermowarden</title><style>{CSS}</style></head><body>'
            f'<header><h1><a href="/">{h(directory.site_name)}</a></h1>'
            f'<span class="who">{who}</span></header><main>{flash}{body}'
            f'<p class="note">{h(CAUTION)}</p></main></body></html>')


def advisory_item(a: dict[str, Any], tz: dt.tzinfo, with_space: bool = True) -> str:
    space = f'{h(a["space"]["name"])} · ' if with_space else ""
    return (f'<li class="{h(a["priority"])}">{badge(a["priority"])} '
            f'{state_badge(shown_state(a))} '
            f'<a href="/advisories/{quote(a["id"], safe="")}">{h(a["title"])}</a>'
            f'<div class="note">{space}{h(a["audience"])} · raised '
            f'{local(a["raised_at"], tz)}</div></li>')


PAGE_SIZE = 50
"""Spaces per page of the overview, and the most live advisories it lists at once."""
AUDIENCES = ("facilities", "safety", "integrator")
PRIORITIES = ("urgent", "high", "medium", "low")
STATES = ("active", "acknowledged", "shelved")


@dataclass(frozen=True)
class Filters:
    """The overview's search: words of a space's name (or id, building, floor), where it is
    (``north``, ``north/f2``, ``/yard`` for an area of the site), and the audience, priority
    and state of its live advisories; and the page of spaces shown."""

    q: str = ""
    where: str = ""
    audience: str = ""
    priority: str = ""
    state: str = ""
    page: int = 1

    @classmethod
    def parse(cls, params: Mapping[str, str]) -> Filters:
        def pick(name: str, allowed: tuple[str, ...]) -> str:
            v = params.get(name, "")
            return v if v in allowed else ""
        try:
            page = max(1, min(int(params.get("page", "1")), 1_000_000))
        except ValueError:
            page = 1
        return cls(params.get("q", "").strip()[:100], params.get("where", "").strip()[:200],
                   pick("audience", AUDIENCES), pick("priority", PRIORITIES),
                   pick("state", STATES), page)

    def url(self, **change: object) -> str:
        values = {**self.__dict__, **change}
        if values.get("page") == 1:
            values.pop("page")
        query = urlencode({k: v for k, v in values.items() if v not in ("", None)})
        return "/?" + query if query else "/"

    @property
    def on_advisories(self) -> bool:
        return bool(self.audience or self.priority or self.state)

    def advisory_matches(self, a: dict[str, Any]) -> bool:
        return ((not self.audience or a["audience"] == self.audience)
                and (not self.priority or a["priority"] == self.priority)
                and (not self.state or a["state"] == self.state))

    def space_matches(self, s: SpaceInfo) -> bool:
        if self.where:
            b, _, lv = self.where.partition("/")
            if (b or None) != s.building and not (b == "" and s.building is None):
                return False
            if lv and s.level != lv:
                return False
        if self.q:
            return all(word in s.search for word in self.q.lower().split())
        return True


def _options(name: str, label: str, values: list[tuple[str, str]], chosen: str) -> str:
    opts = "".join(f'<option value="{h(v)}"{" selected" if v == chosen else ""}>{h(t)}</option>'
                   for v, t in [("", f"any {label}"), *values])
    return (f'<label class="field"><span>{h(label.capitalize())}</span>'
            f'<select name="{name}" id="filter-{name}">{opts}</select></label>')


def search_form(directory: SiteDirectory, f: Filters) -> str:
    places = []
    for lv in directory.levels:
        key = f"{lv.building or ''}/{lv.level}" if lv.level is not None else (lv.building or "")
        text = lv.label if lv.level is None or lv.building is None else f"  {lv.label}"
        if lv.level is not None and lv.building is not None:
            parent = next((x.label for x in directory.levels
                           if x.building == lv.building and x.level is None), lv.building)
            text = f"{parent} · {lv.label}"
        places.append((key, text))
    where = _options("where", "place", places, f.where) if places else ""
    return ('<form id="search" class="search" method="get" action="/">'
            '<label class="field grow"><span>Search spaces</span>'
            f'<input type="search" name="q" id="q" value="{h(f.q)}" '
            'placeholder="name, room or floor"></label>'
            + where
            + _options("audience", "audience", [(a, a) for a in AUDIENCES], f.audience)
            + _options("priority", "priority", [(p, p) for p in PRIORITIES], f.priority)
            + _options("state", "state", [(x, x) for x in STATES], f.state)
            + '<button type="submit" id="search-go">Show</button>'
            + (' <a href="/">clear</a>' if f != Filters() else "") + "</form>")


def rollup(directory: SiteDirectory, counts: dict[int, list[int]], f: Filters) -> str:
    """Live advisories per building and floor (counts by priority), each row a link to
    the spaces there."""
    if not directory.levels:
        return ""
    head = "".join(f"<th class=num>{h(p.capitalize())}</th>" for p in PRIORITIES)
    rows = []
    for lv in directory.levels:
        total = [0, 0, 0, 0]
        for i in lv.spaces:
            c = counts.get(i)
            if c is not None:
                for k in range(4):
                    total[k] += c[k]
        key = f"{lv.building or ''}/{lv.level}" if lv.level is not None else (lv.building or "")
        top = lv.level is None or lv.building is None
        link = f'<a href="{h(f.url(where=key, page=1))}">{h(lv.label)}</a>'
        cells = "".join(
            f'<td class="num" data-label="{h(p.capitalize())}">'
            + (f'<span class="badge {p}">{n}</span>' if n else '<span class="muted">0</span>')
            + "</td>" for p, n in zip(PRIORITIES, total, strict=True))
        rows.append(f'<tr class="{"top" if top else "sub"}" data-where="{h(key)}">'
                    f'<td data-label="Where">{"" if top else "↳ "}{link}</td>'
                    f'<td class="num" data-label="Spaces">{len(lv.spaces)}</td>{cells}</tr>')
    return ('<h2>By building and floor</h2><table class="fit rollup"><thead><tr>'
            f'<th>Where</th><th class=num>Spaces</th>{head}</tr></thead><tbody>'
            + "".join(rows) + "</tbody></table>")


def space_card(s: SpaceInfo, c: dict[str, Any] | None, live: list[dict[str, Any]],
               tz: dt.tzinfo) -> str:
    rows = []
    if c is not None:
        idx = c["indices"]
        for e in OVERVIEW_VALUES:
            key, label = e.name, e.label
            item = idx.get(key)
            if item is None or (item.get("value") is None and e.place) \
                    or not applies(e, s, item):
                continue
            if key == "wbgt_reference":
                label = reference_label(s)
            rows.append(f"<dt>{h(label)}</dt><dd>{fmt_value(item, compact=True)}</dd>")
        when = (f'as of {local(c["at"], tz)} · '
                f'{"occupied" if c.get("occupied") else "unoccupied"}')
    else:
        when = "not evaluated yet"
    tags = ([s.group] if s.group else []) + [s.kind] + (["hot work"] if s.hot_work else []) + (
        ["natural ventilation"] if s.ventilation == "natural" else [])
    # the count in the colour of the most urgent of them (a medium advice is not red)
    top = min((PRIORITIES.index(a["priority"]) for a in live
               if a.get("priority") in PRIORITIES), default=None)
    alert = (f' <span class="badge {PRIORITIES[top] if top is not None else "low"}">'
             f'{len(live)} live</span>' if live else "")
    return (f'<section class="card" data-space="{h(s.id)}"><h3><a href="/spaces/'
            f'{quote(s.id, safe="")}">{h(s.name)}</a>{alert}</h3>'
            f'<div class="note">{h(" · ".join(tags))} · {h(when)}</div>'
            f'<dl class="kv">{"".join(rows)}</dl></section>')


def pager(f: Filters, total: int) -> str:
    pages = max(1, math.ceil(total / PAGE_SIZE))
    if pages == 1:
        return ""
    page = min(f.page, pages)
    shown = sorted({1, pages, *range(max(1, page - 2), min(pages, page + 2) + 1)})
    links = []
    last = 0
    for n in shown:
        if n - last > 1:
            links.append('<span class="muted">…</span>')
        links.append(f'<span class="here">{n}</span>' if n == page
                     else f'<a href="{h(f.url(page=n))}">{n}</a>')
        last = n
    prev = f'<a rel="prev" href="{h(f.url(page=page - 1))}">Previous</a>' if page > 1 else ""
    nxt = f'<a rel="next" href="{h(f.url(page=page + 1))}">Next</a>' if page < pages else ""
    return f'<nav class="pager" aria-label="pages">{prev} {" ".join(links)} {nxt}</nav>'


def overview(directory: SiteDirectory, conditions_of: Callable[[str], dict[str, Any] | None],
             live: list[dict[str, Any]], session: Session | None, tz: dt.tzinfo,
             f: Filters | None = None) -> str:
    """The overview: search, the roll-up by building and floor, the live advisories and
    one page of the spaces that match. Work and size grow with the page, not the site:
    only the counts visit every space."""
    f = f or Filters()
    spaces = directory.spaces
    by_space: dict[str, list[dict[str, Any]]] = {}
    for a in live:
        if f.advisory_matches(a):
            by_space.setdefault(a["space"]["id"], []).append(a)
    counts: dict[int, list[int]] = {}
    rank = {p: k for k, p in enumerate(PRIORITIES)}
    for sid, items in by_space.items():
        info = directory.space(sid)
        if info is None:
            continue
        c = counts.setdefault(info.index, [0, 0, 0, 0])
        for a in items:
            c[rank.get(a["priority"], 3)] += 1
    chosen = [s for s in spaces if f.space_matches(s)
              and (not f.on_advisories or s.id in by_space)]
    chosen_ids = {s.id for s in chosen}
    shown_live = [a for a in live if a["space"]["id"] in chosen_ids and f.advisory_matches(a)]
    parts = [search_form(directory, f), rollup(directory, counts, f),
             f'<h2>Live advisories <span class="muted">({len(shown_live)})</span></h2>']
    if shown_live:
        parts.append('<ul class="adv">' + "".join(advisory_item(a, tz)
                                                 for a in shown_live[:PAGE_SIZE]) + "</ul>")
        if len(shown_live) > PAGE_SIZE:
            parts.append(f'<p class="note">The {PAGE_SIZE} most urgent of {len(shown_live)} '
                         "are listed: narrow the search, or pick a building or floor.</p>")
    else:
        parts.append('<p class="muted">None at the moment.</p>' if f == Filters()
                     else '<p class="muted">None matches.</p>')
    pages = max(1, math.ceil(len(chosen) / PAGE_SIZE))
    page = min(f.page, pages)
    first = (page - 1) * PAGE_SIZE
    window = chosen[first:first + PAGE_SIZE]
    what = f"{len(chosen)} of {len(spaces)}" if len(chosen) != len(spaces) else str(len(spaces))
    span = f", {first + 1}-{first + len(window)} shown" if pages > 1 else ""
    parts.append(f'<h2>Spaces <span class="muted" id="space-count">({what}{span})</span></h2>')
    if window:
        parts.append('<div class="cards">' + "".join(
            space_card(s, conditions_of(s.id), list(by_space.get(s.id, ())), tz)
            for s in window) + "</div>")
    else:
        parts.append('<p class="muted">No space matches.</p>')
    parts.append(pager(f, len(chosen)))
    here = f.url()
    return page_html("Overview", "".join(parts), directory, session, refresh=True, here=here)


INDOOR_FAMILIES = frozenset({"comfort", "local_discomfort", "adaptive"})
"""Families of indices for people indoors (ISO 7730, EN 16798-1): for comfort."""


def places_of(space: SpaceInfo) -> frozenset[str]:
    """The kinds of place (catalogue.PLACES) a space is: hot work where people work in the
    heat, and comfort indoors or outdoor heat outside."""
    kind = catalogue.OUTDOOR if space.kind == "outdoor" else catalogue.COMFORT
    return frozenset({kind, catalogue.HOT_WORK} if space.hot_work else {kind})


def applies(e: catalogue.Index, space: SpaceInfo, item: dict[str, Any] | None = None
            ) -> bool:
    """Whether a space's page shows this index: the WBGT and everything assessed against
    its references only where people work in the heat (ISO 7243 is for workers, not for an
    office or a garden); an index without a value only where it is meant to apply, with the
    reason there is none (a PMV that needs an air speed in an office), not in a kind of
    place it is not for (no "PMV -, applies to indoor spaces" for a garden)."""
    if e.place == catalogue.HOT_WORK and not space.hot_work:
        return False
    if item is None or item.get("value") is not None:
        return True
    place = e.place or (catalogue.COMFORT if e.family in INDOOR_FAMILIES else "")
    return not place or place in places_of(space)


def reference_label(space: SpaceInfo) -> str:
    """The WBGT reference of the space's own workers, named as configured."""
    return ("WBGT reference (acclimatised)" if space.acclimatised
            else "WBGT reference (not acclimatised)")


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


def advisory_page(directory: SiteDirectory, a: dict[str, Any], live: bool,
                  session: Session | None, tz: dt.tzinfo, max_shelve_s: float | None) -> str:
    space = a["space"]
    parts = [f'<h2>{h(a["title"])}</h2><p>{badge(a["priority"])} '
             f'{state_badge(shown_state(a))} '
             f'<span class="badge plain">{h(a["audience"])}</span> '
             f'<a href="/spaces/{quote(space["id"], safe="")}">{h(space["name"])}</a></p>',
             f'<p class="note">raised {local(a["raised_at"], tz, "%d %b %H:%M")} · updated '
             f'{local(a["updated_at"], tz, "%H:%M")}'
             + (f' · cleared {local(a["cleared_at"], tz, "%H:%M")}' if a.get("cleared_at")
                else "") + (" · chattering (held active)" if a.get("chattering") else "")
             + "</p>",
             f'<h2>{"What it advised" if a.get("cleared_at") else "What to do"}</h2>'
             f'<p class="advice">{h(a["advice"])}</p>',
             f'<p class="note">{h(a["rationale"])}</p>']
    if a.get("numbers"):
        # the numbers are those of the texts (numbers_at); a clearing adds its own values
        history = a.get("history") or []
        cleared = (history[-1].get("values") if a.get("cleared_at") and history
                   and history[-1].get("event") == "cleared" else None)
        shown = (f'At {local(a["numbers_at"], tz, "%d %b %H:%M")}' if a.get("numbers_at")
                 else "Said")
        rows = "".join(
            f'<tr><td data-label="Value">{h(value_label(k))}</td>'
            f'<td class="num" data-label="{h(shown)}">{fmt_value(with_unit(k, v))}</td>'
            + (f'<td class="num" data-label="At clearing">'
               f'{fmt_value(_at_clearing(with_unit(k, v), cleared.get(k)))}</td>'
               if cleared is not None else "")
            + f'<td class="num" data-label="Threshold">{_threshold(with_unit(k, v))}</td>'
            f'<td class="note method" data-label="Method">'
            f'{h(readable(v.get("method", "")))}</td></tr>'
            for k, v in a["numbers"].items())
        parts.append('<h2>The numbers</h2><div class="scroll"><table class="fit stack">'
                     f'<thead><tr><th>Value</th><th>{h(shown)}</th>'
                     + ("<th>At clearing</th>" if cleared is not None else "")
                     + '<th>Threshold</th><th>Method</th></tr></thead><tbody>'
                     + rows + "</tbody></table></div>")
    if a.get("benefit"):
        parts.append('<h2>Expected benefit</h2><dl class="kv">' + "".join(
            f'<dt>{h(value_label(k))}</dt><dd>{fmt_value(with_unit(k, v))}</dd>'
            for k, v in a["benefit"].items())
            + "</dl>")
    # where it stands, in the order it happened: acknowledged by a person, then what the
    # sensors show of the advice carried out
    parts.append("<h2>Where it stands</h2>")
    if a.get("acknowledged"):
        ack = a["acknowledged"]
        parts.append(f'<p>Acknowledged by <strong>{h(ack.get("by"))}</strong> at '
                     f'{local(ack.get("at"), tz)}'
                     + (f': {h(ack["note"])}' if ack.get("note") else "") + "</p>")
    parts.append(_effect(a, directory.follows(a.get("rule", "")), tz))
    if a.get("shelved"):
        sh = a["shelved"]
        parts.append(f'<p>Shelved by <strong>{h(sh.get("by"))}</strong> until '
                     f'{local(sh.get("until"), tz)}: {h(sh.get("reason", ""))}</p>')
    if a.get("cautions"):
        parts.append('<h2>Cautions</h2><ul class="cautions">'
                     + "".join(f"<li>{h(c)}</li>" for c in a["cautions"]) + "</ul>")
    if live:
        info = directory.space(a["space"]["id"])
        place = (info.building or info.area) if info is not None else None
        parts.append(_actions(a, session, max_shelve_s, place))
    hist = "".join(
        f'<tr><td>{local(e.get("at"), tz, "%d %b %H:%M")}</td>'
        f'<td>{h(event_words(str(e.get("event", ""))))}</td>'
        f'<td>{h(e.get("by", ""))}</td><td>'
        f'{h(e.get("note") or e.get("reason") or "")}</td></tr>'
        for e in reversed(a.get("history", [])))
    parts.append('<h2>History</h2><div class="scroll"><table><thead><tr><th>When</th>'
                 '<th>Event</th><th>By</th><th>Note</th></tr></thead><tbody>' + hist
                 + "</tbody></table></div>")
    return page(a["title"], "".join(parts), directory, session,
                here=f"/advisories/{quote(a['id'], safe='')}")


def with_unit(name: str, item: dict[str, Any]) -> dict[str, Any]:
    """``item`` with the unit a person reads for value ``name`` where it gives none."""
    if item.get("unit"):
        return item
    return {**item, "unit": value_unit(name)}


def _at_clearing(said: dict[str, Any], value: Any) -> dict[str, Any]:
    """A number's value at the clearing, in the unit of the advisory's number."""
    return {"value": value, "unit": said.get("unit", ""), "reason": "not known at clearing"}


def _effect(a: dict[str, Any], followed: bool, tz: dt.tzinfo) -> str:
    """Whether the advice was acted on and what it did (effectiveness). ``followed``: the
    rule says how the sensors show its advice carried out (``acted_on``); for one that
    does not, the page claims nothing about it."""
    acted = a.get("acted_on")
    if not acted:
        if a.get("cleared_at"):
            return '<p class="muted">The condition cleared.</p>'
        if not followed:
            return ('<p class="muted">The sensors here cannot show whether this advice was '
                    "carried out; it stays live until the condition clears.</p>")
        return ('<p class="muted">The sensors do not show the advice carried out yet; it '
                "stays live until the condition clears.</p>")
    after = acted.get("cleared_after")
    mins = acted.get("cleared_after_min")
    text = f'Acted on at {local(acted.get("at"), tz)}'
    if acted.get("minutes_after_raised") is not None:
        text += f' ({acted["minutes_after_raised"]:.0f} min after it was raised)'
    if after:
        text += "; the condition cleared afterwards" + (
            f" ({mins:.0f} min later)" if isinstance(mins, int | float) else "") + "."
    elif after is False:
        text += "; the condition did not clear afterwards."
    else:
        text += "; waiting for its effect."
    helped = acted.get("helped")
    if helped is not None:
        text += " It helped within the expected time." if helped else \
            " It did not help within the expected time."
    out = f"<p>{h(text)}</p>"
    effect = acted.get("effect")
    if effect:
        unit = effect.get("unit") or value_unit(str(effect.get("quantity", "")))
        label = value_label(str(effect.get("quantity", "")))
        # a value without a unit (PMV) is named in each row: "PMV when acted on"
        name = "" if unit not in ("", "1") else label.split(",")[0].split(" (")[0] + " "
        rows = [(f"{name}when acted on", effect.get("value_then")),
                (f"{name}predicted", effect.get("predicted"))]
        rows += [(f'{name}{c["after_min"]:g} min later', c.get("value"))
                 for c in effect.get("checks", [])]
        out += (f'<div class="scroll"><table><thead><tr>'
                f'<th>{h(label)}'
                '</th><th>Value</th></tr></thead><tbody>'
                + "".join(f'<tr><td>{h(label)}</td><td class="num">'
                          f'{fmt_value({"value": v, "unit": unit})}</td></tr>'
                          for label, v in rows) + "</tbody></table></div>")
    return out


def _threshold(v: dict[str, Any]) -> str:
    if v.get("threshold") is None:
        return "–"
    return fmt_value({"value": v["threshold"], "unit": v.get("unit", "")})


def _actions(a: dict[str, Any], session: Session | None, max_shelve_s: float | None,
             place: str | None = None) -> str:
    if session is None:
        return ('<h2>Act on it</h2><p><a href="/login?next=/advisories/'
                f'{quote(a["id"], safe="")}">Sign in</a> to acknowledge or shelve.</p>')
    if a["audience"] not in session.user.audiences:
        return (f'<h2>Act on it</h2><p class="muted">Only people of the {h(a["audience"])} '
                "audience may acknowledge or shelve this advisory.</p>")
    if not session.user.may_act(a["audience"], place):
        return ('<h2>Act on it</h2><p class="muted">Only people of the '
                f'{h(a["audience"])} audience for {h(place or "this space")} may acknowledge '
                "or shelve this advisory.</p>")
    base = f'/advisories/{quote(a["id"], safe="")}'
    csrf = f'<input type="hidden" name="csrf" value="{h(session.csrf)}">'
    out = ["<h2>Act on it</h2>"]
    state = a["state"]
    if state == "active":
        out.append(f'<form class="act" method="post" action="{base}/acknowledge">{csrf}'
                   '<label>Note (optional) <input type="text" name="note" maxlength="1000">'
                   '</label><button type="submit" id="acknowledge">Acknowledge</button>'
                   "</form>")
    if state in ("active", "acknowledged"):
        limit = int(max_shelve_s or 3600)
        options = [m for m in (5, 15, 30, 60, 120, 240, 480, 1440) if m * 60 <= limit] or [
            max(1, limit // 60)]
        opts = "".join(f'<option value="{m * 60}">{m} min</option>' for m in options)
        out.append(f'<form class="act" method="post" action="{base}/shelve">{csrf}'
                   '<label>Reason <input type="text" name="reason" required maxlength="1000">'
                   f'</label><label>For <select name="duration_s">{opts}</select></label>'
                   f'<p class="note">This rule may be shelved for at most {limit // 60} min.'
                   '</p><button type="submit" id="shelve">Shelve</button></form>')
    if state == "shelved":
        out.append(f'<form class="act" method="post" action="{base}/unshelve">{csrf}'
                   '<label>Note (optional) <input type="text" name="note" maxlength="1000">'
                   '</label><button type="submit" id="unshelve">Unshelve</button></form>')
    return "".join(out)


def login_page(directory: SiteDirectory, next_url: str, error: str | None,
               enabled: bool) -> str:
    if not enabled:
        body = ('<h2>Sign in</h2><p class="muted">No users are configured for this service '
                "(web.users_file): the page is read-only.</p>")
    else:
        err = f'<p class="flash error">{h(error)}</p>' if error else ""
        body = (f'<h2>Sign in</h2>{err}<form class="act" method="post" action="/login">'
                f'<input type="hidden" name="next" value="{h(next_url)}">'
                '<label>Name <input type="text" name="name" autocomplete="username" required>'
                '</label><label>Password <input type="password" name="password" '
                'autocomplete="current-password" required></label>'
                '<button type="submit" id="sign-in">Sign in</button></form>')
    return page("Sign in", body, directory, None)
