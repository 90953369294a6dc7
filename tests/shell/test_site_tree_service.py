"""A site of three buildings of two floors, its sensors publishing on
``{building}/{floor}/{space}/ta`` with the same room numbers in every building: checked,
run against the real broker, and reloaded by SIGHUP with a floor added."""

from __future__ import annotations

import signal
import textwrap
import uuid

import pytest

from tests.shell.conftest import Collector, ServiceProcess, clear_retained, wait_for
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


def site_text(prefix: str, port: int, site_id: str, third_floor: bool = False) -> str:
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
                lines.append(f'          - {{id: {b}-{f}-{room}, topic_name: "{room}"}}')
        buildings.append("\n".join(lines))
    return textwrap.dedent(f"""\
        site: {{id: {site_id}, timezone: UTC}}
        broker: {{url: "mqtt://127.0.0.1:{port}", client_id: {site_id}}}
        output: {{prefix: {prefix}}}
        evaluation: {{tick_s: 1}}
        rule_dirs: [packs]
        defaults: {{occupancy: {{always: true}}, rule_packs: [limits]}}
        templates:
          - {{topic: "{prefix}-in/{{building}}/{{floor}}/{{space}}/ta", quantity: air_temperature}}
        buildings:
        """) + "\n".join(buildings) + "\n"


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
    site.write_text(site_text(prefix, port, site_id))
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
        site.write_text(site_text(prefix, port, site_id, third_floor=True))
        assert check_site(str(site)).ok
        svc.proc.send_signal(signal.SIGHUP)
        wait_for(lambda: "reloaded: 14 space(s)" in svc.logtext(), 20, "the reload")
        assert "reload: kept the windows of 12 of 14 space(s)" in svc.logtext()
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
