"""The web page and the HTTP API (Starlette), served by uvicorn on a thread of its own.

Reads come from the :class:`LiveView` (copies of what the engine thread published) and from
read-only connections to the store. Commands are handed to the engine thread through the
same inbox as MQTT commands (:class:`CommandBridge`), with the signed-in user as ``by``;
the engine applies the same rules and limits and its reply comes back to the waiting
request. Nothing that writes is reachable without a session, and a user acts only on
advisories of their own audiences. The API is described by ``schemas/openapi.yaml``.
"""

from __future__ import annotations

import functools
import logging
import threading
from collections.abc import Awaitable, Callable
from urllib.parse import quote

import uvicorn
from starlette.applications import Starlette
from starlette.datastructures import MutableHeaders
from starlette.middleware import Middleware
from starlette.requests import Request
from starlette.responses import RedirectResponse, Response
from starlette.routing import Route
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from thermowarden.shell.web.context import WebContext
from thermowarden.shell.web.layout import SECURITY_HEADERS
from thermowarden.shell.web.requests import (
    SIGN_IN_FIRST,
    bearer_session,
    cookie_session,
    error,
)
from thermowarden.shell.web.routes import api, commands, sessions, views

log = logging.getLogger("thermowarden.web")

Handler = Callable[[WebContext, Request], Awaitable[Response]]
Endpoint = Callable[[Request], Awaitable[Response]]


def _bound(ctx: WebContext, handler: Handler) -> Endpoint:
    async def endpoint(request: Request) -> Response:
        return await handler(ctx, request)
    return endpoint


def _by_method(ctx: WebContext, **handlers: Handler) -> Endpoint:
    """One route, several methods (so that 405 replies list every allowed method)."""
    async def endpoint(request: Request) -> Response:
        return await handlers[request.method](ctx, request)
    return endpoint


def _reader(ctx: WebContext, handler: Handler, api_call: bool) -> Endpoint:
    """A read that needs a signed-in user when ``web.sign_in_to_read`` is set: a page
    sends to the sign-in form, an API call answers 401."""
    if not ctx.read_needs_sign_in:
        return _bound(ctx, handler)

    async def gated(request: Request) -> Response:
        who = cookie_session(ctx, request) or bearer_session(ctx, request)
        if who is None:
            if api_call:
                return error(401, SIGN_IN_FIRST, {"WWW-Authenticate": "Bearer"})
            here = request.url.path + (f"?{request.url.query}" if request.url.query else "")
            return RedirectResponse(f"/login?next={quote(here, safe='')}", status_code=303)
        return await handler(ctx, request)
    return gated


def create_app(ctx: WebContext) -> Starlette:
    """The ASGI application (pages under /, API under /api): each path bound to its route
    function in ``shell/web/routes``."""
    page = functools.partial(_reader, ctx, api_call=False)
    read = functools.partial(_reader, ctx, api_call=True)
    routes = [
        Route("/", page(views.overview)),
        Route("/spaces/{space_id}", page(views.space_page)),
        Route("/advisories/{advisory_id}", page(views.advisory_page)),
        Route("/login", _by_method(ctx, GET=sessions.login_get, POST=sessions.login_post),
              methods=["GET", "POST"]),
        Route("/logout", _bound(ctx, sessions.logout), methods=["POST"]),
        Route("/advisories/{advisory_id}/{verb}", _bound(ctx, commands.page_command),
              methods=["POST"]),
        Route("/api/openapi.json", _bound(ctx, api.api_openapi)),
        Route("/api/spaces", read(api.api_spaces)),
        Route("/api/spaces/{space_id}/conditions", read(api.api_conditions)),
        Route("/api/spaces/{space_id}/history", read(api.api_history)),
        Route("/api/advisories", read(api.api_advisories)),
        Route("/api/advisories/{advisory_id}", read(api.api_advisory)),
        Route("/api/events", read(api.api_events)),
        Route("/api/session", _by_method(ctx, POST=sessions.api_session_post,
                                         DELETE=sessions.api_session_delete),
              methods=["POST", "DELETE"]),
    ] + [Route(f"/api/advisories/{{advisory_id}}/{verb}",
               _bound(ctx, functools.partial(commands.api_command, verb=verb)),
               methods=["POST"])
         for verb in commands.VERBS]
    return Starlette(routes=routes, middleware=[Middleware(SecurityHeaders)])


class SecurityHeaders:
    """Adds :data:`SECURITY_HEADERS` to every HTTP response (pure ASGI)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = MutableHeaders(scope=message)
                for name, value in SECURITY_HEADERS.items():
                    headers[name] = value
            await send(message)

        await self.app(scope, receive, send_with_headers)


class WebServer:
    """uvicorn on a thread of its own (never the engine thread)."""

    def __init__(self, app: Starlette, host: str, port: int) -> None:
        config = uvicorn.Config(app, host=host, port=port, log_level="warning",
                                access_log=False, lifespan="off", server_header=False)
        self.server = uvicorn.Server(config)
        self.thread = threading.Thread(target=self.server.run, name="web", daemon=True)
        self.host = host
        self.port = port

    def start(self, timeout: float = 15.0) -> WebServer:
        self.thread.start()
        deadline = threading.Event()
        waited = 0.0
        while not self.server.started and self.thread.is_alive() and waited < timeout:
            deadline.wait(0.05)
            waited += 0.05
        if not self.server.started:
            raise OSError(f"the web server did not start on {self.host}:{self.port}")
        log.info("web page and API on http://%s:%d/", self.host, self.port)
        return self

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(10)
