"""An embedded MQTT broker for the demo when no broker is given: amqtt, in a thread.

amqtt speaks MQTT 3.1.1 only (an MQTT 5 CONNECT is refused), so the demo's clients use
3.1.1 with it. For anything but the demo, use a real broker such as Mosquitto.
"""

from __future__ import annotations

import asyncio
import logging
import socket
import threading
from typing import Any


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class EmbeddedBroker:
    """Start with :meth:`start`, stop with :meth:`stop`; listens on 127.0.0.1:``port``."""

    def __init__(self, port: int | None = None) -> None:
        self.port = port or free_port()
        self._loop: asyncio.AbstractEventLoop | None = None
        self._thread: threading.Thread | None = None
        self._broker: Any = None
        self._started = threading.Event()
        self._error: BaseException | None = None

    def start(self, timeout: float = 15.0) -> EmbeddedBroker:
        try:
            import amqtt.broker  # noqa: F401  (optional dependency: the demo extra)
        except ImportError as exc:
            raise RuntimeError("the embedded broker needs amqtt: pip install "
                               "'thermowarden[demo]' (or give --broker URL)") from exc
        for name in ("amqtt", "transitions"):
            logging.getLogger(name).setLevel(logging.ERROR)
        self._thread = threading.Thread(target=self._run, name="embedded-broker", daemon=True)
        self._thread.start()
        if not self._started.wait(timeout):
            raise RuntimeError("the embedded broker did not start")
        if self._error is not None:
            raise RuntimeError(f"the embedded broker failed: {self._error}")
        return self

    def _run(self) -> None:
        from amqtt.broker import Broker

        loop = asyncio.new_event_loop()
        self._loop = loop
        asyncio.set_event_loop(loop)
        log = logging.getLogger("thermowarden.embedded_broker")
        loop.set_exception_handler(
            lambda _loop, ctx: log.warning("embedded broker: %s (%s)", ctx.get("message"),
                                           ctx.get("exception")))
        config = {
            "listeners": {"default": {"type": "tcp", "bind": f"127.0.0.1:{self.port}"}},
            "plugins": {"amqtt.plugins.authentication.AnonymousAuthPlugin":
                        {"allow_anonymous": True}},
        }

        async def boot() -> None:
            self._broker = Broker(config, loop=loop)
            await self._broker.start()

        try:
            loop.run_until_complete(boot())
        except BaseException as exc:  # noqa: BLE001 - reported to the starting thread
            self._error = exc
            self._started.set()
            return
        self._started.set()
        loop.run_forever()

    def stop(self) -> None:
        loop = self._loop
        if loop is None or self._broker is None:
            return
        fut = asyncio.run_coroutine_threadsafe(self._broker.shutdown(), loop)
        try:
            fut.result(10)
        except Exception:  # noqa: BLE001 - stopping anyway
            pass
        loop.call_soon_threadsafe(loop.stop)
        if self._thread is not None:
            self._thread.join(10)
