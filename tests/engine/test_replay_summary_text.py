"""``replay --summary`` prints tables a person reads (words with a unit, no field names),
with the figures of ``--summary --json``."""

from __future__ import annotations

import json
import re

import pytest

from tests.conftest import REPO
from tests.recorded_day import cli_replay

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
LIMIT_S = 600
FIELD_NAME = re.compile(r"\b[a-z]+(?:_[a-z0-9]+)+\b")


def _run(*extra: str) -> str:
    """The command's output, run once per session for the same arguments."""
    return cli_replay("--summary", *extra)


@pytest.mark.long
def test_summary_is_a_table_with_the_json_figures():
    text = _run()
    figures = json.loads(_run("--json"))
    with_values = {line.split()[0]: line.split()[1:] for line in text.splitlines()
                   if line.startswith("  ") and line.split()
                   and line.split()[0] in figures["audiences"]}
    for audience, a in figures["audiences"].items():
        sent, per_day, reminders, busiest, floods, held = with_values[audience]
        assert (int(sent), float(per_day), int(reminders), int(busiest), int(floods),
                int(held)) == (a["notifications"], a["notifications_per_day"],
                               a["renotifications"], a["busiest_10_min"],
                               a["flood_summaries"], a["held_back_in_summaries"])
    for r in figures["rules"]:
        (line,) = [x for x in text.splitlines() if f"({r['rule']})" in x]
        raised, cleared, live, priority, longest = line.split(")")[-1].split()
        assert (int(raised), int(cleared), int(live), priority) == (
            r["raised"], r["cleared"], r["still_active"], r["max_priority"])
        assert longest == ("-" if r["max_active_min"] is None
                           else f"{r['max_active_min']:.0f}")
    for a in figures["ahead_of_time"]:
        assert a["rule"] in text
    assert "lead time, least (min)" in text
    assert f"Replayed {figures['messages']:,} messages" in text


def test_summary_labels_are_words_with_units():
    """Headings and row labels carry no field name; the rule names beside their titles and
    the rule and space columns are the names people use with --set and in the site file."""
    text = _run()
    names = {m for m in FIELD_NAME.findall(text)}
    allowed_lines = 0
    for line in text.splitlines():
        for name in FIELD_NAME.findall(line):
            # values: a rule (pack.rule) or a space id as configured, never a heading
            assert re.search(rf"[a-z_]+\.{name}|{name}\.[a-z_]+|\({name}\)", line) or \
                re.search(rf"\b{name}-|-{name}\b", line), (name, line)
            allowed_lines += 1
    assert names and allowed_lines
    for heading in ("notifications", "busiest", "longest", "active (min)", "raised",
                    "cleared", "lead time, median (min)"):
        assert heading in text, heading
    assert "{" not in text  # not JSON
