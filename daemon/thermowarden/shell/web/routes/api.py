"""The read API under ``/api`` (described by ``schemas/openapi.yaml``): spaces, their
conditions and history, live advisories, one advisory, events."""

from __future__ import annotations

import functools
import importlib.resources
from collections import Counter
from typing import Any

import yaml
from starlette.concurrency import run_in_threadpool
from starlette.requests import Request
from starlette.responses import JSONResponse, Response

from thermowarden.core.json_values import iso
from thermowarden.shell.web.context import WebContext
from thermowarden.shell.web.history import HISTORY_DEFAULT_S, MAX_PERIOD_S, UNITS
from thermowarden.shell.web.requests import BadRequest, error, parse_time


def openapi_document() -> dict[str, Any]:
    """The API's OpenAPI document as shipped in the package."""
    text = (importlib.resources.files("thermowarden") / "schemas" / "openapi.yaml").read_text(
        encoding="utf-8")
    doc: dict[str, Any] = yaml.safe_load(text)
    return doc


_document = functools.cache(openapi_document)  # read once, like the schemas


async def api_openapi(ctx: WebContext, request: Request) -> Response:
    return JSONResponse(_document())


async def api_spaces(ctx: WebContext, request: Request) -> Response:
    live = Counter(a["space"]["id"] for a in ctx.view.live())
    out = []
    for s in ctx.directory.spaces:
        c = ctx.view.conditions_of(s.id)
        out.append({"id": s.id, "name": s.name, "kind": s.kind, "hot_work": s.hot_work,
                    "ventilation": s.ventilation, "building": s.building,
                    "floor": s.floor, "area": s.area,
                    "conditions_at": c["at"] if c else None,
                    "occupied": bool(c["occupied"]) if c else None,
                    "live_advisories": live.get(s.id, 0)})
    return JSONResponse({"site": ctx.directory.site_id, "spaces": out})


async def api_conditions(ctx: WebContext, request: Request) -> Response:
    space = ctx.directory.space(request.path_params["space_id"])
    if space is None:
        return error(404, "no such space")
    c = ctx.view.conditions_of(space.id)
    if c is None:
        return error(404, "this space has not been evaluated yet")
    return JSONResponse(c)


async def api_history(ctx: WebContext, request: Request) -> Response:
    space = ctx.directory.space(request.path_params["space_id"])
    if space is None:
        return error(404, "no such space")
    q = request.query_params
    try:
        end = parse_time(q["to"], "to") if "to" in q else ctx.now()
        start = parse_time(q["from"], "from") if "from" in q else end - HISTORY_DEFAULT_S
    except BadRequest as exc:
        return error(400, str(exc))
    if not start < end:
        return error(400, "'from' must be before 'to'")
    if end - start > MAX_PERIOD_S:
        return error(400, f"at most {MAX_PERIOD_S / 86_400:g} days at a time")
    samples = await run_in_threadpool(ctx.reader.history, space.id, start, end)
    for s in samples:
        s["at"] = iso(s.pop("t"))
    return JSONResponse({"space": space.id, "from": iso(start), "to": iso(end),
                         "units": UNITS,
                         "samples": samples})


async def api_advisories(ctx: WebContext, request: Request) -> Response:
    q = request.query_params
    space = q.get("space")
    audience = q.get("audience")
    if audience is not None and audience not in ("facilities", "safety", "integrator"):
        return error(400, "audience: facilities, safety or integrator")
    return JSONResponse({"advisories": ctx.view.live(space, audience)})


async def api_advisory(ctx: WebContext, request: Request) -> Response:
    a, live = await run_in_threadpool(ctx.find_advisory, request.path_params["advisory_id"])
    if a is None:
        return error(404, "no such advisory")
    return JSONResponse({"live": live, "advisory": a})


async def api_events(ctx: WebContext, request: Request) -> Response:
    q = request.query_params
    try:
        since = parse_time(q["since"], "since") if "since" in q else \
            ctx.now() - HISTORY_DEFAULT_S
        limit = int(q.get("limit", "500"))
    except BadRequest as exc:
        return error(400, str(exc))
    except ValueError:
        return error(400, "limit: a whole number from 1 to 1000")
    if not 1 <= limit <= 1000:
        return error(400, "limit: a whole number from 1 to 1000")
    audience = q.get("audience")
    if audience is not None and audience not in ("facilities", "safety", "integrator"):
        return error(400, "audience: facilities, safety or integrator")
    events = await run_in_threadpool(ctx.reader.events, since, limit, q.get("space"),
                                     audience)
    return JSONResponse({"since": iso(since), "events": events})
