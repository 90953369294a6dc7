"""The operations endpoint (off unless a port is given): /healthz, /readyz, /metrics."""

from __future__ import annotations

import errno
import json
import threading
from collections.abc import Callable
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

from thermowarden.shell.metrics import Metrics


def start_http(port: int, metrics: Metrics, alive: Callable[[], bool],
               ready: Callable[[], tuple[bool, dict[str, bool]]],
               host: str = "127.0.0.1") -> ThreadingHTTPServer:
    """Serve the endpoint on a daemon thread; returns the server (call shutdown())."""

    class Handler(BaseHTTPRequestHandler):
        def do_GET(self) -> None:  # noqa: N802 - the http.server API
            if self.path == "/healthz":
                ok = alive()
                self._send(200 if ok else 503, "application/json",
                           json.dumps({"alive": ok}).encode())
            elif self.path == "/readyz":
                ok, parts = ready()
                self._send(200 if ok else 503, "application/json",
                           json.dumps({"ready": ok, **parts}).encode())
            elif self.path == "/metrics":
                self._send(200, CONTENT_TYPE_LATEST, generate_latest(metrics.registry))
            else:
                self._send(404, "text/plain", b"not found\n")

        def _send(self, code: int, ctype: str, body: bytes) -> None:
            self.send_response(code)
            self.send_header("Content-Type", ctype)
            self.send_header("Content-Length", str(len(body)))
            self.end_headers()
            self.wfile.write(body)

        def log_message(self, format: str, *args: object) -> None:  # noqa: A002
            pass

    try:
        server = ThreadingHTTPServer((host, port), Handler)
    except OSError as exc:
        hint = " (is another process using it? choose another with --http-port)" \
            if exc.errno == errno.EADDRINUSE else ""
        raise OSError(f"cannot serve the operations endpoint on {host}:{port}: "
                      f"{exc.strerror}{hint}") from None
    server.daemon_threads = True
    threading.Thread(target=server.serve_forever, name="http-ops", daemon=True).start()
    return server
