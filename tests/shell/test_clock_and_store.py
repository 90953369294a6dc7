"""The service's clock stepped both ways (an injected wall clock, the real monotonic one)
and a damaged store."""

from __future__ import annotations

import datetime as dt
import json
import os
import stat
import subprocess
import sys
import textwrap
import threading
import time
import uuid

import pytest

from tests.shell.conftest import Collector, ServiceProcess, clear_retained, wait_for, write_site
from thermowarden.shell.bootstrap import bootstrap
from thermowarden.shell.clock import Clock
from thermowarden.shell.store import Store, StoreError

pytestmark = pytest.mark.broker

SITE = """\
site: {{id: clk{uid}, timezone: UTC}}
broker: {{url: "mqtt://127.0.0.1:{port}", client_id: tw-{uid}}}
output: {{prefix: {prefix}}}
evaluation: {{tick_s: 1}}
defaults: {{occupancy: {{always: true}}, rule_packs: [sensor_health]}}
spaces:
  - id: room-a
    points:
      - {{topic: "{prefix}-in/room-a/ta", quantity: air_temperature, interval_s: 60}}
      - topic: "{prefix}-in/room-a/tj"
        quantity: globe_temperature
        interval_s: 60
        format: {{type: json, value_path: v, time_path: t}}
"""


def sample(metrics, name, **labels) -> float:
    return metrics.registry.get_sample_value(name, labels or None) or 0.0


def accepted(metrics) -> float:
    return sum(sample(metrics, "thermowarden_readings_accepted_total", quantity=q)
               for q in ("air_temperature", "globe_temperature"))


def test_clock_steps_forward_and_back(tmp_path, system_broker_port):
    port = system_broker_port
    uid = uuid.uuid4().hex[:6]
    prefix = f"twclock-{uid}"
    site = tmp_path / "site.yaml"
    site.write_text(SITE.format(uid=uid, port=port, prefix=prefix))
    # the wall clock starts 10 minutes before the 07:00 digest of some day: the service
    # schedules the digest when it is built, which may take a while on a loaded machine (a
    # first build in the process compiles the comfort models); started after 07:00, the
    # next digest would be tomorrow's and the step forward would not reach it
    today = dt.datetime.now(dt.UTC).date()
    target = dt.datetime.combine(today, dt.time(6, 50, 0), dt.UTC).timestamp()
    offset = [target - time.time()]
    clock = Clock(wall=lambda: time.time() + offset[0])
    running = bootstrap(str(site), state_dir=str(tmp_path / "state"), clock=clock)
    service = running.service
    m = service.metrics
    watcher = Collector(port, [f"{prefix}/#"])
    thread = threading.Thread(target=service.run, daemon=True)
    thread.start()

    def digests() -> list[dict]:
        return [e for e in watcher.json_on(f"{prefix}/events/") if e.get("note") == "daily digest"]

    def reading(timestamped: bool, value: float) -> None:
        if timestamped:
            body = json.dumps({"v": value, "t": clock.now()})
            watcher.publish(f"{prefix}-in/room-a/tj", body)
        else:
            watcher.publish(f"{prefix}-in/room-a/ta", str(value))

    try:
        wait_for(lambda: service.ready()[0], 60, "the service to be ready")
        reading(True, 22.0)
        wait_for(lambda: accepted(m) >= 1, 15, "the first reading")
        assert not digests()
        # forward one hour: past 07:00, the digest runs once; readings stamped with the
        # corrected time are taken (not "in the future")
        offset[0] += 3600
        wait_for(lambda: sample(m, "thermowarden_clock_steps_total", direction="forward") == 1,
                 10, "the forward step to be seen")
        wait_for(lambda: len(digests()) == 3, 15, "one digest per audience")
        reading(True, 23.0)
        reading(False, 23.5)
        wait_for(lambda: accepted(m) >= 3, 15, "readings after the step")
        digest = next(j for j in service.scheduled.calendar if j.name == "digest")
        assert digest.due > clock.now() + 22 * 3600  # tomorrow's
        # back two hours: evaluations go on, readings are taken, the digest does not run again
        evaluations = sample(m, "thermowarden_evaluation_seconds_count")
        offset[0] -= 7200
        wait_for(lambda: sample(m, "thermowarden_clock_steps_total", direction="backward") == 1,
                 10, "the backward step to be seen")
        reading(False, 24.0)
        reading(True, 24.5)
        wait_for(lambda: accepted(m) >= 5, 15,
                 "readings after stepping back")
        wait_for(lambda: sample(m, "thermowarden_evaluation_seconds_count") >= evaluations + 3,
                 15, "evaluations after stepping back")
        assert digest.due > clock.now() + 24 * 3600  # still tomorrow's 07:00, not today's
        time.sleep(1.0)
        assert len(digests()) == 3
        for reason in ("in_future", "too_old", "out_of_order"):
            assert sample(m, "thermowarden_messages_rejected_total", reason=reason) == 0, reason
    finally:
        service.request_stop()
        thread.join(30)
        watcher.close()
        clear_retained(port, prefix)
    assert service.stopped.is_set()


def test_damaged_store_one_line_and_moved_aside(tmp_path, system_broker_port):
    port = system_broker_port
    prefix = f"twstore-{uuid.uuid4().hex[:6]}"
    site = write_site(tmp_path, prefix, port, ["room-a"])
    state = tmp_path / "state"
    # a first run makes the store: folder 0700, file 0600
    svc = ServiceProcess(site, state).start()
    svc.stop()
    (db,) = state.glob("*.sqlite3")
    assert stat.S_IMODE(state.stat().st_mode) == 0o700
    assert stat.S_IMODE(db.stat().st_mode) == 0o600
    for side in state.glob("*.sqlite3-*"):
        side.unlink()
    size = db.stat().st_size
    with open(db, "r+b") as fh:  # damage it: keep the header, scramble the pages
        fh.seek(100)
        fh.write(os.urandom(size - 100))
    cmd = [sys.executable, "-m", "thermowarden.cli", "run", "--config", str(site),
           "--state-dir", str(state)]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert res.returncode == 78
    lines = [x for x in res.stderr.splitlines() if x.startswith("thermowarden run:")]
    assert len(lines) == 1 and str(db) in lines[0] and "--move-damaged-store" in lines[0]
    assert "Traceback" not in res.stderr
    # moved aside, the service starts with an empty store; the site file is untouched
    before = site.read_text()
    svc = ServiceProcess(site, state, "--move-damaged-store").start()
    svc.stop()
    aside = list(state.glob("*.sqlite3.damaged-*"))
    assert len(aside) == 1 and aside[0].read_bytes()[100:200] != b"\0" * 100
    assert site.read_text() == before
    assert "moved aside" in svc.logtext()
    clear_retained(port, prefix)


def test_store_errors_name_the_file(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    Store(ro / "s.sqlite3").close()
    (ro / "s.sqlite3").chmod(0o400)
    ro.chmod(0o500)
    try:
        if os.geteuid() == 0:
            pytest.skip("root ignores file permissions")
        with pytest.raises(StoreError) as err:
            s = Store(ro / "s.sqlite3")
            s.put("k", 1)
        assert str(ro / "s.sqlite3") in str(err.value) and "\n" not in str(err.value)
    finally:
        ro.chmod(0o700)
    notdb = tmp_path / "notdb.sqlite3"
    notdb.write_text(textwrap.dedent("this is not a database\n") * 100)
    with pytest.raises(StoreError) as err:
        Store(notdb)
    assert str(notdb) in str(err.value) and "--move-damaged-store" in str(err.value)
