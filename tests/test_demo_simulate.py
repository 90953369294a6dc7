"""The demo (embedded broker, service, simulator, summary), `simulate`, and the service's
daily report."""

from __future__ import annotations

import gzip
import json
import subprocess
import sys

import pytest

from tests.conftest import COMMAND_LIMIT_S, REPO
from thermowarden.simulate import retime, scenario_records

SITE = REPO / "deploy" / "example-site.yaml"


def _demo_day() -> str:
    """The whole demo day, unpaced (the clock is driven by the demo either way)."""
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "demo", "--plain",
                        "--speed", "1000000"], capture_output=True, text=True,
                       timeout=COMMAND_LIMIT_S)
    assert r.returncode == 0, r.stderr[-3000:]
    return r.stdout


def test_demo_gives_the_same_events_every_run_even_with_both_cores_busy():
    first = _demo_day()
    busy = subprocess.Popen([sys.executable, "-c", "while 1: pass"])
    try:
        second = _demo_day()
    finally:
        busy.kill()
        busy.wait(10)
    assert "started an embedded MQTT broker" in first
    assert "demo summary" in first and "advisories raised:" in first
    assert " raised " in first  # events shown as they happen
    assert "occupational hygienist" in first

    def events(out: str) -> list[str]:
        return [ln for ln in out.splitlines() if "embedded MQTT broker" not in ln]

    assert events(first) == events(second)
    # every event counted in the summary was printed, the late ones too
    raised_lines = [ln for ln in first.splitlines() if len(ln.split()) > 2
                    and ln.split()[2] == "raised"]
    counted = int(first.split("advisories raised: ")[1].split()[0])
    assert len(raised_lines) == counted
    # the day's own numbers: the heat of the afternoon reaches the safety lead
    assert any(" safety " in ln and "Bakery" in ln for ln in raised_lines)


def test_demo_stops_after_its_duration():
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "demo", "--duration", "5",
                        "--plain"], capture_output=True, text=True, timeout=COMMAND_LIMIT_S)
    assert r.returncode == 0, r.stderr[-3000:]
    assert "demo summary" in r.stdout


def test_demo_live_view_fits_80_columns_and_shows_the_newest_advice():
    import datetime as dt
    import io

    from thermowarden.demo import DemoView

    dv = DemoView("p", dt.UTC, width=80)
    advisory = {"id": "a1", "space": {"id": "office-west"}, "audience": "facilities",
                "priority": "medium", "title": "Lower the blinds on the west facade " * 3,
                "advice": "Lower the west blinds to cut the radiant load by the window; "
                          "the operative temperature should fall by about a degree. " * 2}
    dv.events.append({"event": "raised", "at": "2026-07-15T13:00:00Z",
                      "advisory": advisory})
    dv.conditions["office-west"] = {"indices": {"operative_temperature": {"value": 27.3}}}
    buf = io.StringIO()
    dv.render(1_784_120_400.0, 1_784_073_600.0, 1_784_160_000.0, buf)
    lines = buf.getvalue().replace("\x1b[H\x1b[2J", "").splitlines()
    assert max(len(ln) for ln in lines) <= 80
    assert any(ln.startswith("newest advice (office-west, facilities): Lower the west")
               for ln in lines)


def test_simulate_writes_a_replayable_feed(tmp_path):
    feed = tmp_path / "heatwave.jsonl.gz"
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "simulate", "--scenario",
                        "larkfield-heatwave", "--days", "2", "--output", str(feed)],
                       capture_output=True, text=True, timeout=COMMAND_LIMIT_S)
    assert r.returncode == 0, r.stderr
    with gzip.open(feed, "rt") as fh:
        lines = fh.readlines()
    assert len(lines) > 50_000
    first, last = json.loads(lines[0]), json.loads(lines[-1])
    assert last["t"] - first["t"] > 47 * 3600  # two whole days


def test_scenarios_are_seeded():
    a = [r for _, r in zip(range(200), scenario_records("larkfield-day"), strict=False)]
    b = [r for _, r in zip(range(200), scenario_records("larkfield-day"), strict=False)]
    assert a == b


def test_retime_moves_embedded_timestamps():
    p = [{"bn": "x:", "bt": 1000.0, "n": "a", "v": 1}, {"n": "b", "v": 2}]
    assert retime(p, 1000.0, 5000.0)[0]["bt"] == 5000.0
    j = {"temp_c": 20, "ts": 1000}
    assert retime(j, 1000.0, 1060.0)["ts"] == 1060
    iso = {"time": "1970-01-01T00:16:40+00:00"}
    assert retime(iso, 1000.0, 1060.0)["time"].startswith("1970-01-01T00:17:40")
    assert retime("21.5", 1000.0, 2000.0) == "21.5"


def test_retime_keeps_readings_apart_at_high_speed():
    """At --speed 450, readings 60 s apart in the scenario are 0.13 s apart live: their
    stamps (epoch seconds given as integers) must stay distinct, or the service rejects
    the second one as a duplicate."""
    wall = 1_790_000_000.2
    a = retime({"ts": 1000}, 1000.0, wall)["ts"]
    b = retime({"ts": 1060}, 1060.0, wall + 60 / 450)["ts"]
    assert a != b and b - a == pytest.approx(60 / 450, abs=0.002)
    ms = retime({"ts": 1_700_000_000_000}, 1_700_000_000.0, wall)["ts"]
    assert isinstance(ms, int | float) and abs(ms / 1000 - wall) < 0.002


def test_service_writes_a_daily_report(tmp_path):
    from thermowarden.shell.bootstrap import bootstrap

    running = bootstrap(str(SITE), broker_url="mqtt://127.0.0.1:9", state_dir=str(tmp_path))
    svc = running.service
    engine = svc.engine
    now = svc.clock.now()
    for k in range(3):
        engine.message("larkfield/office-west/air/temperature", b"24.0", now + k)
        engine.sample_every_s = 1.0
        svc.execute(engine.tick(now + k + 0.5))
    path = svc.scheduled.daily_report(now + 86_400)
    text = path.read_text()
    assert path.name.startswith("larkfield-") and "Second floor office, west facade" in text
    assert "<h2>Summary</h2>" in text
    svc.store.close()
