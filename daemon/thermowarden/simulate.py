"""``thermowarden simulate``: publish an invented scenario to a broker in the site's own
topic and payload formats, or write it as a feed file for ``thermowarden replay``.

The scenario generators live in ``simulated_feeds/`` (package ``thermowarden.
simulated_feeds``). Published live, readings are re-stamped with the wall-clock time at
which they are sent (their payload timestamps too), so a running service accepts them.
"""

from __future__ import annotations

import datetime as dt
import gzip
import json
import sys
import time
from collections.abc import Callable, Iterator
from typing import Any, TextIO

SCENARIOS: dict[str, str] = {
    "larkfield-day": "one summer day at Larkfield Works (deploy/example-site.yaml): office "
                     "sun and fans, bakery heat, loading yard, studio, sensor faults",
    "larkfield-demo-day": "the demo's day: larkfield-day, then a night bake in the bakery to "
                          "23:00 (heat stress foreseen, a forecast withdrawn, a sudden "
                          "crossing with no warning)",
    "larkfield-heatwave": "several whole days of a building heat wave at Larkfield Works "
                          "(the studio's running mean outdoor temperature moves)",
}
_TIME_KEYS = ("ts", "time", "bt")


def scenario_records(name: str, days: int = 3, seed: int | None = None
                     ) -> Iterator[dict[str, Any]]:
    from thermowarden.simulated_feeds.larkfield import demo_day, larkfield_day, larkfield_days

    if name == "larkfield-day":
        records: Iterator[dict[str, Any]] = larkfield_day(seed=seed or 20260714)
        return records
    if name == "larkfield-demo-day":
        records = demo_day(seed=seed or 20260714)
        return records
    if name == "larkfield-heatwave":
        records = larkfield_days(days=days, seed=seed or 20260714)
        return records
    raise ValueError(f"unknown scenario {name!r} (known: {', '.join(SCENARIOS)})")


def retime(payload: Any, old_t: float, new_t: float) -> Any:
    """Replace timestamps inside a payload (epoch s/ms, ISO 8601) that belong to ``old_t``."""
    shift = new_t - old_t

    def walk(node: Any) -> Any:
        if isinstance(node, list):
            return [walk(x) for x in node]
        if isinstance(node, dict):
            out = {}
            for k, v in node.items():
                if k in _TIME_KEYS and isinstance(v, int | float) and not isinstance(v, bool):
                    scale = 1000.0 if v > 1e11 else 1.0
                    if abs(v / scale - old_t) < 3600:
                        # keep sub-second precision: readings a minute apart in the
                        # scenario are a tenth of a second apart at --speed 450, and a
                        # stamp truncated to whole seconds would make them duplicates
                        moved = (v / scale + shift) * scale
                        v = int(moved) if moved == int(moved) else round(moved, 3)
                elif k in _TIME_KEYS and isinstance(v, str):
                    try:
                        t = dt.datetime.fromisoformat(v.replace("Z", "+00:00"))
                        v = (t + dt.timedelta(seconds=shift)).isoformat()
                    except ValueError:
                        pass
                else:
                    v = walk(v)
                out[k] = v
            return out
        return node

    return walk(payload)


def write_feed(records: Iterator[dict[str, Any]], path: str) -> int:
    opener: Callable[..., TextIO] = gzip.open if path.endswith(".gz") else open
    n = 0
    with opener(path, "wt", encoding="utf-8") as fh:
        for rec in records:
            fh.write(json.dumps(rec, separators=(",", ":")) + "\n")
            n += 1
    return n


def publish_live(records: Iterator[dict[str, Any]], host: str, port: int, protocol: str,
                 speed: float, out: TextIO = sys.stderr,
                 username: str | None = None, password: str | None = None) -> int:
    """Publish in time order, ``speed`` times faster than the scenario's own clock."""
    import paho.mqtt.client as mqtt
    from paho.mqtt.enums import CallbackAPIVersion

    from thermowarden.shell.buffered_client import release_sockets

    client = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                         protocol=mqtt.MQTTv5 if protocol == "5" else mqtt.MQTTv311)
    if username:
        client.username_pw_set(username, password)
    client.connect(host, port, 30)
    client.loop_start()
    n = 0
    first: float | None = None
    wall0 = time.time()
    try:
        for rec in records:
            if first is None:
                first = rec["t"]
            due = wall0 + (rec["t"] - first) / speed
            delay = due - time.time()
            if delay > 0:
                time.sleep(delay)
            now = time.time()
            p = retime(rec["payload"], rec["t"], now)
            body = p if isinstance(p, str) else json.dumps(p)
            client.publish(rec["topic"], body, qos=0)
            n += 1
            if n % 1000 == 0:
                out.write(f"{n} readings published\n")
    finally:
        client.loop_stop()
        client.disconnect()
        release_sockets(client)
    return n
