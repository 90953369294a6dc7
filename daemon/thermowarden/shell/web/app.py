"""The web page and the HTTP API (Starlette), served by uvicorn on a thread of its own.

Reads come from the :class:`LiveView` (copies of what the engine thread published) and from
read-only connections to the store. Commands are handed to the engine thread through the
same inbox as MQTT commands (:class:`CommandBridge`), with the signed-in user as ``by``;
the engine applies the same rules and limits and its reply comes back to the waiting
request. Nothing that writes is reachable without a session, and a user acts only on
advisories of their own audiences. The API is described by ``schemas/openapi.yaml``.
"""

from __future__ import annotations

import datetime as dt
import importlib.resources
import json
import logging
import math
import threading
import uuid
import zoneinfo
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any
from urllib.parse import parse_qs, quote

import uvicorn
import yaml
from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.datastructures import MutableHeaders
from starlette.middleware import Middleware
from starlette.requests import Request
from starlette.responses import HTMLResponse, JSONResponse, RedirectResponse, Response
from starlette.routing import Route
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from thermowarden.shell.mqtt_link import Inbox, Incoming
from thermowarden.shell.web import pages
from thermowarden.shell.web.history import MAX_PERIOD_S, UNITS, StoreReader
from thermowarden.shell.web.live import LiveView, SiteDirectory
from thermowarden.shell.web.users import Session, Sessions

log = logging.getLogger("thermowarden.web")

COOKIE = "thermowarden_session"
COMMAND_TIMEOUT_S = 10.0
MAX_BODY = 16_384
VERBS = ("acknowledge", "shelve", "unshelve")
HISTORY_DEFAULT_S = 86_400.0


def openapi_document() -> dict[str, Any]:
    """The API's OpenAPI document as shipped in the package."""
    text = (importlib.resources.files("thermowarden") / "schemas" / "openapi.yaml").read_text(
        encoding="utf-8")
    doc: dict[str, Any] = yaml.safe_load(text)
    return doc


class CommandBridge:
    """Hands a command to the engine thread through the MQTT commands' inbox and waits for
    the engine's reply."""

    def __init__(self, inbox: Inbox, command_prefix: str, now: Callable[[], float],
                 timeout_s: float = COMMAND_TIMEOUT_S) -> None:
        self.inbox = inbox
        self.command_prefix = command_prefix
        self.now = now
        self.timeout_s = timeout_s

    def submit(self, verb: str, body: dict[str, Any], audience: str = "",
               user: str = "") -> dict[str, Any] | None:
        """The engine's reply, or None when the engine did not answer in time or the inbox
        is full. The command goes as ``<prefix>/commands/<audience>/<verb>/<user>`` with the
        signed-in user as its identity, as a trusted gateway's MQTT command would."""
        done = threading.Event()
        box: dict[str, dict[str, Any]] = {}

        def on_reply(reply: dict[str, Any]) -> None:
            box["reply"] = reply
            done.set()

        item = Incoming(f"{self.command_prefix}{audience}/{verb}/{user}",
                        json.dumps(body).encode("utf-8"), self.now(), identity=user or None,
                        kind="command", on_reply=on_reply)
        if not self.inbox.put(item):
            return None
        if not done.wait(self.timeout_s):
            return None
        return box["reply"]


@dataclass
class WebContext:
    directory: SiteDirectory
    view: LiveView
    reader: StoreReader
    sessions: Sessions | None
    bridge: CommandBridge
    now: Callable[[], float]
    read_needs_sign_in: bool = False

    @property
    def tz(self) -> dt.tzinfo:
        return zoneinfo.ZoneInfo(self.directory.timezone)

    def follow(self, directory: SiteDirectory) -> None:
        """A reload's site (called on the engine thread): the web thread's next request
        reads the new directory, and the view forgets spaces that are gone."""
        self.directory = directory
        self.view.keep_only(set(directory.by_id))


class BadRequest(ValueError):
    pass


def _error(status: int, message: str, headers: dict[str, str] | None = None) -> JSONResponse:
    return JSONResponse({"error": message}, status_code=status, headers=headers)


def parse_time(text: str, name: str) -> float:
    """RFC 3339 date-time (an offset is required) -> epoch seconds."""
    s = text.strip().upper().replace(" ", "T")
    if s.endswith("Z"):
        s = s[:-1] + "+00:00"
    if len(s) >= 19 and s[17:19] == "60":  # a leap second counts as :59
        s = s[:17] + "59" + s[19:]
    try:
        t = dt.datetime.fromisoformat(s)
    except ValueError:
        raise BadRequest(f"{name}: expected an RFC 3339 date-time, got {text[:40]!r}") from None
    if t.tzinfo is None:
        raise BadRequest(f"{name}: the date-time needs a time zone offset")
    try:
        return t.timestamp()
    except (OverflowError, ValueError):
        raise BadRequest(f"{name}: out of range") from None


def iso(t: float) -> str:
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")


def create_app(ctx: WebContext) -> Starlette:
    """The ASGI application (pages under /, API under /api)."""
    doc = openapi_document()

    # ------------------------------------------------------------------ helpers
    def cookie_session(request: Request) -> Session | None:
        if ctx.sessions is None:
            return None
        return ctx.sessions.get(request.cookies.get(COOKIE))

    def bearer_session(request: Request) -> Session | None:
        if ctx.sessions is None:
            return None
        auth = request.headers.get("authorization", "")
        scheme, _, token = auth.partition(" ")
        if scheme.lower() != "bearer" or not token.strip():
            return None
        return ctx.sessions.get(token.strip())

    async def read_body(request: Request) -> bytes:
        body = b""
        async for chunk in request.stream():
            body += chunk
            if len(body) > MAX_BODY:
                raise BadRequest("the body is too large")
        return body

    async def form(request: Request) -> dict[str, str]:
        body = await read_body(request)
        try:
            fields = parse_qs(body.decode("utf-8"), keep_blank_values=True, max_num_fields=20)
        except (UnicodeDecodeError, ValueError):
            raise BadRequest("the form cannot be read") from None
        return {k: v[0] for k, v in fields.items()}

    def advisory_any(advisory_id: str) -> tuple[dict[str, Any] | None, bool]:
        a = ctx.view.advisory(advisory_id)
        if a is not None:
            return a, True
        return ctx.reader.last_advisory(advisory_id), False

    def command_body(verb: str, advisory: dict[str, Any], user: str,
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

    def act(verb: str, advisory_id: str, session: Session, fields: dict[str, Any]
            ) -> tuple[int, dict[str, Any]]:
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
        body = command_body(verb, advisory, session.user.name, fields)
        reply = ctx.bridge.submit(verb, body, advisory["audience"], session.user.name)
        if reply is None:
            return 503, {"error": "the service did not take the command in time; try again"}
        if not reply.get("ok"):
            return 409, {"error": str(reply.get("error", "refused")), "reply": reply}
        log.info("%s %s by %s (web)", verb, advisory_id, session.user.name)
        return 200, {"reply": reply}

    # ------------------------------------------------------------------ pages
    async def overview(request: Request) -> Response:
        filters = pages.Filters.parse(request.query_params)
        html = pages.overview(ctx.directory, ctx.view.conditions_of, ctx.view.live(),
                              cookie_session(request), ctx.tz, filters)
        return HTMLResponse(html)

    async def space_page(request: Request) -> Response:
        space = ctx.directory.space(request.path_params["space_id"])
        if space is None:
            return HTMLResponse(pages.page("Not found", "<h2>No such space</h2>",
                                           ctx.directory, cookie_session(request)), 404)
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
        html = pages.space_page(ctx.directory, space, ctx.view.conditions_of(space.id), live,
                                list(reversed(recent.values())), samples, start, end,
                                cookie_session(request), ctx.tz)
        return HTMLResponse(html)

    async def advisory_page(request: Request) -> Response:
        advisory_id = request.path_params["advisory_id"]
        a, live = await run_in_threadpool(advisory_any, advisory_id)
        session = cookie_session(request)
        if a is None:
            return HTMLResponse(pages.page("Not found", "<h2>No such advisory</h2>",
                                           ctx.directory, session), 404)
        return HTMLResponse(pages.advisory_page(ctx.directory, a, live, session, ctx.tz,
                                                ctx.directory.max_shelve_s.get(a["rule"])))

    async def login_get(request: Request) -> Response:
        next_url = request.query_params.get("next", "/")
        return HTMLResponse(pages.login_page(ctx.directory, _local_path(next_url), None,
                                             ctx.sessions is not None))

    async def login_post(request: Request) -> Response:
        if ctx.sessions is None:
            return HTMLResponse(pages.login_page(ctx.directory, "/", None, False), 404)
        try:
            fields = await form(request)
        except BadRequest as exc:
            return HTMLResponse(pages.login_page(ctx.directory, "/", str(exc), True), 400)
        next_url = _local_path(fields.get("next", "/"))
        session = await run_in_threadpool(ctx.sessions.sign_in, fields.get("name", ""),
                                          fields.get("password", ""), _client(request))
        if session is None:
            return HTMLResponse(pages.login_page(ctx.directory, next_url,
                                                 "Name or password not accepted.", True), 401)
        resp = RedirectResponse(next_url, status_code=303)
        resp.set_cookie(COOKIE, session.token, max_age=int(ctx.sessions.lifetime_s),
                        httponly=True, samesite="strict", path="/")
        return resp

    async def logout(request: Request) -> Response:
        session = cookie_session(request)
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

    async def page_command(request: Request) -> Response:
        advisory_id = request.path_params["advisory_id"]
        verb = request.path_params["verb"]
        back = f"/advisories/{quote(advisory_id, safe='')}"
        session = cookie_session(request)
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
            status, out = await run_in_threadpool(act, verb, advisory_id, session, fields)
        except BadRequest as exc:
            status, out = 400, {"error": str(exc)}
        if status == 200:
            done = {"acknowledge": "Acknowledged", "shelve": "Shelved",
                    "unshelve": "Unshelved"}[verb]
            session.flash.append(f"{done} by {session.user.name}.")
        else:
            session.flash.append("!" + out["error"])
        return RedirectResponse(back, status_code=303)

    # ------------------------------------------------------------------ API
    async def api_openapi(request: Request) -> Response:
        return JSONResponse(doc)

    async def api_spaces(request: Request) -> Response:
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

    async def api_conditions(request: Request) -> Response:
        space = ctx.directory.space(request.path_params["space_id"])
        if space is None:
            return _error(404, "no such space")
        c = ctx.view.conditions_of(space.id)
        if c is None:
            return _error(404, "this space has not been evaluated yet")
        return JSONResponse(c)

    async def api_history(request: Request) -> Response:
        space = ctx.directory.space(request.path_params["space_id"])
        if space is None:
            return _error(404, "no such space")
        q = request.query_params
        try:
            end = parse_time(q["to"], "to") if "to" in q else ctx.now()
            start = parse_time(q["from"], "from") if "from" in q else end - HISTORY_DEFAULT_S
        except BadRequest as exc:
            return _error(400, str(exc))
        if not start < end:
            return _error(400, "'from' must be before 'to'")
        if end - start > MAX_PERIOD_S:
            return _error(400, f"at most {MAX_PERIOD_S / 86_400:g} days at a time")
        samples = await run_in_threadpool(ctx.reader.history, space.id, start, end)
        for s in samples:
            s["at"] = iso(s.pop("t"))
        return JSONResponse({"space": space.id, "from": iso(start), "to": iso(end),
                             "units": UNITS,
                             "samples": samples})

    async def api_advisories(request: Request) -> Response:
        q = request.query_params
        space = q.get("space")
        audience = q.get("audience")
        if audience is not None and audience not in ("facilities", "safety", "integrator"):
            return _error(400, "audience: facilities, safety or integrator")
        return JSONResponse({"advisories": ctx.view.live(space, audience)})

    async def api_advisory(request: Request) -> Response:
        a, live = await run_in_threadpool(advisory_any, request.path_params["advisory_id"])
        if a is None:
            return _error(404, "no such advisory")
        return JSONResponse({"live": live, "advisory": a})

    async def api_events(request: Request) -> Response:
        q = request.query_params
        try:
            since = parse_time(q["since"], "since") if "since" in q else \
                ctx.now() - HISTORY_DEFAULT_S
            limit = int(q.get("limit", "500"))
        except BadRequest as exc:
            return _error(400, str(exc))
        except ValueError:
            return _error(400, "limit: a whole number from 1 to 1000")
        if not 1 <= limit <= 1000:
            return _error(400, "limit: a whole number from 1 to 1000")
        audience = q.get("audience")
        if audience is not None and audience not in ("facilities", "safety", "integrator"):
            return _error(400, "audience: facilities, safety or integrator")
        events = await run_in_threadpool(ctx.reader.events, since, limit, q.get("space"),
                                         audience)
        return JSONResponse({"since": iso(since), "events": events})

    async def api_session_post(request: Request) -> Response:
        if ctx.sessions is None:
            return _error(401, "no users are configured (web.users_file)",
                          {"WWW-Authenticate": "Bearer"})
        try:
            data = json.loads(await read_body(request))
        except (BadRequest, ValueError, RecursionError):
            return _error(400, "expected a JSON object with name and password")
        if not isinstance(data, dict) or not isinstance(data.get("name"), str) or \
                not isinstance(data.get("password"), str) or set(data) - {"name", "password"}:
            return _error(400, "expected a JSON object with name and password")
        session = await run_in_threadpool(ctx.sessions.sign_in, data["name"], data["password"],
                                          _client(request))
        if session is None:
            return _error(401, "name or password not accepted", {"WWW-Authenticate": "Bearer"})
        return JSONResponse({"token": session.token, "name": session.user.name,
                             "audiences": sorted(session.user.audiences),
                             "expires_in_s": round(ctx.sessions.remaining_s(session))},
                            status_code=201)

    async def api_session_delete(request: Request) -> Response:
        session = bearer_session(request)
        if session is None or ctx.sessions is None:
            return _error(401, "sign in first (POST /api/session)",
                          {"WWW-Authenticate": "Bearer"})
        ctx.sessions.sign_out(session.token)
        return Response(status_code=204)

    def api_command(verb: str) -> Callable[[Request], Any]:
        async def handler(request: Request) -> Response:
            session = bearer_session(request)
            if session is None:
                return _error(401, "sign in first (POST /api/session) and send "
                                   "'Authorization: Bearer <token>'",
                              {"WWW-Authenticate": "Bearer"})
            try:
                raw = await read_body(request)
                data = json.loads(raw) if raw.strip() else {}
            except (BadRequest, ValueError, RecursionError):
                return _error(400, "expected a JSON object")
            if not isinstance(data, dict):
                return _error(400, "expected a JSON object")
            try:
                status, out = await run_in_threadpool(
                    act, verb, request.path_params["advisory_id"], session, data)
            except BadRequest as exc:
                return _error(400, str(exc))
            return JSONResponse(out, status_code=status)
        return handler

    def by_method(**handlers: Callable[[Request], Any]) -> Callable[[Request], Any]:
        """One route, several methods (so that 405 replies list every allowed method)."""
        async def handler(request: Request) -> Response:
            result: Response = await handlers[request.method](request)
            return result
        return handler

    def reader(handler: Callable[[Request], Any], api: bool) -> Callable[[Request], Any]:
        """A read that needs a signed-in user when ``web.sign_in_to_read`` is set: a page
        sends to the sign-in form, an API call answers 401."""
        if not ctx.read_needs_sign_in:
            return handler

        async def gated(request: Request) -> Response:
            who = cookie_session(request) or bearer_session(request)
            if who is None:
                if api:
                    return _error(401, "sign in first (POST /api/session) and send "
                                       "'Authorization: Bearer <token>'",
                                  {"WWW-Authenticate": "Bearer"})
                here = request.url.path + (f"?{request.url.query}" if request.url.query
                                           else "")
                return RedirectResponse(f"/login?next={quote(here, safe='')}",
                                        status_code=303)
            result: Response = await handler(request)
            return result
        return gated

    routes = [
        Route("/", reader(overview, False)),
        Route("/spaces/{space_id}", reader(space_page, False)),
        Route("/advisories/{advisory_id}", reader(advisory_page, False)),
        Route("/login", by_method(GET=login_get, POST=login_post), methods=["GET", "POST"]),
        Route("/logout", logout, methods=["POST"]),
        Route("/advisories/{advisory_id}/{verb}", page_command, methods=["POST"]),
        Route("/api/openapi.json", api_openapi),
        Route("/api/spaces", reader(api_spaces, True)),
        Route("/api/spaces/{space_id}/conditions", reader(api_conditions, True)),
        Route("/api/spaces/{space_id}/history", reader(api_history, True)),
        Route("/api/advisories", reader(api_advisories, True)),
        Route("/api/advisories/{advisory_id}", reader(api_advisory, True)),
        Route("/api/events", reader(api_events, True)),
        Route("/api/session", by_method(POST=api_session_post, DELETE=api_session_delete),
              methods=["POST", "DELETE"]),
    ] + [Route(f"/api/advisories/{{advisory_id}}/{verb}", api_command(verb), methods=["POST"])
         for verb in VERBS]
    return Starlette(routes=routes, middleware=[Middleware(SecurityHeaders)])


class SecurityHeaders:
    """Adds :data:`pages.SECURITY_HEADERS` to every HTTP response (pure ASGI)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = MutableHeaders(scope=message)
                for name, value in pages.SECURITY_HEADERS.items():
                    headers[name] = value
            await send(message)

        await self.app(scope, receive, send_with_headers)


def _client(request: Request) -> str:
    """The caller's address for the log (the peer of the connection)."""
    return f"{request.client.host}" if request.client is not None else ""


def _local_path(url: str) -> str:
    """Only a path on this site may follow sign-in (no open redirect)."""
    if not url.startswith("/") or url.startswith("//") or "\\" in url:
        return "/"
    return url


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
