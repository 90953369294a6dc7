"""A wall clock stepped back and forward while an urgent heat alert is shelved for 60 s and
conditions are being published: the shelving ends after 60 s by the monotonic clock, and
conditions keep coming (the service in-process, its wall clock injected and stepped; the
real monotonic clock; the machine's broker)."""

from __future__ import annotations

import json
import threading
import time
import uuid

import pytest

from tests.shell.conftest import SLOW, Collector, clear_retained, wait_for
from thermowarden.shell.bootstrap import bootstrap
from thermowarden.shell.clock import Clock

pytestmark = pytest.mark.broker

SITE = """\
site: {{id: stp{uid}, timezone: UTC}}
broker: {{url: "mqtt://127.0.0.1:{port}", client_id: tw-{uid}}}
output: {{prefix: {prefix}}}
evaluation: {{tick_s: 1}}
defaults:
  occupancy: {{always: true}}
  rule_packs: [heat_stress]
  people: {{work_class: moderate, clo: 0.6, acclimatised: true}}
templates:
  - {{topic: "{prefix}-in/{{space}}/nwb", quantity: natural_wet_bulb, interval_s: 60}}
  - {{topic: "{prefix}-in/{{space}}/globe", quantity: globe_temperature, interval_s: 60}}
spaces:
  - {{id: furnace-bay, hot_work: true}}
"""
SHELVE_S = 60.0


def metric(service, name, **labels) -> float:
    return service.metrics.registry.get_sample_value(name, labels or None) or 0.0


@pytest.mark.parametrize("step_s", [-7200.0, 3600.0], ids=["back-2h", "forward-1h"])
def test_shelving_and_conditions_through_a_clock_step(tmp_path, system_broker_port, step_s):
    port = system_broker_port
    uid = uuid.uuid4().hex[:6]
    prefix = f"twstep-{uid}"
    site = tmp_path / "site.yaml"
    site.write_text(SITE.format(uid=uid, port=port, prefix=prefix))
    offset = [0.0]
    clock = Clock(wall=lambda: time.time() + offset[0])
    running = bootstrap(str(site), state_dir=str(tmp_path / "state"), clock=clock)
    service = running.service
    watcher = Collector(port, [f"{prefix}/#"])
    thread = threading.Thread(target=service.run, daemon=True)
    feeding = threading.Event()
    # WBGT (ISO 7243, indoors) = 0.7 x 30 + 0.3 x 45 = 34.5 °C: above the acclimatised
    # reference for moderate work (about 28 °C), so the urgent level at once

    def feed() -> None:
        while not feeding.is_set():
            watcher.publish(f"{prefix}-in/furnace-bay/nwb", "30.0")
            watcher.publish(f"{prefix}-in/furnace-bay/globe", "45.0")
            feeding.wait(2.0)

    feeder = threading.Thread(target=feed, daemon=True)

    def events(kind: str) -> list[dict]:
        return [e for e in watcher.events(prefix)
                if e.get("event") == kind and e["advisory"]["rule"] == "heat_stress.wbgt"]

    def conditions() -> int:
        with watcher.lock:
            return sum(1 for t, p, _ in watcher.messages
                       if t.endswith("/furnace-bay/conditions") and p)

    thread.start()
    feeder.start()
    try:
        wait_for(lambda: service.ready()[0], SLOW, "the service to be ready")
        wait_for(lambda: any(e["advisory"]["priority"] == "urgent" for e in events("raised")),
                 SLOW, "the urgent heat alert")
        adv = next(e["advisory"] for e in events("raised"))
        watcher.publish(f"{prefix}/commands/safety/shelve", json.dumps({
            "advisory_id": adv["id"], "by": "safety lead", "reason": "clock-step drill",
            "duration_s": SHELVE_S, "request_id": "s1"}))
        wait_for(lambda: any(r.get("request_id") == "s1"
                             for r in watcher.json_on(f"{prefix}/replies")), SLOW, "the reply")
        shelved_at = time.monotonic()
        reply = next(r for r in watcher.json_on(f"{prefix}/replies")
                     if r.get("request_id") == "s1")
        assert reply["ok"], reply
        assert events("shelved")
        before = conditions()
        direction = "backward" if step_s < 0 else "forward"
        offset[0] += step_s
        wait_for(lambda: metric(service, "thermowarden_clock_steps_total",
                                direction=direction) == 1, SLOW, "the step to be seen")
        # the shelving ends on time by the monotonic clock: not at once after a step
        # forward, not the length of the step later after a step back
        wait_for(lambda: events("unshelved"), SHELVE_S + SLOW, "the shelving to end")
        took = time.monotonic() - shelved_at
        assert SHELVE_S - 2.0 <= took <= SHELVE_S + 15.0, took
        # conditions kept coming through the step (new readings: at most every 15 s)
        assert conditions() >= before + 2
        after = conditions()
        wait_for(lambda: conditions() >= after + 1, SLOW, "conditions after the shelving")
        ok, parts = service.ready()
        assert ok and parts["conditions"], parts
        # /readyz: not ready while no conditions go out (as if none had for ten minutes)
        service.outbox.last_conditions_sent -= 600.0
        ok, parts = service.ready()
        assert not ok and parts["conditions"] is False, parts
        wait_for(lambda: service.ready()[0], SLOW, "ready again with the next conditions")
    finally:
        feeding.set()
        feeder.join(10)
        service.request_stop()
        thread.join(30)
        watcher.close()
        clear_retained(port, prefix)
    assert service.stopped.is_set()
