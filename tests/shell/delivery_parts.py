"""Test parts for delivery: a local HTTP receiver (http.server), a local SMTP server
(aiosmtpd), a clock the test can move, and real event payloads from the engine."""

from __future__ import annotations

import json
import textwrap
import threading
import time
from collections.abc import Callable
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

from aiosmtpd.controller import Controller

from tests.shell.conftest import free_port
from thermowarden.config import load_site
from thermowarden.effects import Publish
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

PACK = """\
pack: deliverytest
description: three priorities for one audience
rules:
  - id: warm
    title: Warm
    audience: safety
    priority: low
    needs: [air_temperature]
    condition: air_temperature > 28
    messages: {title: "{space_name} is warm", advice: "Open a window.", rationale: "Above 28 °C."}
  - id: hot
    title: Hot
    audience: safety
    priority: high
    needs: [air_temperature]
    condition: air_temperature > 31
    messages: {title: "{space_name} is hot", advice: "Fans on.", rationale: "Above 31 °C."}
  - id: heat
    title: Heat stress
    audience: safety
    priority: urgent
    needs: [air_temperature]
    condition: air_temperature > 35
    heat_stress_cautions: true
    numbers: [air_temperature]
    messages: {title: "Heat stress in {space_name}", advice: "Stop hot work and rest in the
      shade; drink water.", rationale: "{air_temperature:.1f} °C."}
"""

SITE = """\
site: {id: deliv, timezone: Europe/London}
rule_dirs: [packs]
defaults: {occupancy: {always: true}, rule_packs: [deliverytest]}
spaces:
  - id: kiln-hall
    points: [{topic: d/kiln-hall/ta, quantity: air_temperature}]
  - id: yard
    points: [{topic: d/yard/ta, quantity: air_temperature}]
"""


def engine_events(tmp_path) -> dict[tuple[str, str], dict[str, Any]]:
    """Raised events by (space, rule), produced by the engine from readings."""
    (tmp_path / "packs").mkdir(exist_ok=True)
    (tmp_path / "packs" / "deliverytest.yaml").write_text(PACK)
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(SITE))
    config = load_site(site, {})
    packs = load_rule_packs(["deliverytest"], config.rule_dirs, base=site)
    engine = Engine(config, build_site_model(config), packs, start=0.0)
    now = 1_784_000_000.0
    engine.message("d/kiln-hall/ta", b"36.2", now)
    engine.message("d/yard/ta", b"29.0", now)
    out = {}
    for e in engine.tick(now + 1):
        if isinstance(e, Publish) and "/events/" in e.topic and e.payload:
            adv = e.payload["advisory"]
            out[(adv["space"]["id"], adv["rule"].split(".")[-1])] = e.payload
    return out


class Receiver:
    """A local webhook receiver; ``statuses`` are answered in turn, then 200.

    A slow receiver: with ``gate``, each request is recorded when it arrives and answered
    when the gate opens or after ``hold_s`` seconds, whichever comes first; ``answered``
    holds the monotonic time of each answer."""

    def __init__(self, statuses: list[int] | None = None, port: int | None = None,
                 gate: threading.Event | None = None, hold_s: float = 0.0) -> None:
        self.requests: list[tuple[dict[str, str], bytes]] = []
        self.answered: list[float] = []
        self.statuses = list(statuses or [])
        self.lock = threading.Lock()
        outer = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 - http.server's name
                body = self.rfile.read(int(self.headers.get("Content-Length", "0")))
                with outer.lock:
                    status = outer.statuses.pop(0) if outer.statuses else 200
                    outer.requests.append(({k.lower(): v for k, v in self.headers.items()}, body))
                if gate is not None:
                    gate.wait(hold_s)  # the receiver's own slowness, not a test's wait
                with outer.lock:
                    outer.answered.append(time.monotonic())
                self.send_response(status)
                if 300 <= status < 400:
                    self.send_header("Location", "/elsewhere")
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args: Any) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", port or 0), Handler)
        self.port = self.server.server_address[1]
        self.url = f"http://127.0.0.1:{self.port}/hook"
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()

    def bodies(self) -> list[dict[str, Any]]:
        with self.lock:
            return [json.loads(b) for _, b in self.requests]

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


class SmtpSink:
    """A local SMTP server (aiosmtpd); ``replies`` are answered to DATA in turn, then 250."""

    def __init__(self, replies: list[str] | None = None) -> None:
        self.messages: list[Any] = []
        self.arrived: list[float] = []  # monotonic time of each message taken
        self.replies = list(replies or [])
        outer = self

        class Handler:
            async def handle_DATA(self, server: Any, session: Any, envelope: Any) -> str:  # noqa: N802
                if outer.replies:
                    return outer.replies.pop(0)
                outer.messages.append(envelope)
                outer.arrived.append(time.monotonic())
                return "250 Message accepted"

        self.port = free_port()
        self.controller = Controller(Handler(), hostname="127.0.0.1", port=self.port)
        self.controller.start()

    def texts(self) -> list[str]:
        return [m.content.decode("utf-8", "replace") for m in self.messages]

    def close(self) -> None:
        self.controller.stop()


class MovableClock:
    """Real time plus an offset the test can move (quiet hours, digests)."""

    def __init__(self, start: float) -> None:
        self.offset = start - time.time()

    def __call__(self) -> float:
        return time.time() + self.offset

    def jump_to(self, t: float) -> None:
        self.offset = t - time.time()


def wait_until(predicate: Callable[[], bool], timeout: float = 20.0, what: str = "") -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return
        time.sleep(0.02)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")
