"""Whole published tables through the engine: one space per row, fed through MQTT topics
and evaluated by ticks, as the service computes them. Tables and sources:
tests/data/published_values.yaml (ISO 7730 Table D.1, ASHRAE 55 PMV and SET tables,
Environment Canada humidex, ISO 7933:2004 Annex F)."""

from __future__ import annotations

from typing import Any

import pytest

from tests.conftest import PUBLISHED, table
from thermowarden.config import load_site
from thermowarden.engine import Engine
from thermowarden.rules import load_rule_packs
from thermowarden.site_model import build_site_model

D1 = table("pmv_iso_7730_table_d1")
ASHRAE = table("pmv_ashrae_55")
SET = table("set_ashrae_55")
HUMIDEX = table("humidex")
ANNEX_F = table("phs_iso_7933_2004_annex_f")
ASHRAE_MET = 1.1
ASHRAE_VR = 0.1
# ASHRAE 55 takes vr = v + 0.3 (M - 1) above 1 met: the measured speed whose relative speed
# is the table's 0.1 m/s at 1.1 met
ASHRAE_MEASURED_V = ASHRAE_VR - 0.3 * (ASHRAE_MET - 1.0)


def _space(sid: str, people: str | None = None, extra: str = "") -> str:
    text = f"  - id: {sid}\n"
    if people:
        text += f"    people: {{{people}}}\n"
    return text + extra


def _site() -> tuple[str, dict[str, dict[str, float]]]:
    spaces: list[str] = []
    readings: dict[str, dict[str, float]] = {}
    for i, r in enumerate(D1):
        spaces.append(_space(f"d1-{i}", f"met: {r['met']}, clo: {r['clo']}"))
        readings[f"d1-{i}"] = {"ta": r["ta"], "tr": r["tr"], "v": r["vr"], "rh": r["rh"]}
    for i, r in enumerate(ASHRAE):
        spaces.append(_space(f"ash-{i}", f"met: {ASHRAE_MET}, clo: {r['clo']}"))
        readings[f"ash-{i}"] = {"ta": r["ta"], "tr": r["ta"], "v": ASHRAE_MEASURED_V,
                                "rh": r["rh"]}
    for i, r in enumerate(SET):
        spaces.append(_space(f"set-{i}", f"met: {r['met']}, clo: {r['clo']}"))
        readings[f"set-{i}"] = {"ta": r["ta"], "tr": r["tr"], "v": r["v"], "rh": r["rh"]}
    for i, r in enumerate(HUMIDEX):
        spaces.append(_space(f"hx-{i}", extra="    kind: outdoor\n"))
        readings[f"hx-{i}"] = {"ta": r["ta"], "rh": r["rh"]}
    for i, r in enumerate(ANNEX_F):
        met = r["met_w_m2"] / 58.15
        spaces.append(_space(f"phs-{i}", f"met: {met}, clo: {r['clo']}, "
                             f"acclimatised: {str(r['acclimatised']).lower()}",
                             '    hot_work: true\n    phs_edition: "2004"\n'))
        readings[f"phs-{i}"] = {"ta": r["ta"], "tr": r["tr"], "v": r["va"], "rh": r["rh"]}
    site = ("site: {id: tables, timezone: UTC}\n"
            "output: {prefix: tw/tables}\n"
            "defaults: {occupancy: {always: true}}\n"
            "templates:\n"
            '  - {topic: "t/{space}/ta", quantity: air_temperature, interval_s: 10}\n'
            '  - {topic: "t/{space}/tr", quantity: mean_radiant_temperature, interval_s: 10}\n'
            '  - {topic: "t/{space}/rh", quantity: relative_humidity, interval_s: 10}\n'
            '  - {topic: "t/{space}/v", quantity: air_speed, interval_s: 10}\n'
            "spaces:\n" + "".join(spaces))
    return site, readings


@pytest.fixture(scope="module")
def rows(tmp_path_factory: pytest.TempPathFactory) -> dict[str, dict[str, Any]]:
    site, readings = _site()
    path = tmp_path_factory.mktemp("tables") / "site.yaml"
    path.write_text(site)
    config = load_site(path, {})
    engine = Engine(config, build_site_model(config), load_rule_packs([], base=path),
                    conditions_every_s=0, start=0.0)
    for t in range(0, 301, 10):
        for space, values in readings.items():
            for key, v in values.items():
                engine.message(f"t/{space}/{key}", str(v).encode(), float(t))
        engine.tick(float(t))
    return {s.id: engine.conditions_payload(i)["indices"] for i, s in enumerate(config.spaces)}


def value(indices: dict[str, Any], key: str) -> float:
    item = indices[key]
    assert item["value"] is not None, f"{key}: {item.get('reason')}"
    return float(item["value"])


@pytest.mark.parametrize("i", range(len(D1)))
def test_iso_7730_table_d1(rows, i):
    """ISO 7730:2005 Table D.1, every row kept in the data file (measured air speed = the
    table's relative speed: ISO 7730 adds nothing for activity)."""
    r, tol = D1[i], PUBLISHED["pmv_iso_7730_table_d1"]["tolerance"]
    assert value(rows[f"d1-{i}"], "pmv_iso") == pytest.approx(r["pmv"], abs=tol["pmv"])
    assert value(rows[f"d1-{i}"], "ppd_iso") == pytest.approx(r["ppd"], abs=tol["ppd"])


@pytest.mark.parametrize("i", range(len(ASHRAE)))
def test_ashrae_55_pmv(rows, i):
    """ASHRAE 55 PMV table (vr 0.1 m/s, 1.1 met) from a measured 0.07 m/s."""
    r, tol = ASHRAE[i], PUBLISHED["pmv_ashrae_55"]["tolerance"]
    assert value(rows[f"ash-{i}"], "pmv_ashrae") == pytest.approx(r["pmv"], abs=tol["pmv"])
    assert value(rows[f"ash-{i}"], "ppd_ashrae") == pytest.approx(r["ppd"], abs=tol["ppd"])


@pytest.mark.parametrize("i", range(len(SET)))
def test_ashrae_55_set(rows, i):
    r = SET[i]
    assert value(rows[f"set-{i}"], "set") == pytest.approx(
        r["set"], abs=PUBLISHED["set_ashrae_55"]["tolerance"])


@pytest.mark.parametrize("i", range(len(HUMIDEX)))
def test_humidex_environment_canada(rows, i):
    r = HUMIDEX[i]
    assert value(rows[f"hx-{i}"], "humidex") == pytest.approx(
        r["humidex"], abs=PUBLISHED["humidex"]["tolerance"])


@pytest.mark.parametrize("i", range(len(ANNEX_F)))
def test_iso_7933_2004_annex_f(rows, i):
    r, tol = ANNEX_F[i], PUBLISHED["phs_iso_7933_2004_annex_f"]["tolerance"]
    c = rows[f"phs-{i}"]
    assert value(c, "phs_rectal_temperature") == pytest.approx(r["t_re"], abs=tol["t_re"])
    assert value(c, "phs_sweat_loss") == pytest.approx(r["sweat_g"], abs=tol["sweat"])
    assert value(c, "phs_limit_rectal") == pytest.approx(r["d_lim_t_re"], abs=tol["duration"])
    assert value(c, "phs_limit_water_loss_95") == pytest.approx(r["d_lim_loss_95"],
                                                                abs=tol["duration"])
