"""The daily report of a site of buildings and floors is written from the store on a thread
of its own while the engine thread goes on ticking at its interval (the service runs against
the real broker; the report job is queued as the calendar queues it), and is sent by e-mail
to the audience and, its building's part, to the building's recipients (local SMTP)."""

from __future__ import annotations

import datetime as dt
import email
import email.policy
import threading
import time
import uuid

import numpy as np
import pytest

from tests.shell.conftest import SLOW, clear_retained, wait_for
from tests.shell.delivery_parts import SmtpSink
from thermowarden.shell.bootstrap import bootstrap
from thermowarden.shell.store import Store

pytestmark = pytest.mark.broker

BUILDINGS, FLOORS, ROOMS = 3, 2, 400
TICK_S = 1.0


def site_text(site_id: str, port: int, prefix: str, smtp_port: int) -> str:
    mail = (f"{{smtp: {{host: 127.0.0.1, port: {smtp_port}, tls: none}}, "
            "from: thermowarden@works.invalid, to: [TO]}")
    lines = [f"site: {{id: {site_id}, timezone: UTC}}",
             "delivery:", "  audiences:", "    safety:",
             "      events: [raised, report]",
             "      email: " + mail.replace("TO", "safety-lead@works.invalid"),
             "      buildings:",
             "        b1: {email: " + mail.replace("TO", "b1-team@works.invalid") + "}",
             f'broker: {{url: "mqtt://127.0.0.1:{port}", client_id: {site_id}}}',
             f"output: {{prefix: {prefix}}}",
             f"evaluation: {{tick_s: {TICK_S}}}",
             "defaults: {occupancy: {always: true}, people: {met: 1.2, clo: 0.6}, "
             "rule_packs: [comfort]}",
             "templates:",
             f'  - {{topic: "{prefix}-in/{{building}}/{{floor}}/{{space}}/ta", '
             "quantity: air_temperature}",
             "buildings:"]
    for b in range(1, BUILDINGS + 1):
        lines += [f"  - id: b{b}", f"    name: Building {b}", "    floors:"]
        for f in range(1, FLOORS + 1):
            lines += [f"      - id: f{f}", "        spaces:"]
            lines += [f'          - {{id: b{b}-{f}{r:03d}, topic_name: "{r:03d}"}}'
                      for r in range(ROOMS)]
    return "\n".join(lines) + "\n"


SAMPLE_EVERY_S = 60.0
"""Denser than the engine's 5 minutes, so that the report takes several ticks' time even on
an idle machine (the report counts each sample for the time to the next)."""


def fill(store_path, ids: list[str], day_start: float) -> None:
    """Yesterday's samples, in the shape the engine stores them."""
    rng = np.random.default_rng(7)
    n = len(ids)
    store = Store(store_path)
    count = int(86_400 / SAMPLE_EVERY_S)
    with store.transaction():
        for k in range(count):
            ta = 22.0 + 4.0 * np.sin(np.pi * k / count) + rng.normal(0, 0.5, n)
            cat = np.clip(np.abs(ta - 24.0), 0, 3).astype(int)
            store.add_sample(day_start + SAMPLE_EVERY_S * k, {
                "t": day_start + SAMPLE_EVERY_S * k, "spaces": ids,
                "operative": [round(float(v), 2) for v in ta],
                "category_iso": [int(c) for c in cat], "category_en": [None] * n,
                "en_lower": [None] * n, "en_upper": [None] * n, "band_lower": [20.0] * n,
                "band_upper": [26.0] * n, "wbgt": [None] * n,
                "ref_unacclimatised": [None] * n, "ref_acclimatised": [None] * n,
                "heat_index": [None] * n, "utci": [None] * n, "occupied": [True] * n})
    store.close()


def test_daily_report_leaves_the_tick_interval_alone(tmp_path, system_broker_port):
    site_id = f"r{uuid.uuid4().hex[:6]}"
    prefix = f"twtest/{uuid.uuid4().hex[:8]}"
    site = tmp_path / "site.yaml"
    sink = SmtpSink()
    site.write_text(site_text(site_id, system_broker_port, prefix, sink.port))
    state = tmp_path / "state"
    state.mkdir()
    ids = [f"b{b}-{f}{r:03d}" for b in range(1, BUILDINGS + 1) for f in range(1, FLOORS + 1)
           for r in range(ROOMS)]
    today = dt.datetime.now(dt.UTC).date()
    yesterday = dt.datetime.combine(today - dt.timedelta(days=1), dt.time(0), dt.UTC)
    fill(state / f"{site_id}.sqlite3", ids, yesterday.timestamp())

    running = bootstrap(str(site), state_dir=str(state))
    service = running.service
    ticks: list[float] = []
    evaluate = service.evaluate

    def timed() -> None:
        ticks.append(time.monotonic())
        evaluate()

    service.evaluate = timed  # type: ignore[method-assign]
    real_report = service.scheduled.daily_report

    def report_that_takes_a_while(*args, **kwargs):
        """The real report, then the report thread holds until the engine ticked four more
        times: the ticks must go on while a report is under way, however fast this machine
        writes it (an idle machine wrote this one in 2 s)."""
        path = real_report(*args, **kwargs)
        seen = len(ticks)
        deadline = time.monotonic() + SLOW
        while len(ticks) < seen + 4 and time.monotonic() < deadline:
            time.sleep(0.05)
        return path

    service.scheduled.daily_report = report_that_takes_a_while  # type: ignore[method-assign]
    engine = threading.Thread(target=service.run, name="engine", daemon=True)
    engine.start()
    try:
        wait_for(lambda: len(ticks) >= 3, SLOW, "the engine ticking")
        service.jobs.put("report")  # as the calendar does at 06:30
        wait_for(lambda: service.scheduled.report_thread is not None, SLOW, "the report to start")
        began = time.monotonic()
        assert service.scheduled.report_thread is not None
        service.scheduled.report_thread.join(300)
        ended = time.monotonic()
        assert not service.scheduled.report_thread.is_alive()
        reports = state / "reports"
        day = (today - dt.timedelta(days=1)).isoformat()
        site_report = reports / f"{site_id}-{day}.html"
        assert site_report.exists(), list(reports.iterdir()) if reports.exists() else None
        text = site_report.read_text()
        assert "By building and floor" in text and "Building 2" in text
        assert {p.name for p in reports.iterdir()} == {site_report.name} | {
            f"{site_id}-{day}-b{b}.html" for b in range(1, BUILDINGS + 1)}
        # the report took long enough to mean something, and the ticks went on meanwhile
        assert ended - began > 3 * TICK_S, f"the report took only {ended - began:.2f} s"
        during = [t for t in ticks if began <= t <= ended]
        gaps = np.diff([began, *during, ended])
        assert len(during) >= (ended - began) / TICK_S - 2, (len(during), ended - began)
        assert gaps.max() < 2.5 * TICK_S, f"a tick waited {gaps.max():.2f} s"
        # and the reports were sent: the site's to the audience, the building's to its team
        wait_for(lambda: len(sink.messages) == 2, SLOW, "the reports by e-mail")
        got = {}
        for m in sink.messages:
            msg = email.message_from_bytes(m.content, policy=email.policy.default)
            (part,) = list(msg.iter_attachments())
            got[m.rcpt_tos[0]] = (part.get_filename(),
                                  part.get_content().replace("\r\n", "\n").rstrip())
        assert got["safety-lead@works.invalid"][0] == site_report.name
        assert got["safety-lead@works.invalid"][1] == text.rstrip()
        name, html = got["b1-team@works.invalid"]
        assert name == f"{site_id}-{day}-b1.html" and "Building 1" in html
    finally:
        service.request_stop()
        engine.join(30)
        sink.close()
        clear_retained(system_broker_port, prefix)
