"""``replay --compare`` counts exactly what ``replay --summary`` counts, for both runs, under a
flood: a site of 600 zones, 500 of them too warm at once, with a changed limit (issue 26 saw
"raised 0/0" for the changed rule and another rule left out: compare counted the events sent,
and a flood holds most of them back in summaries)."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from thermowarden.config import load_site
from thermowarden.replay import compare, read_feed, replay, summarise

pytestmark = pytest.mark.long  # out of the fast set (DEVELOPERS.md)

LIMIT_S = 900
ZONES, HOT = 600, 500
CHANGE = "comfort.too_warm.pmv_limit=1.0"
SITE = """\
site: {id: flood, timezone: UTC}
output: {prefix: tw/flood}
evaluation: {tick_s: 60}
templates:
  - {topic: "flood/{space}/ta", quantity: air_temperature, interval_s: 60}
  - {topic: "flood/{space}/rh", quantity: relative_humidity, interval_s: 60}
  - {topic: "flood/{space}/globe", quantity: globe_temperature, interval_s: 60}
  - {topic: "flood/{space}/v", quantity: air_speed, interval_s: 60}
defaults:
  people: {met: 1.1, clo: 0.6}
  occupancy: {always: true}
  rule_packs: [comfort, sensor_health]
spaces:
"""


def _write(tmp_path):
    site = tmp_path / "site.yaml"
    site.write_text(SITE + "".join(f"  - {{id: zone-{k:03d}}}\n" for k in range(ZONES)),
                    encoding="utf-8")
    feed = tmp_path / "feed.jsonl"
    t0 = 1_780_000_000
    with feed.open("w", encoding="utf-8") as fh:
        for minute in range(75):
            hot = 10 <= minute < 45
            for k in range(ZONES):
                # the hot zones spread from about PMV +0.6 to +1.6, so a limit of 1.0
                # keeps some of them and drops the others
                ta = 26.0 + 4.0 * k / HOT if hot and k < HOT else 22.5 + 0.002 * k
                wobble = 0.02 * (minute % 3)
                for q, v in (("ta", ta), ("rh", 50.0 + wobble), ("globe", ta + 0.5),
                             ("v", 0.1 + wobble)):
                    fh.write(json.dumps({"t": t0 + 60 * minute + k * 0.05,
                                         "topic": f"flood/zone-{k:03d}/{q}",
                                         "payload": f"{v:.2f}"}) + "\n")
    return site, feed


def _cli(site, feed, *extra: str) -> str:
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "replay", "--config",
                        str(site), str(feed), *extra], capture_output=True, text=True,
                       timeout=LIMIT_S)
    assert r.returncode == 0, r.stderr
    return r.stdout


def test_compare_counts_what_summary_counts_under_a_flood(tmp_path):
    site, feed = _write(tmp_path)
    config = load_site(site, {})
    with feed.open(encoding="utf-8") as fh:
        records = list(read_feed(fh, str(feed)))
    a = replay(config, records, base=str(site))
    b = replay(config, records, base=str(site), settings={"comfort.too_warm.pmv_limit": 1.0})
    c = compare(a, b)
    rules = {r["rule"]: r for r in c["rules"]}
    # the engine's own count of what it raised, sent or held back
    for k, run in enumerate((a, b)):
        raised = [e for e in run.raised_events if e["event"] == "raised"]
        assert sum(r["raised"][k] for r in c["rules"]) == len(raised)
        assert {e["rule"] for e in raised} <= set(rules)
    warm = rules["comfort.too_warm"]
    assert HOT // 2 < warm["raised"][0] <= HOT and 0 < warm["raised"][1] < warm["raised"][0]
    assert warm["changed"]
    summaries = [e for e in a.events if e["event"] == "summary"]
    assert summaries, "a flood: most events held back in summaries"
    # ... and the command: compare prints for A and B what --summary prints for each
    sa = json.loads(_cli(site, feed, "--summary", "--json"))
    sb = json.loads(_cli(site, feed, "--summary", "--json", "--set", CHANGE))
    assert sa == summarise(a) and sb == summarise(b)
    text = _cli(site, feed, "--compare", "--set", CHANGE)
    lines = text.splitlines()
    for r in sa["rules"] + sb["rules"]:
        (line,) = [x for x in lines if f"({r['rule']})" in x]
        figures = line.split(")")[-1].split()
        x = next((y for y in sa["rules"] if y["rule"] == r["rule"]), None)
        y = next((y for y in sb["rules"] if y["rule"] == r["rule"]), None)

        def shown(s, f):
            v = None if s is None else s[f]
            return "-" if v is None else f"{v:.0f}" if isinstance(v, float) else str(v)
        assert figures == [shown(s, f) if s is not None else ("-" if f == "max_active_min"
                                                             else "0")
                           for f in ("raised", "cleared", "still_active", "max_active_min")
                           for s in (x, y)], line
    for aud in sa["audiences"]:
        (line,) = [x for x in lines if x.lstrip(" *").startswith(aud + " ")]
        figures = [int(v) for v in line.lstrip(" *").split()[1:]]
        assert figures == [s["audiences"][aud][f] for f in (
            "notifications", "renotifications", "busiest_10_min", "flood_summaries",
            "held_back_in_summaries") for s in (sa, sb)], line
    (warm_line,) = [ln for ln in lines if "(comfort.too_warm)" in ln]
    assert warm_line.lstrip().startswith("*"), warm_line
