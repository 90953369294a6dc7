"""A site of three buildings of two floors, its sensors publishing on
``{building}/{floor}/{space}/ta`` with the same room numbers in every building: checked,
run against the real broker, and reloaded by SIGHUP with a floor added."""

from __future__ import annotations

import json
import signal
import textwrap
import urllib.error
import urllib.request
import uuid

import pytest

from tests.shell.conftest import (
    Collector,
    ServiceProcess,
    clear_retained,
    free_port,
    wait_for,
)
from thermowarden.site_check import check_site

pytestmark = pytest.mark.broker

PACK = """\
pack: limits
description: a threshold per space
rules:
  - id: hot
    title: Hot
    audience: facilities
    needs: [air_temperature]
    condition: air_temperature > limit
    clear: air_temperature < limit - 1
    parameters: {limit: 30}
    messages: {title: "{space_name} is hot", advice: "Cool it.", rationale: "Above {limit}."}
"""

BUILDINGS = ("north", "south", "east")


def site_text(prefix: str, port: int, site_id: str, web_port: int,
              third_floor: bool = False) -> str:
    buildings = []
    for b in BUILDINGS:
        floors = ["f1", "f2"] + (["f3"] if third_floor and b == "east" else [])
        lines = [f"  - id: {b}", f"    name: {b.title()} Building", "    floors:"]
        for f in floors:
            lines.append(f"      - id: {f}")
            if b == "south" and f == "f2":
                lines.append("        parameters: {limit: 25}")  # passed down to its rooms
            lines.append("        spaces:")
            for room in ("01", "02"):
                if third_floor and (b, f, room) == ("north", "f1", "02"):
                    continue  # the reload removes this room
                lines.append(f'          - {{id: {b}-{f}-{room}, topic_name: "{room}"}}')
        buildings.append("\n".join(lines))
    return textwrap.dedent(f"""\
        site: {{id: {site_id}, timezone: UTC}}
        broker: {{url: "mqtt://127.0.0.1:{port}", client_id: {site_id}}}
        output: {{prefix: {prefix}}}
        evaluation: {{tick_s: 1}}
        web: {{enabled: true, port: {web_port}}}
        rule_dirs: [packs]
        defaults: {{occupancy: {{always: true}}, rule_packs: [limits]}}
        templates:
          - {{topic: "{prefix}-in/{{building}}/{{floor}}/{{space}}/ta", quantity: air_temperature}}
        buildings:
        """) + "\n".join(buildings) + "\n"


def web_get(port: int, path: str) -> tuple[int, str]:
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}{path}", timeout=10) as r:
            return r.status, r.read().decode()
    except urllib.error.HTTPError as exc:
        with exc:
            return exc.code, exc.read().decode()


def raised(watcher: Collector, prefix: str) -> list[str]:
    return sorted(e["advisory"]["space"]["id"] for e in watcher.events(prefix)
                  if e["event"] == "raised")


def test_tree_site_checked_run_and_reloaded(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twtest/{uuid.uuid4().hex[:8]}"
    site_id = f"t{uuid.uuid4().hex[:6]}"
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "limits.yaml").write_text(PACK)
    site = tmp_path / "site.yaml"
    web_port = free_port()
    site.write_text(site_text(prefix, port, site_id, web_port))
    report = check_site(str(site))
    assert report.ok, [str(i) for i in report.issues]
    assert report.model is not None and report.model.n_spaces == 12
    assert {(s.building, s.floor) for s in report.model.config.spaces} == {
        (b, f) for b in BUILDINGS for f in ("f1", "f2")}

    watcher = Collector(port, [f"{prefix}/#"])
    sensor = Collector(port, [])
    svc = ServiceProcess(site, tmp_path / "state").start()
    try:
        # room 01 exists on every floor of every building: the topic's levels pick it
        sensor.publish(f"{prefix}-in/north/f2/01/ta", "31")
        sensor.publish(f"{prefix}-in/south/f2/02/ta", "27")   # over its floor's limit of 25
        sensor.publish(f"{prefix}-in/east/f1/01/ta", "22")
        wait_for(lambda: raised(watcher, prefix) == ["north-f2-01", "south-f2-02"], 20,
                 "the two hot rooms raised")
        wait_for(lambda: watcher.json_on(f"{prefix}/spaces/east-f1-01/conditions"), 15,
                 "east-f1-01 conditions")
        # a topic for a building the site does not have is counted, not guessed
        sensor.publish(f"{prefix}-in/west/f1/01/ta", "40")
        wait_for(lambda: svc.metric("thermowarden_messages_rejected_total",
                                    'reason="unknown_space"') >= 1,
                 15, "the unknown building counted")

        # a valid reload adds a third floor to the east building
        assert web_get(web_port, "/spaces/north-f1-02")[0] == 200
        assert web_get(web_port, "/spaces/east-f3-01")[0] == 404
        site.write_text(site_text(prefix, port, site_id, web_port, third_floor=True))
        assert check_site(str(site)).ok
        svc.proc.send_signal(signal.SIGHUP)
        wait_for(lambda: "reloaded: 13 space(s)" in svc.logtext(), 20, "the reload")
        assert "reload: kept the windows of 11 of 13 space(s)" in svc.logtext()
        # the page follows: the new floor's rooms have pages, the removed room has none
        # and is in no list
        assert web_get(web_port, "/spaces/east-f3-01")[0] == 200
        assert web_get(web_port, "/spaces/north-f1-02")[0] == 404
        status, body = web_get(web_port, "/?where=north/f1")
        assert status == 200 and 'data-space="north-f1-01"' in body
        assert "north-f1-02" not in body
        status, body = web_get(web_port, "/")
        assert 'data-where="east/f3"' in body and "north-f1-02" not in body
        spaces = json.loads(web_get(web_port, "/api/spaces")[1])["spaces"]
        assert len(spaces) == 13 and {"building": "east", "floor": "f3"}.items() <= next(
            s for s in spaces if s["id"] == "east-f3-01").items()
        sensor.publish(f"{prefix}-in/north/f2/01/ta", "31.2")  # still hot: not raised again
        sensor.publish(f"{prefix}-in/east/f3/01/ta", "33")     # the new floor's room
        wait_for(lambda: "east-f3-01" in raised(watcher, prefix), 20, "the new room raised")
        assert raised(watcher, prefix) == ["east-f3-01", "north-f2-01", "south-f2-02"]
        assert svc.get("/readyz")[0] == 200
    finally:
        assert svc.stop() == 0
        watcher.close()
        sensor.close()
        clear_retained(port, prefix)
