"""The web page's overview at scale: bytes and time to first byte for a site of 10,000
spaces (a figure, not a timed test).

    python bench/web_overview.py [--spaces 10000] [--repeat 5]

An invented site written as a tree (10 buildings x 5 floors x 200 rooms, topics
``bench/{building}/{floor}/{space}/...``) runs in a real engine: every room gets an air
temperature and humidity, a tenth of them too warm, one tick raises their advisories, and
the effects go to the web page's live view as the service hands them over. The page is then
served by the service's own web server (uvicorn on a thread) and fetched over loopback:

- overview_bytes, overview_ttfb_ms, overview_total_ms: ``GET /`` (the roll-up by building
  and floor, the first 50 live advisories and the first page of 50 spaces), median of
  ``--repeat`` fetches;
- search_ttfb_ms: ``GET /?q=room+17&priority=medium`` (a search with a filter);
- floor_ttfb_ms: ``GET /?where=b03/f2&page=2`` (one floor, second page);
- api_spaces_ms: ``GET /api/spaces`` (every space, for tools).

The last line is one JSON object.
"""

from __future__ import annotations

import argparse
import http.client
import json
import pathlib
import statistics
import sys
import tempfile
import time

REPO = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "daemon"))

PACK = """\
pack: warm
description: a room warmer than its limit (bench only)
rules:
  - id: too_warm
    title: Too warm
    audience: facilities
    priority: medium
    needs: [air_temperature]
    condition: air_temperature > 27
    clear: air_temperature < 26
    messages:
      title: "{space_name} is warm"
      advice: "Lower the set point or open the blinds."
      rationale: "Air temperature {air_temperature:.1f} °C is above 27 °C."
"""


def site_text(n: int, buildings: int = 10, floors: int = 5) -> str:
    per_floor = max(1, n // (buildings * floors))
    lines = ["site: {id: bench, name: Bench Campus, timezone: UTC}",
             "output: {prefix: tw/bench}", "rule_dirs: [packs]",
             "defaults: {occupancy: {always: true}, rule_packs: [warm], "
             "people: {met: 1.2, clo: 0.6}}",
             "templates:",
             '  - {topic: "bench/{building}/{floor}/{space}/ta", quantity: air_temperature}',
             '  - {topic: "bench/{building}/{floor}/{space}/rh", quantity: relative_humidity}',
             "buildings:"]
    made = 0
    for b in range(buildings):
        lines += [f"  - id: b{b:02d}", f"    name: Building {b + 1}", "    floors:"]
        for f in range(1, floors + 1):
            lines += [f"      - id: f{f}", f"        name: Floor {f}", "        spaces:"]
            for r in range(per_floor):
                if made >= n:
                    break
                lines.append(f'          - {{id: b{b:02d}-f{f}-{r:03d}, topic_name: "{r:03d}", '
                             f"name: Building {b + 1} room {f}{r:03d}}}")
                made += 1
    return "\n".join(lines) + "\n"


def fetch(port: int, path: str) -> tuple[int, float, float]:
    """(bytes, time to first byte, total time), seconds."""
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    t0 = time.perf_counter()
    conn.request("GET", path)
    resp = conn.getresponse()
    first = resp.read(1)
    t1 = time.perf_counter()
    rest = resp.read()
    t2 = time.perf_counter()
    conn.close()
    assert resp.status == 200, (path, resp.status)
    return len(first) + len(rest), t1 - t0, t2 - t0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--spaces", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()

    from thermowarden.config import load_site
    from thermowarden.engine import Engine
    from thermowarden.rules import load_rule_packs
    from thermowarden.shell.inbox import Inbox
    from thermowarden.shell.web import build_web
    from thermowarden.site_model import build_site_model

    tmp = pathlib.Path(tempfile.mkdtemp(prefix="tw-web-bench-"))
    (tmp / "packs").mkdir()
    (tmp / "packs" / "warm.yaml").write_text(PACK)
    site = tmp / "site.yaml"
    site.write_text(site_text(args.spaces))
    t0 = time.perf_counter()
    config = load_site(site, {})
    load_s = time.perf_counter() - t0
    config = config.model_copy(update={"web": config.web.model_copy(
        update={"enabled": True, "port": 0})})
    packs = load_rule_packs(["warm"], config.rule_dirs, base=site)
    engine = Engine(config, build_site_model(config), packs)
    now = 1_780_000_000.0
    items = []
    for k, s in enumerate(config.spaces):
        base = f"bench/{s.building}/{s.floor}/{s.topic_word}"
        warm = k % 10 == 0
        items.append((f"{base}/ta", b"28.5" if warm else b"23.0", now, False))
        items.append((f"{base}/rh", b"45", now, False))
    engine.messages(items)
    effects = engine.tick(now + 1)
    import socket

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    config = config.model_copy(update={"web": config.web.model_copy(update={"port": port})})
    view, server, _follow = build_web(config, site, packs, Inbox(16), tmp / "store.sqlite",
                                      lambda: now + 1)
    view.observe(effects)
    server.start()
    try:
        fetch(port, "/")  # warm up
        runs = [fetch(port, "/") for _ in range(args.repeat)]
        search = [fetch(port, "/?q=room+17&priority=medium") for _ in range(args.repeat)]
        floor = [fetch(port, "/?where=b03/f2&page=2") for _ in range(args.repeat)]
        api = [fetch(port, "/api/spaces") for _ in range(max(1, args.repeat // 2))]
    finally:
        server.stop()
    figures = {
        "spaces": len(config.spaces),
        "live_advisories": len(view.live()),
        "load_site_s": round(load_s, 2),
        "overview_bytes": runs[0][0],
        "overview_ttfb_ms": round(statistics.median(r[1] for r in runs) * 1000, 1),
        "overview_total_ms": round(statistics.median(r[2] for r in runs) * 1000, 1),
        "search_ttfb_ms": round(statistics.median(r[1] for r in search) * 1000, 1),
        "search_bytes": search[0][0],
        "floor_ttfb_ms": round(statistics.median(r[1] for r in floor) * 1000, 1),
        "api_spaces_ms": round(statistics.median(r[2] for r in api) * 1000, 1),
        "api_spaces_bytes": api[0][0],
    }
    for name, v in figures.items():
        print(f"{name:>20}: {v}")
    print(json.dumps(figures))


if __name__ == "__main__":
    main()
