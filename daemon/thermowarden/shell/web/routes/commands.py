"""Acknowledge, shelve and unshelve, from a page's form or the API: the fields are checked
as the engine will check them, the user's audiences and buildings are checked, and the
command goes to the engine thread (:class:`~thermowarden.shell.web.context.CommandBridge`),
whose reply decides."""

from __future__ import annotations

import json
import logging
import math
import uuid
from typing import Any
from urllib.parse import quote

from starlette.concurrency import run_in_threadpool
from starlette.requests import Request
from starlette.responses import HTMLResponse, JSONResponse, RedirectResponse, Response

from thermowarden.shell.web.context import WebContext
from thermowarden.shell.web.requests import (
    SIGN_IN_FIRST,
    BadRequest,
    bearer_session,
    cookie_session,
    error,
    form,
    read_body,
)
from thermowarden.shell.web.users import Session

log = logging.getLogger("thermowarden.web")

VERBS = ("acknowledge", "shelve", "unshelve")


def command_body(ctx: WebContext, verb: str, advisory: dict[str, Any], user: str,
                 fields: dict[str, Any]) -> dict[str, Any]:
    """Check a command's fields as the page and API take them; the engine checks again."""
    allowed = {"acknowledge": {"note"}, "shelve": {"reason", "duration_s"},
               "unshelve": {"note"}}[verb]
    extra = set(fields) - allowed
    if extra:
        raise BadRequest(f"unknown field(s) {', '.join(sorted(extra))}")
    body: dict[str, Any] = {"advisory_id": advisory["id"], "by": user,
                            "request_id": f"web-{uuid.uuid4().hex[:12]}"}
    note = fields.get("note")
    if note is not None:
        if not isinstance(note, str) or len(note) > 1000:
            raise BadRequest("note: text of at most 1000 characters")
        if note.strip():
            body["note"] = note.strip()
    if verb == "shelve":
        reason = fields.get("reason")
        if not isinstance(reason, str) or not reason.strip() or len(reason) > 1000:
            raise BadRequest("reason: say why it is shelved (at most 1000 characters)")
        dur = fields.get("duration_s")
        if isinstance(dur, str):
            try:
                dur = float(dur)
            except ValueError:
                raise BadRequest("duration_s: a number of seconds") from None
        if isinstance(dur, bool) or not isinstance(dur, int | float) or \
                not math.isfinite(dur) or dur <= 0:
            raise BadRequest("duration_s: a positive number of seconds")
        limit = ctx.directory.max_shelve_s.get(advisory["rule"])
        if limit is not None and dur > limit:
            raise BadRequest(f"duration_s: rule {advisory['rule']} may be shelved for at "
                             f"most {limit:g} s")
        body["reason"] = reason.strip()
        body["duration_s"] = dur
    return body


def act(ctx: WebContext, verb: str, advisory_id: str, session: Session,
        fields: dict[str, Any]) -> tuple[int, dict[str, Any]]:
    """Run one command for ``session``'s user; (HTTP status, response body)."""
    advisory = ctx.view.advisory(advisory_id)
    if advisory is None:
        return 404, {"error": f"no live advisory {advisory_id!r}"}
    if advisory["audience"] not in session.user.audiences:
        return 403, {"error": f"{session.user.name} may not act on advisories for "
                              f"{advisory['audience']}"}
    space = ctx.directory.space(advisory["space"]["id"])
    place = (space.building or space.area) if space is not None else None
    if not session.user.may_act(advisory["audience"], place):
        return 403, {"error": f"{session.user.name} may not act on advisories of "
                              f"{place or 'spaces outside their buildings'}"}
    body = command_body(ctx, verb, advisory, session.user.name, fields)
    reply = ctx.bridge.submit(verb, body, advisory["audience"], session.user.name)
    if reply is None:
        return 503, {"error": "the service did not take the command in time; try again"}
    if not reply.get("ok"):
        return 409, {"error": str(reply.get("error", "refused")), "reply": reply}
    log.info("%s %s by %s (web)", verb, advisory_id, session.user.name)
    return 200, {"reply": reply}


async def page_command(ctx: WebContext, request: Request) -> Response:
    """A command from the advisory page's form (cookie session and its CSRF token); back
    to the page with the outcome as a flash message."""
    advisory_id = request.path_params["advisory_id"]
    verb = request.path_params["verb"]
    back = f"/advisories/{quote(advisory_id, safe='')}"
    session = cookie_session(ctx, request)
    if verb not in VERBS:
        return HTMLResponse("not found", 404)
    if session is None:
        return RedirectResponse(f"/login?next={quote(back, safe='')}", status_code=303)
    try:
        fields = await form(request)
    except BadRequest as exc:
        session.flash.append("!" + str(exc))
        return RedirectResponse(back, status_code=303)
    if fields.pop("csrf", None) != session.csrf:
        return HTMLResponse("the form is out of date; reload the page", 403)
    try:
        status, out = await run_in_threadpool(act, ctx, verb, advisory_id, session, fields)
    except BadRequest as exc:
        status, out = 400, {"error": str(exc)}
    if status == 200:
        done = {"acknowledge": "Acknowledged", "shelve": "Shelved",
                "unshelve": "Unshelved"}[verb]
        session.flash.append(f"{done} by {session.user.name}.")
    else:
        session.flash.append("!" + out["error"])
    return RedirectResponse(back, status_code=303)


async def api_command(ctx: WebContext, request: Request, verb: str) -> Response:
    """A command through the API (bearer session); the engine's reply as JSON."""
    session = bearer_session(ctx, request)
    if session is None:
        return error(401, SIGN_IN_FIRST, {"WWW-Authenticate": "Bearer"})
    try:
        raw = await read_body(request)
        data = json.loads(raw) if raw.strip() else {}
    except (BadRequest, ValueError, RecursionError):
        return error(400, "expected a JSON object")
    if not isinstance(data, dict):
        return error(400, "expected a JSON object")
    try:
        status, out = await run_in_threadpool(
            act, ctx, verb, request.path_params["advisory_id"], session, data)
    except BadRequest as exc:
        return error(400, str(exc))
    return JSONResponse(out, status_code=status)
