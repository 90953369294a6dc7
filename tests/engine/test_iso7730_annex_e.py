"""ISO 7730:2005 Annex E (PMV by operative temperature, relative air velocity, metabolic
rate and clothing at 50 % RH, air = mean radiant temperature): every row of the half of the
table in tests/data/iso7730-annex-e.csv (its source in the file's header: the comf R
package's dfISO7730AppE) through the engine, one space per row, and a sample through
``thermowarden assess``, within 0.1 PMV (the tables print 2 decimals of an iterated
solution).

The engine gives PMV only inside ISO 7730's range (4.1 and the applicability of the
index: air temperature 10-30 °C, PMV within ±2); the table prints values beyond it. Those
rows are withheld by the engine with that reason, and the method itself (the same core
function) is checked on them too."""

from __future__ import annotations

import csv
import io
import json
import sys
from typing import Any

import numpy as np
import pytest

from tests.conftest import REPO
from thermowarden import cli
from thermowarden.config import load_site
from thermowarden.core import comfort
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

DATA = REPO / "tests" / "data" / "iso7730-annex-e.csv"
TOLERANCE = 0.1
OUTSIDE = {"outside ISO 7730 range: PMV beyond ±2 (use a heat or cold stress index)",
           "outside ISO 7730 range: air_temperature 10-30 °C"}


def _rows() -> list[dict[str, float]]:
    with DATA.open(encoding="utf-8") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]
    return [{k: float(v) for k, v in r.items()} for r in csv.DictReader(lines)]


ROWS = _rows()


@pytest.fixture(scope="module")
def engine_pmv(tmp_path_factory: pytest.TempPathFactory) -> tuple[Any, np.ndarray]:
    site = tmp_path_factory.mktemp("annex-e") / "site.yaml"
    site.write_text(
        "site: {id: annex, timezone: UTC}\noutput: {prefix: tw/annex}\n"
        "defaults: {occupancy: {always: true}}\ntemplates:\n"
        "  - {topic: 'e/{space}/ta', quantity: air_temperature}\n"
        "  - {topic: 'e/{space}/rh', quantity: relative_humidity}\n"
        "  - {topic: 'e/{space}/tr', quantity: mean_radiant_temperature}\n"
        "  - {topic: 'e/{space}/v', quantity: air_speed, interval_s: 10}\n"
        "spaces:\n" + "".join(f"  - {{id: r{i}, people: {{met: {r['met']}, clo: {r['clo']}}}}}\n"
                              for i, r in enumerate(ROWS)))
    config = load_site(site, {})
    engine = Engine(config, build_site_model(config), load_rule_packs([]),
                    conditions_every_s=0, start=0.0)
    for t in (0.0, 10.0, 20.0):
        for i, r in enumerate(ROWS):
            for key, v in (("ta", r["top"]), ("rh", r["rh"]), ("tr", r["top"]),
                           ("v", r["vel"])):
                engine.message(f"e/r{i}/{key}", repr(v).encode(), t)
        engine.tick(t + 1.0)
    assert engine.last_table is not None
    return engine.last_table["pmv_iso"], np.array([r["pmv"] for r in ROWS])


def test_every_row_through_the_engine(engine_pmv):
    col, printed = engine_pmv
    assert len(ROWS) == 1482
    given = col.present
    diff = np.abs(col.values[given] - printed[given])
    assert diff.max() <= TOLERANCE  # measured: at most 0.084
    assert given.sum() == 1356
    # the 126 others lie outside ISO 7730's range, and say so
    withheld = np.flatnonzero(~given)
    reasons = {col.reason_at(int(i)) for i in withheld}
    assert reasons == OUTSIDE
    top = np.array([ROWS[i]["top"] for i in withheld])
    beyond = (np.abs(printed[withheld]) > 2.0 - TOLERANCE) | (top > 30.0)
    assert beyond.all()
    # the method agrees there too (the same function, without the range)
    def a(key: str) -> np.ndarray:
        return np.array([ROWS[i][key] for i in withheld])
    pmv = comfort.pmv_fanger(a("top"), a("top"), a("vel"), a("rh"), a("met"), a("clo"))
    assert np.abs(pmv - printed[withheld]).max() <= TOLERANCE  # measured: at most 0.080


@pytest.mark.parametrize("row", ROWS[::37], ids=lambda r: f"{r['top']}C-{r['vel']}-"
                         f"{r['met']}met-{r['clo']}clo")
def test_a_sample_through_assess(row, monkeypatch, capsys):
    payload = {"air_temperature": row["top"], "mean_radiant_temperature": row["top"],
               "air_speed": row["vel"], "relative_humidity": row["rh"], "met": row["met"],
               "clo": row["clo"]}
    monkeypatch.setattr(sys, "stdin", io.StringIO(json.dumps(payload)))
    assert cli.main(["assess"]) == 0
    out = json.loads(capsys.readouterr().out)["pmv_iso"]
    if out["value"] is None:
        assert out["reason"] in OUTSIDE
        assert abs(row["pmv"]) > 2.0 - TOLERANCE or row["top"] > 30.0
    else:
        assert out["value"] == pytest.approx(row["pmv"], abs=TOLERANCE)
