"""``thermowarden export``: a day's conditions written to the real SQLite store by the
engine (replay of the recorded feed), exported through the command line to CSV and Parquet,
and read back with the same values."""

from __future__ import annotations

import csv
import datetime as dt
import math
import sys
import zoneinfo

import pytest

from tests.conftest import REPO
from tests.recorded_day import recorded_day
from thermowarden.cli import main
from thermowarden.config import load_site
from thermowarden.export import HEADER
from thermowarden.shell.store import Store

SITE = REPO / "deploy" / "example-site.yaml"
FEED = REPO / "simulated_feeds" / "recorded" / "larkfield-day.jsonl.gz"
CATEGORIES = {"comfort_category_iso": ("A", "B", "C", "outside C"),
              "adaptive_en_category": ("I", "II", "III", "outside III")}
KEYS = {"operative_temperature": "operative", "pmv_iso": "pmv",
        "comfort_category_iso": "category_iso", "adaptive_en_category": "category_en",
        "adaptive_en_II_lower": "en_lower", "adaptive_en_II_upper": "en_upper",
        "comfort_band_lower": "band_lower", "comfort_band_upper": "band_upper",
        "wbgt_effective": "wbgt", "wbgt_reference_unacclimatised": "ref_unacclimatised",
        "wbgt_reference_acclimatised": "ref_acclimatised", "heat_index": "heat_index",
        "utci": "utci", "occupied": "occupied"}


@pytest.fixture(scope="module")
def stored(tmp_path_factory):
    """The recorded day replayed by the engine, its samples in a store (plus one sample
    of the day before, which a one-day export must leave out)."""
    config = load_site(SITE, {})
    result = recorded_day(60.0)
    state = tmp_path_factory.mktemp("state")
    store = Store(state / f"{config.site.id}.sqlite3")
    for s in result.samples:
        store.add_sample(s["t"], s)
    earlier = {**result.samples[0], "t": result.samples[0]["t"] - 86_400}
    store.add_sample(earlier["t"], earlier)
    store.close()
    tz = zoneinfo.ZoneInfo(config.site.timezone)
    day = dt.datetime.fromtimestamp(result.samples[len(result.samples) // 2]["t"], tz).date()
    start = dt.datetime.combine(day, dt.time(0), tz).timestamp()
    end = start + 86_400
    return state, [s for s in result.samples if start <= s["t"] < end], day


def expected(samples):
    for s in samples:
        for i, space in enumerate(s["spaces"]):
            values = {}
            for col, key in KEYS.items():
                v = s[key][i]
                if v is not None and col in CATEGORIES:
                    v = CATEGORIES[col][int(v)]
                values[col] = v
            yield s["t"], space, values


def test_csv_round_trip(stored, tmp_path):
    state, samples, day = stored
    out = tmp_path / "day.csv"
    assert main(["export", "--config", str(SITE), "--state-dir", str(state),
                 "--day", day.isoformat(), str(out)]) == 0
    with open(out, encoding="utf-8", newline="") as fh:
        reader = csv.DictReader(fh)
        assert tuple(reader.fieldnames) == HEADER
        got = list(reader)
    want = list(expected(samples))
    assert len(got) == len(want) > 200  # a day of 5-minute samples for several spaces
    present = 0
    for row, (t, space, values) in zip(got, want, strict=True):
        assert float(row["epoch_s"]) == t and row["space"] == space
        assert row["time_utc"] == dt.datetime.fromtimestamp(t, dt.UTC).strftime(
            "%Y-%m-%dT%H:%M:%SZ")
        for col, v in values.items():
            if v is None:
                assert row[col] == ""
            elif col in CATEGORIES:
                assert row[col] == v
            elif col == "occupied":
                assert row[col] == str(v)
            else:
                assert float(row[col]) == v  # the same value, not merely close
                present += 1
    assert present > 1000
    # some WBGT values are in the day (the bakery), UTCI outdoors, occupied and vacant
    # hours, and categories were exported as labels
    assert any(r["wbgt_effective"] for r in got)
    assert any(r["utci"] for r in got)
    assert {r["occupied"] for r in got} == {"True", "False"}
    assert {r["comfort_category_iso"] for r in got} & {"A", "B", "C", "outside C"}


def test_parquet_round_trip(stored, tmp_path):
    pq = pytest.importorskip("pyarrow.parquet", reason="the parquet extra is not installed")
    state, samples, day = stored
    out = tmp_path / "day.parquet"
    assert main(["export", "--config", str(SITE), "--state-dir", str(state),
                 "--day", day.isoformat(), "--spaces", "bakery-floor,office-west",
                 str(out)]) == 0
    table = pq.read_table(out).to_pylist()
    want = [w for w in expected(samples) if w[1] in ("bakery-floor", "office-west")]
    assert len(table) == len(want) > 100
    for row, (t, space, values) in zip(table, want, strict=True):
        assert row["epoch_s"] == t and row["space"] == space
        assert row["time_utc"] == dt.datetime.fromtimestamp(t, dt.UTC)
        for col, v in values.items():
            if isinstance(v, float) and math.isnan(v):
                continue
            assert row[col] == v


def test_parquet_without_pyarrow_says_what_to_install(stored, tmp_path, monkeypatch, capsys):
    state, _, day = stored
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    monkeypatch.setitem(sys.modules, "pyarrow.parquet", None)
    assert main(["export", "--config", str(SITE), "--state-dir", str(state),
                 "--day", day.isoformat(), str(tmp_path / "x.parquet")]) == 2
    assert "pip install 'thermowarden[parquet]'" in capsys.readouterr().err


def test_bad_requests(stored, tmp_path, capsys):
    state, _, day = stored
    assert main(["export", "--config", str(SITE), "--state-dir", str(state),
                 "--day", day.isoformat(), str(tmp_path / "x.xlsx")]) == 2
    assert "must end in .csv or .parquet" in capsys.readouterr().err
    assert main(["export", "--config", str(SITE), "--state-dir", str(tmp_path / "none"),
                 "--day", day.isoformat(), str(tmp_path / "x.csv")]) == 2
    assert "no store at" in capsys.readouterr().err
    assert main(["export", "--config", str(SITE), "--state-dir", str(state),
                 str(tmp_path / "x.csv")]) == 2
    assert "give --day" in capsys.readouterr().err
