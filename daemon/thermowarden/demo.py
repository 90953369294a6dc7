"""``thermowarden demo``: the whole job in a couple of minutes, nothing to set up.

Starts an embedded broker when no ``--broker`` is given, runs the service on the invented
example site (Larkfield Works) with a simulated clock, publishes the scenario's sensor
data in the site's own topic and payload formats, and shows what each audience receives
as it happens. Ends by itself after the scenario (or ``--duration``) with a summary, or
cleanly on Ctrl-C.
"""

from __future__ import annotations

import datetime as dt
import importlib.resources
import json
import logging
import pathlib
import shutil
import sys
import tempfile
import textwrap
import threading
import time
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any, TextIO

import paho.mqtt.client as mqtt
from paho.mqtt.enums import CallbackAPIVersion

from thermowarden.core import catalogue

VIEW_INDICES = tuple((e.name, e.short) for e in catalogue.in_demo())
PRIORITY_MARK = {"low": "·", "medium": "!", "high": "!!", "urgent": "!!!"}


def example_site() -> pathlib.Path:
    return pathlib.Path(str(importlib.resources.files("thermowarden.deploy"))) / \
        "example-site.yaml"


@dataclass
class DemoView:
    """What the audiences received, kept for the live view and the summary."""

    prefix: str
    tz: dt.tzinfo
    conditions: dict[str, dict[str, Any]] = field(default_factory=dict)
    events: list[dict[str, Any]] = field(default_factory=list)
    counts: Counter[str] = field(default_factory=Counter)
    acted: list[str] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)
    last_message: float = field(default_factory=time.monotonic)
    event_messages: int = 0
    width: int = 80

    def on_message(self, client: mqtt.Client, userdata: Any, msg: mqtt.MQTTMessage) -> None:
        if not msg.payload:
            return
        try:
            data = json.loads(msg.payload)
        except ValueError:
            return
        with self.lock:
            self.last_message = time.monotonic()
            if msg.topic.endswith("/conditions"):
                self.conditions[data["space"]["id"]] = data
            elif "/events/" in msg.topic:
                self.event_messages += 1
            if "/events/" in msg.topic and data.get("event"):
                self.events.append(data)
                aud = msg.topic.split("/events/")[1].split("/")[0]
                self.counts[f"{aud}:{data['event']}"] += 1
                adv = data.get("advisory")
                if adv and data["event"] == "cleared" and adv.get("acted_on"):
                    self.acted.append(f"{adv['space']['id']}: {adv['title']}")

    def event_line(self, e: dict[str, Any]) -> str:
        at = dt.datetime.fromisoformat(e["at"].replace("Z", "+00:00")).astimezone(self.tz)
        if e["event"] == "summary":
            return (f"{at:%H:%M} {e['audience']:<10} summary: {e['count']} notification(s) "
                    "held back and summarised")
        a = e["advisory"]
        mark = PRIORITY_MARK.get(a["priority"], "")
        return (f"{at:%H:%M} {a['audience']:<10} {e['event']:<11} {mark:<3} "
                f"{a['priority']:<6} {a['title']}")

    def wait_for_events(self, sent: EventCount, limit_s: float) -> None:
        """Return once every event the service sent has arrived (at most ``limit_s``)."""
        deadline = time.monotonic() + limit_s
        while time.monotonic() < deadline:
            with self.lock:
                if self.event_messages >= sent.n:
                    return
            time.sleep(0.02)

    def newest_advice(self) -> list[str]:
        """The advice of the newest event that carries one, wrapped to the view's width."""
        for e in reversed(self.events):
            a = e.get("advisory")
            if a and a.get("advice") and e["event"] != "cleared":
                head = f"newest advice ({a['space']['id']}, {a['audience']}): "
                return textwrap.wrap(head + a["advice"], self.width - 1,
                                     subsequent_indent="  ", max_lines=4,
                                     placeholder=" ...")
        return []

    def render(self, now: float, start: float, end: float, out: TextIO) -> None:
        local = dt.datetime.fromtimestamp(now, self.tz)
        frac = min(max((now - start) / (end - start), 0.0), 1.0)
        bar = "#" * int(frac * 20) + "-" * (20 - int(frac * 20))
        fit = self.width - 1
        lines = [f"thermowarden demo - Larkfield Works (invented) "
                 f"{local:%a %H:%M} [{bar}] {frac * 100:3.0f}%",
                 "advisory only: nothing is switched or moved", ""]
        head = f"{'space':<14}" + "".join(f"{label:>9}" for _, label in VIEW_INDICES)
        lines.append(head)
        with self.lock:
            for sid, c in sorted(self.conditions.items()):
                cells = []
                for key, _ in VIEW_INDICES:
                    v = c["indices"].get(key, {}).get("value")
                    cells.append(f"{v:>9.1f}" if isinstance(v, int | float) else f"{'-':>9}")
                lines.append(f"{sid:<14}" + "".join(cells))
            lines.append("")
            lines.append("what each audience received (latest last):")
            lines.extend("  " + self.event_line(e) for e in self.events[-10:])
            lines.append("")
            lines.extend(self.newest_advice())
        lines = [ln if len(ln) <= fit else ln[:fit - 3] + "..." for ln in lines]
        out.write("\x1b[H\x1b[2J" + "\n".join(lines) + "\n")
        out.flush()

    def summary(self, ahead: list[str] | None = None) -> str:
        """The summary; ``ahead``: the advice ahead of time in words (:class:`EngineEvents`)."""
        with self.lock:
            raised = Counter(e["advisory"]["audience"] for e in self.events
                             if e["event"] == "raised")
            cleared = sum(1 for e in self.events if e["event"] == "cleared")
            escalated = sum(1 for e in self.events if e["event"] == "escalated")
            out = ["", "demo summary", "------------",
                   f"advisories raised: {sum(raised.values())} "
                   f"({', '.join(f'{k} {v}' for k, v in sorted(raised.items()))}); "
                   f"escalated {escalated} time(s); cleared {cleared}"]
            if self.acted:
                out.append("cleared after people acted on the advice:")
                out.extend(f"  {a}" for a in self.acted)
            if ahead:
                out.append("advice ahead of time (counted as replay --summary counts it):")
                for sentence in ahead:
                    out.extend(textwrap.wrap(sentence, self.width - 1, initial_indent="  ",
                                             subsequent_indent="    "))
            out.append("heat-stress alerts are screening advice: follow local regulations "
                       "and a qualified occupational hygienist.")
        return "\n".join(out)


class EventCount:
    """Counts the events the service hands to the broker (an observer of its effects)."""

    def __init__(self) -> None:
        self.n = 0

    def observe(self, effects: list[Any]) -> None:
        self.n += sum(1 for e in effects if getattr(e, "topic", "").find("/events/") >= 0
                      and getattr(e, "qos", 0) == 1)


class EngineEvents:
    """Every lifecycle event the engine raised, sent or held back (its stored events, an
    observer of its effects), one line each, for the advice-ahead-of-time figures."""

    def __init__(self) -> None:
        self.lines: list[dict[str, Any]] = []

    def observe(self, effects: list[Any]) -> None:
        from thermowarden.core.event_lines import event_line
        from thermowarden.effects import Persist

        for e in effects:
            if isinstance(e, Persist) and e.kind == "event" and e.record \
                    and e.record.get("event") != "summary" and e.record.get("advisory"):
                self.lines.append(event_line(e.record))

    def ahead_in_words(self, engine: Any, tz: dt.tzinfo) -> list[str]:
        """The figures ``replay --summary`` gives per ahead-of-time rule, in words."""
        from thermowarden.core.ahead_summary import ahead_summary, in_words

        foresees = {rt.rule.key: (f.rule, f.priority) for rt in engine.rules
                    if (f := rt.rule.config.foresees) is not None}
        titles = {rt.rule.key: rt.rule.config.title for rt in engine.rules}
        return in_words(ahead_summary(self.lines, foresees, None), titles, tz)


def _by_time(records: list[dict[str, Any]]) -> Iterator[tuple[float, list[dict[str, Any]]]]:
    """The records in runs of the same time (they are in time order)."""
    run: list[dict[str, Any]] = []
    for rec in records:
        if run and rec["t"] != run[0]["t"]:
            yield run[0]["t"], run
            run = []
        run.append(rec)
    if run:
        yield run[0]["t"], run


class DayDriver:
    """Moves a driven clock through the day: the readings of each moment are published
    with the clock at that moment and waited for until the service has received them; at
    every tick the service is asked for one step (take in, evaluate) and waited for. Paced
    to at most ``speed`` times real time; slower only when the machine is."""

    def __init__(self, service: Any, clock: Any, sensors: mqtt.Client, start: float,
                 speed: float, tick_s: float) -> None:
        self.service = service
        self.clock = clock
        self.sensors = sensors
        self.start = start
        self.speed = speed
        self.tick_s = tick_s
        self.next_tick = start + tick_s
        self.published = service.link.received
        self.wall0 = time.monotonic()

    def _pace(self, t: float) -> None:
        ahead = self.wall0 + (t - self.start) / self.speed - time.monotonic()
        if ahead > 0:
            time.sleep(ahead)

    def advance_to(self, t: float) -> None:
        """Step through every tick before ``t``."""
        while self.next_tick < t:
            self.step(self.next_tick)
            self.next_tick += self.tick_s

    def step(self, t: float) -> None:
        self._pace(t)
        self.clock.set(t)
        done = self.service.steps_done
        self.service.step()
        _wait_until(lambda: self.service.steps_done > done, "an evaluation")

    def publish(self, t: float, group: list[dict[str, Any]]) -> None:
        self.clock.set(t)
        for rec in group:
            p = rec["payload"]
            self.sensors.publish(rec["topic"], p if isinstance(p, str) else json.dumps(p),
                                 qos=1)
        self.published += len(group)
        link = self.service.link
        _wait_until(lambda: link.received >= self.published, "the readings to arrive")


def _wait_until(cond: Any, what: str, limit_s: float = 120.0) -> None:
    deadline = time.monotonic() + limit_s
    pause = 0.0002
    while not cond():
        if time.monotonic() > deadline:
            raise RuntimeError(f"the demo's service did not take in {what} in {limit_s:.0f} s")
        time.sleep(pause)
        pause = min(pause * 2, 0.01)


def _print_new(dv: DemoView, shown: int, out: TextIO) -> int:
    """Print the events that arrived since the first ``shown``; returns the new count."""
    with dv.lock:
        fresh = dv.events[shown:]
    for e in fresh:
        out.write(dv.event_line(e) + "\n")
    out.flush()
    return shown + len(fresh)


def run_demo(broker_url: str | None, duration: float | None, speed: float, view: bool,
             out: TextIO = sys.stdout, web_port: int | None = None) -> int:
    """Run the demo; returns the exit status (0 when it ends or is interrupted).

    With ``web_port`` the web page is served on 127.0.0.1 (user ``demo`` with a password
    printed at the start) and kept, with the clock stopped, after the day until Ctrl-C."""
    from thermowarden.config import load_site
    from thermowarden.shell.bootstrap import bootstrap
    from thermowarden.shell.broker_nodes import parse_url
    from thermowarden.shell.buffered_client import release_sockets
    from thermowarden.shell.clock import Clock
    from thermowarden.shell.embedded_broker import EmbeddedBroker
    from thermowarden.simulated_feeds.larkfield import demo_day

    if speed <= 0:
        raise ValueError("--speed must be positive")
    logging.basicConfig(level=logging.ERROR, format="%(levelname)s %(name)s: %(message)s")
    logging.getLogger("apscheduler").setLevel(logging.ERROR)
    embedded = None
    if broker_url is None:
        embedded = EmbeddedBroker().start()
        broker_url = f"mqtt://127.0.0.1:{embedded.port}"
        out.write(f"started an embedded MQTT broker on 127.0.0.1:{embedded.port} (MQTT 3.1.1)\n")
    site_path = example_site()
    config = load_site(site_path)
    records = list(demo_day())
    start, end = records[0]["t"], records[-1]["t"]
    state_dir = tempfile.mkdtemp(prefix="thermowarden-demo-")
    # the demo drives the service's clock: every reading is in before the clock moves on,
    # and every evaluation happens at the same simulated moment, so each run gives the
    # same events on any machine, however busy
    clock = Clock(start=start - 1.0, driven=True)
    overrides: dict[str, str] = {}
    if web_port is not None:
        import secrets

        from thermowarden.shell.web.users import hash_password

        password = secrets.token_urlsafe(8)
        users = pathlib.Path(state_dir) / "web-users.yaml"
        users.write_text("users:\n  - name: demo\n    audiences: [facilities, safety, "
                         f"integrator]\n    password_hash: \"{hash_password(password)}\"\n")
        overrides.update({"THERMOWARDEN_WEB__ENABLED": "true",
                          "THERMOWARDEN_WEB__PORT": str(web_port),
                          "THERMOWARDEN_WEB__USERS_FILE": str(users)})
    running = bootstrap(str(site_path), broker_url=broker_url, state_dir=state_dir,
                        protocol="3.1.1" if embedded else None, clock=clock,
                        overrides=overrides)
    if web_port is not None:
        out.write(f"web page on http://127.0.0.1:{web_port}/ (sign in as demo, password "
                  f"{password})\n")
    service = running.service
    engine_thread = threading.Thread(target=service.run, name="engine", daemon=True)
    engine_thread.start()
    host, port, _ = parse_url(broker_url)
    dv = DemoView(config.output.prefix, service.engine.state.tz,
                  width=max(60, shutil.get_terminal_size((80, 24)).columns))
    # one client at a time: the service first, then the watcher, then the sensors (the
    # embedded broker does not like concurrent first subscriptions)
    deadline = time.monotonic() + 60
    while not service.ready()[0] and time.monotonic() < deadline:
        time.sleep(0.05)
    subscribed = threading.Event()
    watcher = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                          protocol=mqtt.MQTTv311)
    watcher.on_message = dv.on_message
    watcher.on_subscribe = lambda *a: subscribed.set()
    watcher.connect(host, port, 30)
    watcher.subscribe(f"{config.output.prefix}/#", qos=1)
    watcher.loop_start()
    subscribed.wait(10)
    sensors = mqtt.Client(callback_api_version=CallbackAPIVersion.VERSION2,
                          protocol=mqtt.MQTTv311)
    sensors.connect(host, port, 30)
    sensors.loop_start()
    interrupted = False
    day_over = False
    sent = EventCount()
    service.observers.append(sent.observe)
    raised = EngineEvents()
    service.observers.append(raised.observe)
    try:
        # --duration counts from the start of the simulated day, not from the start-up (a
        # loaded machine may take a while to start the service)
        stop_at = time.monotonic() + duration if duration is not None else float("inf")
        driver = DayDriver(service, clock, sensors, start, speed,
                           config.evaluation.tick_s)
        last_view = 0.0
        shown = 0
        for t, group in _by_time(records):
            if time.monotonic() >= stop_at:
                break
            driver.advance_to(t)
            driver.publish(t, group)
            if view and time.monotonic() - last_view > 0.5:
                dv.render(clock.now(), start, end, out)
                last_view = time.monotonic()
            elif not view:
                shown = _print_new(dv, shown, out)
        else:
            driver.step(end)
        dv.wait_for_events(sent, 60.0)
        day_over = True
        if web_port is not None:
            if not view:
                shown = _print_new(dv, shown, out)
            out.write(f"the day is over; the web page stays on http://127.0.0.1:{web_port}/ "
                      "with the clock stopped until Ctrl-C\n")
            out.flush()
            while True:
                time.sleep(1.0)
    except KeyboardInterrupt:
        interrupted = True
    finally:
        # the service's last evaluation may still raise or clear advisories: stop it, then
        # wait until its events have reached the watcher before showing the end
        service.request_stop()
        engine_thread.join(30)
        if day_over or not interrupted:
            # (Ctrl-C on the page kept after the day: the summary is still the whole day's)
            dv.wait_for_events(sent, 20.0)
        sensors.loop_stop()
        watcher.loop_stop()
        for c in (sensors, watcher):
            c.disconnect()
            release_sockets(c)
        if embedded is not None:
            embedded.stop()
        if running.web is not None:
            running.web.stop()
        shutil.rmtree(state_dir, ignore_errors=True)
    if view:
        dv.render(clock.now(), start, end, out)
    else:
        _print_new(dv, shown, out)
    out.write(dv.summary(raised.ahead_in_words(service.engine, dv.tz)) + "\n")
    if interrupted:
        out.write("interrupted; stopped cleanly\n")
    return 0
