"""Reading a request safely: its session (cookie or bearer token), a bounded body, a form,
an RFC 3339 time; and the JSON error reply. Shared by every route module."""

from __future__ import annotations

import datetime as dt
from urllib.parse import parse_qs

from starlette.requests import Request
from starlette.responses import JSONResponse

from thermowarden.shell.web.context import WebContext
from thermowarden.shell.web.users import Session

COOKIE = "thermowarden_session"
MAX_BODY = 16_384
"""Bytes; a longer body is refused as it arrives."""
SIGN_IN_FIRST = ("sign in first (POST /api/session) and send "
                 "'Authorization: Bearer <token>'")


class BadRequest(ValueError):
    pass


def error(status: int, message: str, headers: dict[str, str] | None = None) -> JSONResponse:
    """The API's error reply: ``{"error": message}``."""
    return JSONResponse({"error": message}, status_code=status, headers=headers)


def cookie_session(ctx: WebContext, request: Request) -> Session | None:
    """The page's session (its cookie), if signed in."""
    if ctx.sessions is None:
        return None
    return ctx.sessions.get(request.cookies.get(COOKIE))


def bearer_session(ctx: WebContext, request: Request) -> Session | None:
    """The API caller's session (``Authorization: Bearer <token>``), if signed in."""
    if ctx.sessions is None:
        return None
    auth = request.headers.get("authorization", "")
    scheme, _, token = auth.partition(" ")
    if scheme.lower() != "bearer" or not token.strip():
        return None
    return ctx.sessions.get(token.strip())


async def read_body(request: Request) -> bytes:
    """The body, at most :data:`MAX_BODY` bytes (else :class:`BadRequest`)."""
    body = b""
    async for chunk in request.stream():
        body += chunk
        if len(body) > MAX_BODY:
            raise BadRequest("the body is too large")
    return body


async def form(request: Request) -> dict[str, str]:
    """An url-encoded form's fields (the first value of each)."""
    body = await read_body(request)
    try:
        fields = parse_qs(body.decode("utf-8"), keep_blank_values=True, max_num_fields=20)
    except (UnicodeDecodeError, ValueError):
        raise BadRequest("the form cannot be read") from None
    return {k: v[0] for k, v in fields.items()}


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


def client(request: Request) -> str:
    """The caller's address for the log (the peer of the connection)."""
    return f"{request.client.host}" if request.client is not None else ""


def local_path(url: str) -> str:
    """Only a path on this site may follow sign-in (no open redirect)."""
    if not url.startswith("/") or url.startswith("//") or "\\" in url:
        return "/"
    return url
