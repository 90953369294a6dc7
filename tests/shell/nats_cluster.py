"""A three-node nats-server cluster on loopback: JetStream and an MQTT 3.1.1 listener on each
node, routes between them. Used by the cluster test and bench/cluster.py.

Per node (nats-server configuration format; ``server_name``, ``jetstream { store_dir }``,
``cluster { name, listen, routes }`` and ``mqtt { listen }``, as its documentation gives
them): the MQTT streams (retained messages, sessions) are created with three replicas once
the JetStream cluster has elected a metadata leader, so a retained message published on one
node is delivered by the others, and survives one node's end.
"""

from __future__ import annotations

import os
import pathlib
import shutil
import signal
import socket
import subprocess
import time


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def nats_program() -> str | None:
    return shutil.which("nats-server") or next(
        (p for p in ("/usr/sbin/nats-server", "/usr/bin/nats-server") if os.access(p, os.X_OK)),
        None)


def _open(port: int) -> bool:
    with socket.socket() as s:
        s.settimeout(0.5)
        return s.connect_ex(("127.0.0.1", port)) == 0


class NatsNode:
    def __init__(self, name: str, workdir: pathlib.Path, routes: list[int], route: int) -> None:
        self.name = name
        self.client = _free_port()
        self.mqtt = _free_port()
        self.route = route
        self.dir = workdir
        self.log = workdir / f"{name}.log"
        self.conf = workdir / f"{name}.conf"
        peers = ", ".join(f"nats-route://127.0.0.1:{p}" for p in routes if p != route)
        self.conf.write_text(
            f"server_name: {name}\n"
            f"listen: 127.0.0.1:{self.client}\n"
            f"jetstream {{ store_dir: \"{workdir / ('js-' + name)}\" }}\n"
            f"cluster {{ name: tw, listen: 127.0.0.1:{route}, routes: [{peers}] }}\n"
            f"mqtt {{ listen: 127.0.0.1:{self.mqtt}, stream_replicas: 3 }}\n")
        self.proc: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"mqtt://127.0.0.1:{self.mqtt}"

    def start(self, program: str) -> None:
        self._fh = open(self.log, "ab")  # noqa: SIM115 - closed in stop()
        self.proc = subprocess.Popen([program, "-c", str(self.conf)],
                                     stdout=subprocess.DEVNULL, stderr=self._fh)

    def alive(self) -> bool:
        return self.proc is not None and self.proc.poll() is None

    def kill(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.send_signal(signal.SIGKILL)
            self.proc.wait(30)
        if self.proc is not None and not self._fh.closed:
            self._fh.close()

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(30)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(30)
        if self.proc is not None and not self._fh.closed:
            self._fh.close()

    def logtext(self) -> str:
        return self.log.read_text(errors="replace") if self.log.exists() else ""


class NatsCluster:
    """Three nodes; :meth:`start` waits until every MQTT port answers and the JetStream
    cluster has a metadata leader (from the nodes' logs)."""

    def __init__(self, workdir: pathlib.Path, program: str, size: int = 3) -> None:
        self.program = program
        routes = [_free_port() for _ in range(size)]
        workdir.mkdir(parents=True, exist_ok=True)
        self.nodes = [NatsNode(f"n{k + 1}", workdir, routes, routes[k]) for k in range(size)]

    def start(self, timeout: float = 120.0) -> NatsCluster:
        for n in self.nodes:
            n.start(self.program)
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            for n in self.nodes:
                if not n.alive():
                    raise RuntimeError(f"nats-server {n.name} exited:\n{n.logtext()[-2000:]}")
            if all(_open(n.mqtt) for n in self.nodes) and any(
                    "JetStream cluster new metadata leader" in n.logtext()
                    or "Self is new JetStream cluster metadata leader" in n.logtext()
                    for n in self.nodes):
                return self
            time.sleep(0.1)
        self.stop()
        raise RuntimeError("the nats-server cluster did not elect a JetStream leader in time")

    def urls(self, first: int) -> str:
        """Every node's MQTT URL, starting with node ``first`` (the --broker list)."""
        order = self.nodes[first:] + self.nodes[:first]
        return ",".join(n.url for n in order)

    def stop(self) -> None:
        for n in self.nodes:
            n.stop()
