"""Signing in and out: the page's form (a cookie session) and the API's ``/api/session`` (a
bearer token)."""

from __future__ import annotations

import json

from starlette.concurrency import run_in_threadpool
from starlette.requests import Request
from starlette.responses import HTMLResponse, JSONResponse, RedirectResponse, Response

from thermowarden.shell.web.context import WebContext
from thermowarden.shell.web.login_page import login_page
from thermowarden.shell.web.requests import (
    COOKIE,
    BadRequest,
    bearer_session,
    client,
    cookie_session,
    error,
    form,
    local_path,
    read_body,
)


async def login_get(ctx: WebContext, request: Request) -> Response:
    next_url = request.query_params.get("next", "/")
    return HTMLResponse(login_page(ctx.directory, local_path(next_url), None,
                                   ctx.sessions is not None))


async def login_post(ctx: WebContext, request: Request) -> Response:
    if ctx.sessions is None:
        return HTMLResponse(login_page(ctx.directory, "/", None, False), 404)
    try:
        fields = await form(request)
    except BadRequest as exc:
        return HTMLResponse(login_page(ctx.directory, "/", str(exc), True), 400)
    next_url = local_path(fields.get("next", "/"))
    session = await run_in_threadpool(ctx.sessions.sign_in, fields.get("name", ""),
                                      fields.get("password", ""), client(request))
    if session is None:
        return HTMLResponse(login_page(ctx.directory, next_url,
                                       "Name or password not accepted.", True), 401)
    resp = RedirectResponse(next_url, status_code=303)
    resp.set_cookie(COOKIE, session.token, max_age=int(ctx.sessions.lifetime_s),
                    httponly=True, samesite="strict", path="/")
    return resp


async def logout(ctx: WebContext, request: Request) -> Response:
    session = cookie_session(ctx, request)
    try:
        fields = await form(request)
    except BadRequest:
        fields = {}
    if session is not None and ctx.sessions is not None and \
            fields.get("csrf") == session.csrf:
        ctx.sessions.sign_out(session.token)
    resp = RedirectResponse("/", status_code=303)
    resp.delete_cookie(COOKIE, path="/")
    return resp


async def api_session_post(ctx: WebContext, request: Request) -> Response:
    if ctx.sessions is None:
        return error(401, "no users are configured (web.users_file)",
                      {"WWW-Authenticate": "Bearer"})
    try:
        data = json.loads(await read_body(request))
    except (BadRequest, ValueError, RecursionError):
        return error(400, "expected a JSON object with name and password")
    if not isinstance(data, dict) or not isinstance(data.get("name"), str) or \
            not isinstance(data.get("password"), str) or set(data) - {"name", "password"}:
        return error(400, "expected a JSON object with name and password")
    session = await run_in_threadpool(ctx.sessions.sign_in, data["name"], data["password"],
                                      client(request))
    if session is None:
        return error(401, "name or password not accepted", {"WWW-Authenticate": "Bearer"})
    return JSONResponse({"token": session.token, "name": session.user.name,
                         "audiences": sorted(session.user.audiences),
                         "expires_in_s": round(ctx.sessions.remaining_s(session))},
                        status_code=201)


async def api_session_delete(ctx: WebContext, request: Request) -> Response:
    session = bearer_session(ctx, request)
    if session is None or ctx.sessions is None:
        return error(401, "sign in first (POST /api/session)",
                      {"WWW-Authenticate": "Bearer"})
    ctx.sessions.sign_out(session.token)
    return Response(status_code=204)
