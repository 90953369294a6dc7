"""The broker's nodes: ``broker.url`` then ``broker.fallback_urls`` (the nodes of a clustered
broker), tried in turn by the MQTT link (:mod:`thermowarden.shell.mqtt_link`). A failed
connect moves to the next node at once; a round over every node ends in a wait, during which
the nodes' ports are probed so that the link starts again as soon as one answers.
"""

from __future__ import annotations

import socket
import urllib.parse


def parse_url(url: str) -> tuple[str, int, bool]:
    """``mqtt://host:port`` or ``mqtts://host:port`` -> (host, port, TLS)."""
    u = urllib.parse.urlparse(url)
    tls = u.scheme == "mqtts"
    return u.hostname or "127.0.0.1", u.port or (8883 if tls else 1883), tls


class BrokerNodes:
    """The node in use (:attr:`host`, :attr:`port`) and the round over all of them."""

    def __init__(self, urls: list[str]) -> None:
        self.nodes = [parse_url(u) for u in urls]
        """Every broker node: (host, port, tls), tried in turn."""
        self.node = 0
        self.host, self.port, self.tls = self.nodes[0]
        self.round_start = 0
        """The node a round over all nodes started from."""

    def __len__(self) -> int:
        return len(self.nodes)

    def probe(self) -> bool:
        """True when a broker node's port accepts a TCP connection (that node is tried
        next)."""
        for k in range(len(self.nodes)):
            j = (self.node + k) % len(self.nodes)
            host, port, _ = self.nodes[j]
            try:
                with socket.create_connection((host, port), timeout=0.5):
                    self.use(j)
                    return True
            except OSError:
                continue
        return False

    def use(self, j: int) -> None:
        self.node = j
        self.host, self.port, _ = self.nodes[j]

    def next(self) -> bool:
        """Move to the next broker node; True when that starts a new round over all nodes
        (wait before it), always True with one node."""
        self.use((self.node + 1) % len(self.nodes))
        return self.node == self.round_start

    def new_round(self) -> None:
        """A round over all nodes starts from the node in use."""
        self.round_start = self.node
