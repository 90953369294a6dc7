"""The report tells the truth, checked through ``thermowarden report`` as people run it:
each level of an advisory with its own title and priority; the 60-minute WBGT (hours and
plot) only where that mean existed; an acknowledgement is not an action and nothing says
"pending" after a clearing; no bar past the end of the data; a file the report did not
write is never written over; from a store, the last day of data by default."""

from __future__ import annotations

import gzip
import html as html_lib
import json
import re
import subprocess
import sys

import pytest

from tests.conftest import COMMAND_LIMIT_S, REPO
from thermowarden.config import load_site
from thermowarden.effects import Persist
from thermowarden.engine.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.shell.report import SpaceReport, timeline_spans
from thermowarden.shell.store import Store
from thermowarden.site_model import build_site_model

pytestmark = pytest.mark.long  # out of the fast set (DEVELOPERS.md)

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
BAKERY_TOPIC = "larkfield/bakery-floor/senml"


def run_report(*args: str, cwd=None) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "thermowarden.cli", "report", "--config",
                           str(SITE), *args], capture_output=True, text=True, cwd=cwd,
                          timeout=COMMAND_LIMIT_S)


def advisory_rows(page: str) -> list[tuple[str, str]]:
    """(title, priority) of every level of every advisory of the advisories tables."""
    rows = []
    for table in re.findall(r'<table class="advisories cards">(.*?)</table>', page, re.S):
        for priority, title in re.findall(r"<li>[\d:-]+ <b>(\w+)</b>: ([^<]*)</li>", table):
            rows.append((html_lib.unescape(title), priority))
    return rows


@pytest.fixture(scope="module")
def day_report(tmp_path_factory):
    """The shipped day's report, written as a person runs it: no --output, in a folder."""
    folder = tmp_path_factory.mktemp("day")
    r = run_report("--feed", str(FEED), cwd=folder)
    assert r.returncode == 0, r.stderr
    return (folder / "larkfield-report.html").read_text(encoding="utf-8")


def test_each_title_carries_its_own_priority(day_report):
    """The heat-stress pack's level texts (rules/heat_stress.yaml): approaching is medium,
    above the action value (reference for workers not acclimatised) high, above the limit
    urgent. A row never pairs one level's words with another level's priority."""
    rows = advisory_rows(day_report)
    levels = {"approaching": "medium", "above the action value": "high",
              "above the reference for workers not acclimatised": "high",
              "above the limit": "urgent", "above even the limit": "urgent"}
    seen = set()
    for title, priority in rows:
        if not title.startswith("Heat stress ") or " expected in " in title:
            continue  # (the ahead-of-time advisories have one priority each)
        for words, expected in levels.items():
            if title.startswith(f"Heat stress {words}"):
                assert priority == expected, (title, priority)
                seen.add(expected)
    assert seen == {"medium", "high", "urgent"}  # the bakery's day reaches all three


def feed_of_bakery(minutes: int, tg: float = 40.0, tnw: float = 30.0) -> list[dict]:
    """The bakery's first records of the shipped feed, as many minutes of readings as asked,
    with the ovens hot from the first minute (spot WBGT = 0.7 x 30 + 0.3 x 40 = 33 °C,
    ISO 7243:2017 eq. (1))."""
    out = []
    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        for line in fh:
            rec = json.loads(line)
            if rec["topic"] != BAKERY_TOPIC:
                continue
            rec["payload"][0]["v"] = tg
            rec["payload"][1]["v"] = tnw
            out.append(rec)
            if len(out) >= minutes:
                break
    assert len(out) == minutes and out[1]["t"] - out[0]["t"] == pytest.approx(60)
    return out


def wbgt_hours(page: str, space: str) -> tuple[str, str]:
    row = re.search(rf"<tr><td>{re.escape(space)}</td>(.*?)</tr>", page, re.S)
    assert row is not None
    cells = re.findall(r"<td[^>]*>(.*?)</td>", row.group(1))
    return cells[-5], cells[-4]  # WBGT > action, WBGT > limit (then 3 columns of advice)


def test_no_wbgt_hours_before_the_60_minute_mean_existed(tmp_path):
    """40 minutes of ovens far above both references (33 °C against about 25 and 28 °C):
    the 60-minute mean needs 48 of 60 minutes (ISO 7243:2017 time weighting, as the engine
    keeps it), so no hour above either may be counted; the report says there was no mean."""
    feed = tmp_path / "short.jsonl"
    feed.write_text("".join(json.dumps(r) + "\n" for r in feed_of_bakery(40)))
    r = run_report("--feed", str(feed), "--output", str(tmp_path / "r.html"))
    assert r.returncode == 0, r.stderr
    page = (tmp_path / "r.html").read_text()
    assert wbgt_hours(page, "Bakery production floor (ovens)") == (
        "no 60-minute mean", "no 60-minute mean")
    # the spot value is drawn, labelled as such; no 60-minute line (matplotlib writes each
    # legend text as a comment beside its drawing)
    assert "WBGT, spot value with the clothing adjustment (not the 60-minute mean)" in page
    assert "WBGT, 60-minute mean" not in page


def test_wbgt_hours_counted_only_once_the_mean_exists(tmp_path):
    """90 minutes of the same heat: the mean exists from the 48th minute on, so about 42 of
    the 90 minutes count (0.7 h, less up to one 5-minute sample before the first sample that
    has the mean, shown to 0.1 h), not 1.5 h."""
    feed = tmp_path / "longer.jsonl"
    feed.write_text("".join(json.dumps(r) + "\n" for r in feed_of_bakery(90)))
    r = run_report("--feed", str(feed), "--output", str(tmp_path / "r.html"))
    assert r.returncode == 0, r.stderr
    page = (tmp_path / "r.html").read_text()
    action, limit = wbgt_hours(page, "Bakery production floor (ovens)")
    for cell in (action, limit):
        hours = float(cell.removesuffix(" h"))
        assert 0.5 <= hours <= 0.75, cell
    assert "WBGT, 60-minute mean" in page


def test_never_writes_over_a_file_it_did_not_create(tmp_path):
    mine = tmp_path / "larkfield-report.html"
    mine.write_text("my own notes, not a report\n")
    short = tmp_path / "short.jsonl"
    short.write_text("".join(json.dumps(r) + "\n" for r in feed_of_bakery(10)))
    # no --output: the usual name is taken by someone else's file: another name, said so
    r = run_report("--feed", str(short), cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert mine.read_text() == "my own notes, not a report\n"
    other = tmp_path / "larkfield-report-2.html"
    assert other.exists() and "larkfield-report-2.html" in r.stderr
    assert "not a report written by thermowarden" in r.stderr
    # --output naming that file: refused, before any work, the file untouched
    r = run_report("--feed", str(short), "--output", str(mine))
    assert r.returncode == 2
    assert "not written over" in r.stderr and str(mine) in r.stderr
    assert mine.read_text() == "my own notes, not a report\n"
    # a report it wrote before may be written again
    before = other.stat().st_mtime_ns
    r = run_report("--feed", str(short), "--output", str(other))
    assert r.returncode == 0, r.stderr
    assert other.stat().st_mtime_ns >= before and "<!doctype html>" in other.read_text()


@pytest.fixture(scope="module")
def acknowledged_store(tmp_path_factory):
    """The shipped day through the engine into a real store, as the service keeps it, with
    the bakery's heat-stress alert acknowledged by a person 20 minutes after it was raised
    (an acknowledgement: nobody switched anything)."""
    folder = tmp_path_factory.mktemp("state")
    config = load_site(SITE, {})
    names = {n for s in config.spaces for n in config.rule_packs(s)}
    engine = Engine(config, build_site_model(config),
                    load_rule_packs(names, config.rule_dirs, base=str(SITE)),
                    conditions_every_s=0, advisory_refresh_s=0, sample_every_s=300.0)
    store = Store(folder / f"{config.site.id}.sqlite3")
    acknowledged: dict[str, float] = {}
    raised: dict[str, float] = {}

    def keep(effects, now):
        for e in effects:
            if isinstance(e, Persist) and e.kind == "event" and e.record:
                store.add_event(e.key, now, e.record)
                adv = e.record.get("advisory") or {}
                if (e.record.get("event") == "raised" and adv.get("rule") == "heat_stress.wbgt"
                        and adv["space"]["id"] == "bakery-floor" and not raised):
                    raised[adv["id"]] = now
            elif isinstance(e, Persist) and e.kind == "sample" and e.record:
                store.add_sample(float(e.record["t"]), e.record)

    next_tick = None
    last = None
    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        for line in fh:
            rec = json.loads(line)
            t = float(rec["t"])
            p = rec["payload"]
            payload = p.encode() if isinstance(p, str) else json.dumps(p).encode()
            next_tick = next_tick or (t // 60 + 1) * 60
            while t >= next_tick:
                keep(engine.tick(next_tick), next_tick)
                for aid, at in raised.items():
                    if aid not in acknowledged and next_tick >= at + 1200:
                        body = json.dumps({"advisory_id": aid, "by": "Sam, shift lead"})
                        reply, effects = engine.command("acknowledge", body.encode(),
                                                        next_tick, "safety")
                        assert reply["ok"], reply
                        keep(effects, next_tick)
                        acknowledged[aid] = next_tick
                next_tick += 60
            engine.message(rec["topic"], payload, t)
            last = t
    keep(engine.tick(next_tick), next_tick)
    store.close()
    assert acknowledged
    return folder, last


def test_store_report_takes_the_last_day_and_tells_an_acknowledgement_apart(
        acknowledged_store, tmp_path):
    folder, last = acknowledged_store
    out = tmp_path / "day.html"
    r = run_report("--state-dir", str(folder), "--output", str(out))  # no --from, --to
    assert r.returncode == 0, r.stderr
    page = out.read_text()
    # the last day of data: from a day before the last stored sample or event (the feed's
    # day ends at 19:59 local) to it
    period = re.search(r"Monday 13 July 2026 (\d\d:\d\d) to Tuesday 14 July 2026 "
                       r"(\d\d:\d\d) \(Europe/London\)", page)
    assert period is not None and period.group(1) == period.group(2)
    assert "19:50" <= period.group(2) <= "19:59"
    rows = re.findall(r"<tr><td><ul class=levels><li>[\d:]+ <b>\w+</b>: "
                      r"(Heat stress [^<]*Bakery[^<]*)</li>.*?</ul></td>(.*?)</tr>", page, re.S)
    rows = [r for r in rows if " expected in " not in r[0]]  # not the ahead-of-time ones
    assert rows, "the bakery's heat-stress advisory is in the report"
    first = rows[0]
    cells = re.findall(r'<td data-label="[^"]*">(.*?)</td>', first[1])
    acknowledged, acted, cleared, effect = cells
    assert re.fullmatch(r"\d\d:\d\d by Sam, shift lead", acknowledged), acknowledged
    assert acted == "-" and effect == "-"  # an acknowledgement is not an action
    assert re.fullmatch(r"\d\d:\d\d", cleared), cleared
    assert "pending" not in page
    # advice ahead of time, measured from the stored events with the site's rule packs
    # (rules/ahead.yaml): the heat-stress warnings of the bakery and the yard came before
    # their crossings, and no crossing came without one
    ahead = re.search(r"<section id=ahead>(.*?)</section>", page, re.S)
    assert ahead is not None
    row = re.search(r"<tr><td>Heat stress expected</td>(.*?)</tr>", ahead.group(1), re.S)
    assert row is not None
    cells = re.findall(r"<td[^>]*>(.*?)</td>", row.group(1))
    assert cells[1] == "2 of 2 crossings" and cells[-1] == "none", cells


def test_a_store_without_data_says_so(tmp_path):
    Store(tmp_path / "larkfield.sqlite3").close()
    r = run_report("--state-dir", str(tmp_path), "--output", str(tmp_path / "r.html"))
    assert r.returncode == 2
    assert "holds no data yet" in r.stderr
    assert not (tmp_path / "r.html").exists()


def test_no_bar_past_the_end_of_the_data():
    """An advisory still live when the data stop, in a report asked for hours longer: its
    bar ends where the data end, not at the end of the period."""
    rep = SpaceReport("s", "Room", natural=False, hot_work=True)
    rep.data_end = 1_000_000.0 + 3600
    rep.advisories = [{
        "levels": [{"priority": "medium", "title": "approaching", "from": 1_000_000.0},
                   {"priority": "high", "title": "above", "from": 1_000_000.0 + 1800}],
        "raised": 1_000_000.0, "cleared": None}]
    spans = timeline_spans(rep, 1_000_000.0 - 3600, 1_000_000.0 + 6 * 3600)
    assert [(k, t0, t1, p) for k, t0, t1, p in spans] == [
        (0, 1_000_000.0, 1_000_000.0 + 1800, "medium"),
        (0, 1_000_000.0 + 1800, 1_000_000.0 + 3600, "high")]
