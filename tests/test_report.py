"""Reports: the numbers of a simulated day checked against the feed itself, the HTML
rendered (and opened in a headless browser where the machine has one)."""

from __future__ import annotations

import gzip
import json
import math
import pathlib
import shutil
import subprocess
import sys

import numpy as np
import pytest

from tests.conftest import COMMAND_LIMIT_S, REPO
from tests.recorded_day import recorded_day
from thermowarden.config import load_site
from thermowarden.shell.report import build_report, render_html

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"


@pytest.fixture(scope="module")
def day():
    config = load_site(SITE, {})
    result = recorded_day(60.0)
    start, end = result.start, result.end + 1
    return config, result, build_report(config, result.samples, result.events, start, end)


def bakery_wbgt_from_feed():
    """Spot WBGT of the bakery straight from the feed (ISO 7243 eq. 1), per record time."""
    times, values = [], []
    with gzip.open(FEED, "rt", encoding="utf-8") as fh:
        for line in fh:
            rec = json.loads(line)
            if rec["topic"] == "larkfield/bakery-floor/senml":
                tg = rec["payload"][0]["v"]
                tnw = rec["payload"][1]["v"]
                times.append(rec["t"])
                values.append(0.7 * tnw + 0.3 * tg)
    return np.array(times), np.array(values)


def test_wbgt_hours_match_the_feed(day):
    """Hours with the 60-minute WBGT above the action level, recomputed from the raw feed:
    a trailing 60-minute mean of the spot WBGT against the unacclimatised reference for
    moderate work (ISO 7243:2017 Annex A: 59.9 - 14.1 log10(165 x 1.8 W) = 24.97 °C [calc])."""
    config, result, report = day
    t, w = bakery_wbgt_from_feed()
    ref = 59.9 - 14.1 * math.log10(165.0 * 1.8)
    sample_times = np.array([s["t"] for s in result.samples])
    above = 0
    for st in sample_times:
        inside = (t > st - 3600) & (t <= st)
        if inside.sum() >= 48 and w[inside].mean() > ref:
            above += 1
    expected_h = above * 300 / 3600
    got = report["bakery-floor"].hours_wbgt_action
    assert got == pytest.approx(expected_h, abs=0.3)
    assert got > 3  # the ovens run most of the day


def test_advisory_counts_match_the_replay(day):
    config, result, report = day
    for space in ("office-west", "bakery-floor", "studio-north"):
        raised = sum(1 for e in result.events if e["event"] == "raised"
                     and e["advisory"]["space"]["id"] == space)
        assert report[space].raised == raised
    office = report["office-west"]
    assert office.acted_on >= 2  # blinds and fans
    total = sum(office.hours_iso.values())
    assert 0 < total <= 15.1  # the feed covers 15 hours


def test_html_is_self_contained(day, tmp_path):
    config, result, report = day
    text = render_html(config, report, result.start, result.end + 1)
    assert text.startswith("<!doctype html>")
    # nothing is loaded from elsewhere (XML namespace URIs in the SVG are only names)
    for loader in ("<script", "<link", 'src="http', "url(http", "@import"):
        assert loader not in text
    assert text.count("<svg") >= 6
    assert "occupational hygienist" in text
    (tmp_path / "r.html").write_text(text)


@pytest.mark.long
def test_report_cli_from_feed(tmp_path):
    out = tmp_path / "report.html"
    r = subprocess.run([sys.executable, "-m", "thermowarden.cli", "report", "--config",
                        str(SITE), "--feed", str(FEED), "--output", str(out)],
                       capture_output=True, text=True, timeout=COMMAND_LIMIT_S)
    assert r.returncode == 0, r.stderr
    assert out.stat().st_size > 50_000


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.skipif(CHROMIUM is None, reason="no headless chromium on this machine")
@pytest.mark.long
def test_report_opens_in_a_headless_browser(day, tmp_path):
    config, result, report = day
    page = tmp_path / "report.html"
    page.write_text(render_html(config, report, result.start, result.end + 1))
    shot = tmp_path / "report.png"
    subprocess.run([CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu",
                    "--disable-background-networking", "--disable-component-update",
                    "--disable-sync", "--no-first-run", f"--user-data-dir={tmp_path}/profile",
                    "--window-size=1100,2400", f"--screenshot={shot}", page.as_uri()],
                   capture_output=True, timeout=120, check=False)
    assert shot.exists() and shot.stat().st_size > 20_000
    pathlib.Path(shot).unlink()
