"""Replay figures (see run.py): the shipped day, a large synthetic site, and replay against
in-process ingest on the same feed.

- replay_day_s: CPU seconds to read and replay the recorded day of the example site
  (simulated_feeds/recorded/larkfield-day.jsonl.gz: 4 spaces, 10 s ticks), rule packs and
  feed parsing included.
- replay_space_days_per_s: a synthetic site of 200 spaces reporting six points once a minute
  (all six at the same second, as one device would), 10 s ticks, every built-in rule pack:
  space-days of feed replayed per CPU second (3 days in a full run, 6 hours in a quick one;
  generating the invented feed is counted too). Each space has readings of its own (a
  warmth and a humidity offset per space, at the sensors' resolution: 0.1 K, 1 %RH), so
  spaces repeat each other only as often as real rooms at that resolution would; no day
  repeats another (each has its own weather, the jitter is drawn from a seeded generator:
  the same feed every run), so nothing cached from one day serves the next wholesale; the
  indices are computed once per distinct row of inputs in a batch, so a feed whose spaces
  all read alike would overstate the figure.
- replay_vs_ingest_ratio: that replay's messages per CPU second over the messages per CPU
  second of feeding the same generated messages to the engine one by one without any
  evaluation (Engine.message; same run; the feed's first 24 hours, or all of it in a quick
  run: over its first 6 hours alone the baseline varied by 40 % between runs).
  replay_vs_ingest_in_runs_ratio: the same against feeding them as replay and the service
  do, the messages between two ticks as one run (Engine.messages, 1.4-1.5 x faster): the
  stricter comparison, since replay itself now ingests in runs.
"""

from __future__ import annotations

import gzip
import itertools
import math
import pathlib
import sys
import time
from collections.abc import Callable, Iterator
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from thermowarden.config import SiteConfig
    from thermowarden.replay import FeedRecord

REPO = pathlib.Path(__file__).resolve().parent.parent

SPACES = 200
POINTS = ("ta", "rh", "tg", "v", "fan", "shade")


def synthetic_site(n: int = SPACES) -> SiteConfig:
    from thermowarden.config import SiteConfig
    from thermowarden.rules import builtin_pack_names

    templates = [
        {"topic": "syn/{space}/ta", "quantity": "air_temperature", "interval_s": 60},
        {"topic": "syn/{space}/rh", "quantity": "relative_humidity", "interval_s": 60},
        {"topic": "syn/{space}/tg", "quantity": "globe_temperature", "interval_s": 60},
        {"topic": "syn/{space}/v", "quantity": "air_speed", "interval_s": 60},
        {"topic": "syn/{space}/fan", "quantity": "fan_state", "interval_s": 60,
         "format": {"type": "state"}},
        {"topic": "syn/{space}/shade", "quantity": "shading_position", "interval_s": 60},
    ]
    spaces = [{"id": f"z{i:04d}", "hot_work": i % 10 == 0,
               "kind": "outdoor" if i % 25 == 7 else "indoor"} for i in range(n)]
    return SiteConfig.model_validate({
        "site": {"id": "synthetic", "timezone": "UTC"}, "templates": templates,
        "spaces": spaces,
        "defaults": {"rule_packs": builtin_pack_names(),
                     "occupancy": {"hours": {d: ["07:00-19:00"] for d in
                                             ("mon", "tue", "wed", "thu", "fri")}},
                     "people": {"met": 1.2, "clo": 0.6}}})


FEED_SEED = 28
"""Seed of the synthetic feed's weather and sensor jitter (the same feed in every run)."""


def synthetic_feed(n: int, hours: float, t0: float = 1_780_293_600.0,
                   seed: int = FEED_SEED) -> Iterator[FeedRecord]:
    """Invented readings from Monday 1 June 2026 06:00 UTC: a daily swing, a warm afternoon
    in some spaces (each space its own warmth and humidity), fans switched on in the warm
    ones; all six points of a space at the same second every minute.

    No two days are alike: each day has its own weather (the swing's amplitude scaled by
    0.8-1.2, shifted by -1 to +1 K, humidity by -6 to +6 %RH, the warmest hour moved by up
    to half an hour either way), and every reading's jitter (0-0.2 K, 0-0.06 m/s, at the
    sensors' resolution) is drawn afresh from a generator seeded with ``seed``, so the feed
    is the same in every run but never repeats itself (the weather moves smoothly from one
    day's to the next's over the day): results cached across days or
    spaces count only where real readings would repeat too."""
    import numpy as np

    from thermowarden.replay import FeedRecord

    rng = np.random.default_rng(seed)
    topics = [[f"syn/z{i:04d}/{p}" for p in POINTS] for i in range(n)]
    offset = [(i * 7) % 60 for i in range(n)]
    warm = [0.5 + (i % 9) * 0.6 + 0.013 * i for i in range(n)]
    days = int(hours // 24) + 2
    scale = rng.uniform(0.8, 1.2, days).tolist()
    shift = rng.uniform(-1.0, 1.0, days).tolist()
    wet = rng.uniform(-6.0, 6.0, days).tolist()
    phase = rng.uniform(-0.5 / 24, 0.5 / 24, days).tolist()
    for minute in range(int(hours * 60)):
        day = minute // 1440
        day_frac = (minute % 1440) / 1440.0

        def weather(per_day: list[float], day: int = day, f: float = day_frac) -> float:
            return (1 - f) * per_day[day] + f * per_day[day + 1]  # no jump at midnight

        sc, sh, wt = weather(scale), weather(shift), weather(wet)
        swing = math.sin(2 * math.pi * (day_frac - 0.35 - weather(phase)))
        base = t0 + minute * 60.0
        ta_jitter = (0.1 * rng.integers(0, 3, n)).tolist()
        v_jitter = (0.02 * rng.integers(0, 4, n)).tolist()
        for i in range(n):
            ta = 23.0 + sh + warm[i] * (1 + sc * swing) + ta_jitter[i]
            vals = (f"{ta:.1f}", f"{48 + wt + 10 * swing + i % 5:.0f}",
                    f"{ta + 1.5 + swing:.1f}", f"{0.12 + v_jitter[i]:.2f}",
                    "on" if ta > 27.5 else "off", "85" if swing > 0.8 else "10")
            t = base + offset[i]
            for topic, v in zip(topics[i], vals, strict=True):
                yield FeedRecord(t, topic, v.encode())


def bench_replay_day() -> dict[str, float]:
    from thermowarden.config import load_site
    from thermowarden.replay import read_feed, replay

    site = REPO / "deploy" / "example-site.yaml"
    feed = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
    config = load_site(site, {})
    with gzip.open(feed, "rt", encoding="utf-8") as fh:  # warm the compiled models
        replay(config, read_feed(itertools.islice(fh, 500)), base=str(site))
    t0 = time.process_time()
    with gzip.open(feed, "rt", encoding="utf-8") as fh:
        result = replay(config, read_feed(fh, str(feed)), base=str(site))
    cpu = time.process_time() - t0
    print(f"replay day: {result.messages} messages, {len(result.events)} events",
          file=sys.stderr)
    return {"replay_day_s": round(cpu, 2)}


def bench_replay_site(quick: bool, report: Callable[..., None] | None = None,
                      ) -> dict[str, float]:
    from thermowarden.engine import Engine
    from thermowarden.replay import replay
    from thermowarden.rules import builtin_pack_names, load_rule_packs
    from thermowarden.site_model import build_site_model

    hours = 6.0 if quick else 72.0
    config = synthetic_site()
    packs = load_rule_packs(builtin_pack_names())
    t0 = time.process_time()
    result = replay(config, synthetic_feed(SPACES, hours), packs=packs)
    replay_cpu = time.process_time() - t0
    space_days = SPACES * hours / 24.0
    out: dict[str, float] = {}
    if report is not None:  # printed now: the baselines below take a while
        report(out, "replay_space_days_per_s", round(space_days / replay_cpu, 2))
    # the same messages into an engine that never evaluates:
    # one by one (Engine.message, as this figure has always been measured), and as replay
    # and the service take them, the messages between two ticks as one run (Engine.messages)
    # a day of the same feed (the whole 72 hours tripled the bench's time; over its first
    # 6 hours alone the baseline varied by +-40 %); ingest does not depend on the weather
    ingest_hours = min(hours, 24.0)
    tick_s = config.evaluation.tick_s
    engine = Engine(config, build_site_model(config), packs, conditions_every_s=0)
    count = 0
    t0 = time.process_time()
    for rec in synthetic_feed(SPACES, ingest_hours):  # generated as in the replay
        engine.message(rec.topic, rec.payload, rec.t)
        count += 1
    ingest_cpu = time.process_time() - t0
    runs = Engine(config, build_site_model(config), packs, conditions_every_s=0)
    t0 = time.process_time()
    pending: list[tuple[str, bytes, float, bool]] = []
    next_tick = -math.inf
    for rec in synthetic_feed(SPACES, ingest_hours):
        if rec.t >= next_tick:
            runs.messages(pending)
            pending.clear()
            next_tick = math.floor(rec.t / tick_s) * tick_s + tick_s
        pending.append((rec.topic, rec.payload, rec.t, False))
    runs.messages(pending)
    runs_cpu = time.process_time() - t0
    rejected = (sum(engine.ingest.rejected.values()) + sum(runs.ingest.rejected.values())
                + sum(result.rejected.values()))
    if rejected:
        print(f"warning: {rejected} synthetic messages rejected", file=sys.stderr)
    replay_rate = result.messages / replay_cpu
    ingest_rate = count / ingest_cpu
    runs_rate = count / runs_cpu
    print(f"replay site: {SPACES} spaces x {hours:g} h, {result.messages} messages, "
          f"{len(result.events)} events, {replay_cpu:.1f} CPU s; ingest alone "
          f"{ingest_rate:,.0f} msg/s one by one, {runs_rate:,.0f} msg/s in runs",
          file=sys.stderr)
    out.update({"replay_space_days_per_s": round(space_days / replay_cpu, 2),
                "replay_msgs_per_s": round(replay_rate),
                "replay_vs_ingest_ratio": round(replay_rate / ingest_rate, 3),
                "replay_vs_ingest_in_runs_ratio": round(replay_rate / runs_rate, 3)})
    return out
