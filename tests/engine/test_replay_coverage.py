"""``replay --coverage``: per rule, whether it raised an advisory on a feed, how often, what
its audience received against its allowance, and why a rule never raised one; checked on
the recorded day of the example site (every default rule raises an advisory there or is
named below with what it needs and where it is tested) and on a small site of our own
where each reason is made to happen."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest

from tests.conftest import COMMAND_LIMIT_S, REPO
from tests.recorded_day import cli_replay, recorded_coverage
from thermowarden.config import load_rule_pack_file, load_site
from thermowarden.coverage import (
    EPISODE_NOTIFICATIONS,
    FLOOD_10_MIN,
    LEVEL_STEP_NOTIFICATIONS,
    allowance_per_space,
)
from thermowarden.replay import FeedRecord, replay_coverage
from thermowarden.rules import builtin_pack_dir, builtin_pack_names

NOT_ON_THE_RECORDED_DAY = {
    # a failing computation is not in a recorded day of good inputs
    "sensor_health.phs_failed": ("its condition never held", "a PHS computation failing",
                                 "tests/engine/test_faults.py::"
                                 "test_a_failing_computation_stays_in_its_space"),
    "sensor_health.indices_failed": ("its condition never held",
                                     "every index computation failing in a space",
                                     "tests/engine/test_faults.py::"
                                     "test_a_failing_computation_stays_in_its_space"),
    # the recorded summer day has no cool spell with fans on or blinds down
    "fans.turn_down_fans": ("its condition never held", "a cool space with its fans on",
                            "tests/engine/test_equipment_state.py"),
    "shading.raise_shading": ("its condition never held", "a cool space with blinds down",
                              "tests/engine/test_equipment_state.py"),
}
"""Default rules that raise nothing on the recorded day: rule -> (the reason ``--coverage``
gives, what the rule needs that the day does not have, the test that makes it happen)."""


@pytest.fixture(scope="module")
def coverage():
    return recorded_coverage()


def default_rules() -> dict[str, str]:
    """Every rule of the default packs (read from the pack files) -> its audience."""
    out = {}
    for name in builtin_pack_names():
        config, _ = load_rule_pack_file(builtin_pack_dir() / f"{name}.yaml")
        out.update({f"{name}.{r.id}": r.audience for r in config.rules})
    return out


def test_every_default_rule_raises_an_advisory_on_the_recorded_day_or_says_why(coverage):
    rules = {r["rule"]: r for r in coverage["rules"]}
    assert set(rules) == set(default_rules()), "the example site enables every default pack"
    silent = {k: r["why_not"] for k, r in rules.items() if not r["fired"]}
    assert silent == {k: v[0] for k, v in NOT_ON_THE_RECORDED_DAY.items()}, (
        "a default rule that raises nothing on the recorded day is named in "
        "NOT_ON_THE_RECORDED_DAY with what it needs and the test that makes it happen")
    for name, (_, _, test) in NOT_ON_THE_RECORDED_DAY.items():
        path = test.split("::")[0]
        text = (REPO / path).read_text()
        assert name.split(".")[1] in text, (name, test)
        if "::" in test:
            assert f"def {test.split('::')[1]}(" in text, test


def test_no_rule_sends_more_than_its_allowance_on_the_recorded_day(coverage):
    """Each rule's notifications against what its own settings allow per space it raised
    in (``thermowarden.coverage.allowance_per_space``: one episode a day, level steps, its
    reminders); no audience gets a flood (more than 10 in 10 minutes: EEMUA 191, ANSI/ISA
    18.2, from memory). A new rule brings its own allowance; a rule that chatters (raises,
    clears and raises again in a space) is over it."""
    for r in coverage["rules"]:
        assert r["notifications"] <= r["allowance"], r
    for a in coverage["audiences"]:
        assert a["busiest_10_min"] <= FLOOD_10_MIN, a
        assert a["notifications"] <= a["allowance"], a
    assert {a["audience"] for a in coverage["audiences"]} == set(default_rules().values())


def test_the_allowance_reads_the_rules_settings():
    packs = {n: load_rule_pack_file(builtin_pack_dir() / f"{n}.yaml")[0]
             for n in ("comfort", "heat_stress")}
    warm = next(r for r in packs["comfort"].rules if r.id == "too_warm")
    wbgt = next(r for r in packs["heat_stress"].rules if r.id == "wbgt")
    hours = 15 * 3600.0
    assert warm.renotify_s and not warm.levels
    assert allowance_per_space(warm, hours) == EPISODE_NOTIFICATIONS + int(
        hours // warm.renotify_s)
    shortest = min(x for x in [wbgt.renotify_s, *(lv.renotify_s for lv in wbgt.levels)] if x)
    assert allowance_per_space(wbgt, hours) == (
        EPISODE_NOTIFICATIONS + LEVEL_STEP_NOTIFICATIONS * (len(wbgt.levels) - 1)
        + int(hours // shortest))
    # two days of feed: two episodes' worth
    assert allowance_per_space(warm, 2 * 86_400.0) == 2 * EPISODE_NOTIFICATIONS + int(
        2 * 86_400.0 // warm.renotify_s)


@pytest.mark.long
def test_the_command_prints_the_same_figures(coverage):
    text = cli_replay("--coverage", "--tick", "60")
    for r in coverage["rules"]:
        (line,) = [x for x in text.splitlines() if f" {r['rule']} (" in f" {x.strip()}"]
        if r["fired"]:
            raised, spaces, sent, allowed = line.split(")")[-1].split()[1:5]
            assert (int(raised), int(spaces), int(sent), int(allowed)) == (
                r["raised"], len(r["spaces_raised"]), r["notifications"], r["allowance"])
        else:
            assert line.strip().endswith(r["why_not"])
    for a in coverage["audiences"]:
        (line,) = [x for x in text.splitlines() if x.split()[:1] == [a["audience"]]]
        assert [int(x) for x in line.split()[1:4]] == [
            a["notifications"], a["allowance"], a["busiest_10_min"]]
    assert "{" not in text


SITE = """\
site: {id: cov, timezone: UTC}
output: {prefix: tw/cov}
rule_dirs: [packs]
defaults:
  occupancy: {always: true}
  rule_packs: [cov]
spaces:
  - id: hot-room
    points:
      - {topic: c/hot-room/ta, quantity: air_temperature}
  - id: empty-room
    occupancy: {always: false}
    points:
      - {topic: c/empty-room/ta, quantity: air_temperature}
"""

PACK = """\
pack: cov
description: one rule for each reason
rules:
  - id: hot
    title: Hot
    audience: facilities
    needs: [air_temperature]
    condition: air_temperature > 30
    on_delay_s: 0
    messages: {title: Hot, advice: Cool it., rationale: Above 30 °C.}
  - id: briefly_hot
    title: Hot for an hour
    audience: facilities
    needs: [air_temperature]
    condition: air_temperature > 30
    on_delay_s: 3600
    messages: {title: Hot, advice: Cool it., rationale: Above 30 °C for an hour.}
  - id: never_hot
    title: Very hot
    audience: facilities
    needs: [air_temperature]
    condition: air_temperature > 60
    messages: {title: Very hot, advice: Leave., rationale: Above 60 °C.}
  - id: humid
    title: Humid
    audience: facilities
    needs: [air_temperature, relative_humidity]
    condition: relative_humidity > 70
    messages: {title: Humid, advice: Ventilate., rationale: Above 70 %.}
  - id: hot_when_occupied
    title: Hot while occupied
    audience: safety
    needs: [air_temperature]
    occupied_only: true
    applies_to: {kind: outdoor}
    condition: air_temperature > 30
    messages: {title: Hot, advice: Rest., rationale: Above 30 °C.}
"""


def test_each_reason_a_rule_raised_nothing(tmp_path):
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "cov.yaml").write_text(PACK)
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(SITE))
    config = load_site(site, {})
    # 20 minutes: 32 °C in the hot room, 35 °C in the empty one, one reading a minute
    records = [FeedRecord(float(t), f"c/{room}/ta", value)
               for t in range(0, 1200, 60)
               for room, value in (("hot-room", b"32"), ("empty-room", b"35"))]
    _, figures = replay_coverage(config, records, base=str(site), tick_s=60)
    rules = {r["rule"]: r for r in figures["rules"]}
    assert rules["cov.hot"]["fired"] and rules["cov.hot"]["spaces_raised"] == [
        "empty-room", "hot-room"]
    briefly = rules["cov.briefly_hot"]
    assert briefly["why_not"] == (
        f"its condition held for at most {briefly['longest_true_s']:.0f} s in one space, "
        "not long enough to raise an advisory (on_delay_s, hold-back or flood)")
    assert 0 < briefly["longest_true_s"] < 3600
    assert rules["cov.never_hot"]["why_not"] == "its condition never held"
    assert rules["cov.humid"]["why_not"] == (
        "inputs missing in every space it applies to (empty-room: relative_humidity; "
        "hot-room: relative_humidity)")
    assert rules["cov.hot_when_occupied"]["why_not"] == (
        "applies to no space of the site (applies_to)")
    hot = rules["cov.hot"]
    assert hot["space_ticks_true"] == hot["space_ticks_known"] == hot["space_ticks"] > 0


def test_an_occupied_only_rule_in_spaces_never_occupied(tmp_path):
    (tmp_path / "packs").mkdir()
    (tmp_path / "packs" / "cov.yaml").write_text(PACK.replace(
        "    applies_to: {kind: outdoor}\n", ""))
    site = tmp_path / "site.yaml"
    site.write_text(textwrap.dedent(SITE).replace("  occupancy: {always: true}\n",
                                                  "  occupancy: {always: false}\n"))
    config = load_site(site, {})
    records = [FeedRecord(float(t), f"c/{room}/ta", b"35")
               for t in range(0, 600, 60) for room in ("hot-room", "empty-room")]
    _, figures = replay_coverage(config, records, base=str(site), tick_s=60)
    rules = {r["rule"]: r for r in figures["rules"]}
    assert rules["cov.hot_when_occupied"]["why_not"] == (
        "its spaces were never occupied (it holds only in occupied spaces)")
    assert rules["cov.hot"]["fired"]


def test_the_command_refuses_a_bad_feed(tmp_path):
    feed = tmp_path / "bad.jsonl"
    feed.write_text('{"t": 0, "topic": "x"}\n')
    from tests.recorded_day import SITE as EXAMPLE

    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "replay", "--config",
                        str(EXAMPLE), str(feed), "--coverage", "--json"], capture_output=True,
                       text=True, timeout=COMMAND_LIMIT_S)
    assert r.returncode == 2 and "bad.jsonl:1" in r.stderr, r.stderr
    assert r.stdout == ""
