"""Hot reload of the running service by SIGHUP, against a real broker: an invalid
configuration is refused with ``check``'s messages in the log while the old one keeps
running; a valid one changes a threshold and adds a space without raising again what is
already live."""

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


def site_text(prefix: str, port: int, site_id: str, limit_a: float = 30,
              extra_space: str = "", typo: bool = False) -> str:
    return textwrap.dedent(f"""\
        site: {{id: {site_id}, timezone: UTC}}
        broker: {{url: "mqtt://127.0.0.1:{port}", client_id: {site_id}}}
        output: {{prefix: {prefix}}}
        evaluation: {{tick_s: 1}}
        rule_dirs: [packs]
        defaults: {{occupancy: {{always: true}}, rule_packs: [limits]}}
        templates:
          - {{topic: "{prefix}-in/{{space}}/ta", quantity: air_temperature}}
        spaces:
          - id: room-a
            {"hot_wrok" if typo else "hot_work"}: false
            parameters: {{limit: {limit_a}}}
          - id: room-b
        """) + extra_space


def raised(watcher: Collector, prefix: str) -> list[str]:
    return [e["advisory"]["space"]["id"] for e in watcher.events(prefix)
            if e["event"] == "raised"]


def test_sighup_reload(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twtest/{uuid.uuid4().hex[:8]}"
    site_id = f"t{uuid.uuid4().hex[:6]}"
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "limits.yaml").write_text(PACK)
    site = tmp_path / "site.yaml"
    site.write_text(site_text(prefix, port, site_id))
    watcher = Collector(port, [f"{prefix}/#"])
    sensor = Collector(port, [])
    svc = ServiceProcess(site, tmp_path / "state").start()
    try:
        sensor.publish(f"{prefix}-in/room-b/ta", "31")
        wait_for(lambda: raised(watcher, prefix) == ["room-b"], 15, "room-b raised")

        # an invalid file: refused, with check's own lines in the log, the old one runs on
        site.write_text(site_text(prefix, port, site_id, limit_a=25, typo=True))
        expected = [str(i) for i in check_site(str(site)).issues]
        assert expected and "did you mean 'hot_work'" in expected[0]
        svc.proc.send_signal(signal.SIGHUP)
        wait_for(lambda: "still running the previous configuration" in svc.logtext(), 20,
                 "the refusal in the log")
        log = svc.logtext()
        for line in expected:
            assert f"reload refused: {line}" in log
        sensor.publish(f"{prefix}-in/room-a/ta", "27")  # under the old limit of 30
        wait_for(lambda: watcher.json_on(f"{prefix}/spaces/room-a/conditions"), 15,
                 "room-a conditions")
        assert svc.ready()

        # a valid one: room-a's limit goes down to 25, room-c appears
        site.write_text(site_text(prefix, port, site_id, limit_a=25,
                                  extra_space="  - id: room-c\n"))
        svc.proc.send_signal(signal.SIGHUP)
        wait_for(lambda: "reloaded: 3 space(s)" in svc.logtext(), 20, "the reload")
        assert "reload: kept the windows of 2 of 3 space(s)" in svc.logtext()
        # room-b is still hot: were its state lost, it would be raised again, and (same
        # publisher, in order; spaces evaluated in order) that event would come before
        # room-c's
        sensor.publish(f"{prefix}-in/room-b/ta", "31.2")
        sensor.publish(f"{prefix}-in/room-a/ta", "27.5")
        sensor.publish(f"{prefix}-in/room-c/ta", "32")
        wait_for(lambda: "room-c" in raised(watcher, prefix), 20, "room-c (new space) raised")
        assert sorted(raised(watcher, prefix)) == ["room-a", "room-b", "room-c"]
    finally:
        assert svc.stop() == 0
        watcher.close()
        sensor.close()
        clear_retained(port, prefix)
