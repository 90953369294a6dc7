"""Reports of a site of buildings and floors, from the store: the hours per space against
a count by hand, the roll-up by building and floor, one report per building (also through
``thermowarden report --building``), and the same numbers from a stream as from a list."""

from __future__ import annotations

import shutil
import subprocess
import sys

import pytest

from tests.conftest import REPO
from thermowarden.config import load_site
from thermowarden.shell.report import build_report, stored_samples, write_reports
from thermowarden.shell.store import Store

SITE = REPO / "deploy" / "campus-site.yaml"
DAY = 1_780_012_800.0  # a midnight UTC (the campus is in Europe/London: 01:00 BST)


def sample(config, t: float, hot: set[str]) -> dict:
    ids = [s.id for s in config.spaces]
    n = len(ids)
    return {"t": t, "spaces": ids,
            "operative": [28.0 if i in hot else 22.0 for i in ids],
            "category_iso": [3 if i in hot else 0 for i in ids], "category_en": [None] * n,
            "en_lower": [None] * n, "en_upper": [None] * n, "band_lower": [20.0] * n,
            "band_upper": [26.0] * n,
            "wbgt": [29.0 if i == "yard-dock" else None for i in ids],
            "wbgt_60min": [29.0 if i == "yard-dock" else None for i in ids],
            "wbgt_spot": [29.0 if i == "yard-dock" else None for i in ids],
            "ref_unacclimatised": [27.5 if i == "yard-dock" else None for i in ids],
            "ref_acclimatised": [30.5 if i == "yard-dock" else None for i in ids],
            "heat_index": [None] * n, "utci": [None] * n, "occupied": [True] * n}


@pytest.fixture
def store(tmp_path):
    config = load_site(SITE, {})
    path = tmp_path / "ashgrove.sqlite3"
    s = Store(path)
    # 12 samples 5 minutes apart (an hour); north-201 is hot for the first half hour
    for k in range(12):
        s.add_sample(DAY + 300 * k, sample(config, DAY + 300 * k,
                                           {"north-201"} if k < 6 else set()))
    s.close()
    return config, path


def test_hours_and_rollup_from_the_store(store, tmp_path):
    config, path = store
    reports = build_report(config, stored_samples(path, DAY, DAY + 3600), [], DAY, DAY + 3600)
    # by hand: 6 samples of 5 minutes outside category C, 6 in A; one hour occupied
    r = reports["north-201"]
    assert r.hours_iso["outside C"] == pytest.approx(0.5)
    assert r.hours_iso["A"] == pytest.approx(0.5)
    assert r.hours_occupied == pytest.approx(1.0)
    assert reports["yard-dock"].hours_wbgt_action == pytest.approx(1.0)
    assert reports["yard-dock"].hours_wbgt_limit == 0.0
    # a stream and a list give the same numbers
    listed = build_report(config, list(stored_samples(path, DAY, DAY + 3600)), [], DAY,
                          DAY + 3600)
    assert {k: (v.hours_iso, v.hours_occupied) for k, v in listed.items()} == {
        k: (v.hours_iso, v.hours_occupied) for k, v in reports.items()}
    written = write_reports(config, path, tmp_path / "reports", DAY, DAY + 3600, "hour")
    names = sorted(p.name for p in written)
    assert names == sorted(["ashgrove-hour.html", "ashgrove-hour-north.html",
                            "ashgrove-hour-south.html", "ashgrove-hour-east.html",
                            "ashgrove-hour-yard.html"])
    site = written[0].read_text()
    assert "By building and floor" in site and "North Building · First floor" in site
    north = (tmp_path / "reports" / "ashgrove-hour-north.html").read_text()
    assert "Ashgrove Campus · North Building" in north
    assert "North 201 open office" in north and "South 101" not in north
    assert "<svg" in north  # a building of a few rooms gets its plots


def test_report_cli_for_one_building(store, tmp_path):
    config, path = store
    out = tmp_path / "north.html"
    cmd = [sys.executable, "-m", "thermowarden.cli", "report", "--config", str(SITE),
           "--state-dir", str(tmp_path), "--from", "2026-05-29T00:00:00Z",
           "--to", "2026-05-29T01:00:00Z", "--output", str(out)]
    assert shutil.which(sys.executable)
    r = subprocess.run(cmd + ["--building", "south"], capture_output=True, text=True,
                       timeout=300)
    assert r.returncode == 0, r.stderr
    text = out.read_text()
    assert "South Building" in text and "South 101 wet lab" in text and "North 201" not in text
    r = subprocess.run(cmd + ["--building", "west"], capture_output=True, text=True,
                       timeout=300)
    assert r.returncode == 2 and "no space is in building or area 'west'" in r.stderr
    assert "east, north, south, yard" in r.stderr
