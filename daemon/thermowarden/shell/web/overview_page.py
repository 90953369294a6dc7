"""The web app's overview page: every space as a card (its overview values and the priority
of its live advisories), a roll-up by building and floor, the live advisories, and the
search, filters and pages that narrow a large site."""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any
from urllib.parse import quote, urlencode

from thermowarden.shell.web.fragments import advisory_item, fmt_value, h, local
from thermowarden.shell.web.layout import page_html
from thermowarden.shell.web.live import SiteDirectory, SpaceInfo
from thermowarden.shell.web.shown_values import OVERVIEW_VALUES, applies, reference_label
from thermowarden.shell.web.users import Session

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
