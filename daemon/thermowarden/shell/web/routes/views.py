"""The HTML pages: the overview, a space's page (conditions, live and recent advisories,
the last day's plots) and an advisory's page (with its command forms)."""

from __future__ import annotations

from typing import Any

from starlette.concurrency import run_in_threadpool
from starlette.requests import Request
from starlette.responses import HTMLResponse, Response

from thermowarden.shell.web.advisory_page import advisory_page as advisory_html
from thermowarden.shell.web.context import WebContext
from thermowarden.shell.web.history import HISTORY_DEFAULT_S
from thermowarden.shell.web.layout import page
from thermowarden.shell.web.overview_page import Filters
from thermowarden.shell.web.overview_page import overview as overview_html
from thermowarden.shell.web.requests import cookie_session
from thermowarden.shell.web.space_page import space_page as space_html


async def overview(ctx: WebContext, request: Request) -> Response:
    filters = Filters.parse(request.query_params)
    html = overview_html(ctx.directory, ctx.view.conditions_of, ctx.view.live(),
                         cookie_session(ctx, request), ctx.tz, filters)
    return HTMLResponse(html)


async def space_page(ctx: WebContext, request: Request) -> Response:
    space = ctx.directory.space(request.path_params["space_id"])
    if space is None:
        return HTMLResponse(page("Not found", "<h2>No such space</h2>",
                                 ctx.directory, cookie_session(ctx, request)), 404)
    end = ctx.now()
    start = end - HISTORY_DEFAULT_S
    samples = await run_in_threadpool(ctx.reader.history, space.id, start, end + 1)
    events = await run_in_threadpool(ctx.reader.events, start, 1000, space.id)
    live = ctx.view.live(space.id)
    live_ids = {a["id"] for a in live}
    recent: dict[str, dict[str, Any]] = {}
    for e in events:
        a = e.get("advisory")
        if a and a["id"] not in live_ids:
            recent[a["id"]] = a
    html = space_html(ctx.directory, space, ctx.view.conditions_of(space.id), live,
                      list(reversed(recent.values())), samples, start, end,
                      cookie_session(ctx, request), ctx.tz)
    return HTMLResponse(html)


async def advisory_page(ctx: WebContext, request: Request) -> Response:
    advisory_id = request.path_params["advisory_id"]
    a, live = await run_in_threadpool(ctx.find_advisory, advisory_id)
    session = cookie_session(ctx, request)
    if a is None:
        return HTMLResponse(page("Not found", "<h2>No such advisory</h2>",
                                 ctx.directory, session), 404)
    return HTMLResponse(advisory_html(ctx.directory, a, live, session, ctx.tz,
                                      ctx.directory.max_shelve_s.get(a["rule"])))
