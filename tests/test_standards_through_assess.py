"""Published values reproduced through ``thermowarden assess``, the path a user takes.

Each table comes from tests/data/published_values.yaml, where its source is named: ISO 7730
Table D.1, the ASHRAE 55 PMV and SET tables, Environment Canada's humidex, ISO 7933:2004
Annex F and further 2004 cases, ISO 7933:2023 cases (pythermalcomfort's test suite and its
documented examples), Liljegren et al.'s natural wet bulb (their reference code: through a
globe, and outdoors without one from the irradiance and the sun's position for the time and
place) and the UTCI wind-height conversion. Most rows run the command's own
entry point in this process (``cli.main``: the same parsing, computing and printing as the
installed command); a few run the installed command in a subprocess.
"""

from __future__ import annotations

import io
import json
import subprocess
import sys
from typing import Any

import numpy as np
import pytest

from tests.conftest import PUBLISHED, table
from thermowarden import cli
from thermowarden.core import outdoor

MET_W_M2 = 58.15


def assess(payload: dict[str, Any], monkeypatch: pytest.MonkeyPatch,
           capsys: pytest.CaptureFixture[str]) -> dict[str, Any]:
    """Run ``thermowarden assess`` on one JSON object; the printed result."""
    monkeypatch.setattr(sys, "stdin", io.StringIO(json.dumps(payload)))
    code = cli.main(["assess"])
    out, err = capsys.readouterr()
    assert code == 0, err
    result: dict[str, Any] = json.loads(out)
    return result


def value(result: dict[str, Any], key: str) -> float:
    item = result[key]
    assert item["value"] is not None, f"{key}: {item.get('reason')}"
    return float(item["value"])


def run_installed(payload: dict[str, Any] | str) -> subprocess.CompletedProcess[str]:
    text = payload if isinstance(payload, str) else json.dumps(payload)
    return subprocess.run([sys.executable, "-m", "thermowarden.cli", "assess"], input=text,
                          capture_output=True, text=True, timeout=120)


# ------------------------------------------------------------------ ISO 7730 Table D.1

@pytest.mark.parametrize("speed_key", ["relative_air_speed", "air_speed"])
@pytest.mark.parametrize("row", table("pmv_iso_7730_table_d1"))
def test_iso_7730_table_d1(row, speed_key, monkeypatch, capsys):
    """ISO 7730:2005 Table D.1 (va is the relative air speed, static clothing). Given as
    relative_air_speed, or as the measured air_speed (ISO 7730 adds nothing for activity:
    at 1.6 met, 27 °C, 0.1 m/s the table's 1.17 must come out, not 0.87)."""
    tol = PUBLISHED["pmv_iso_7730_table_d1"]["tolerance"]
    r = assess({"air_temperature": row["ta"], "mean_radiant_temperature": row["tr"],
                speed_key: row["vr"], "relative_humidity": row["rh"], "met": row["met"],
                "clo": row["clo"]}, monkeypatch, capsys)
    assert value(r, "pmv_iso") == pytest.approx(row["pmv"], abs=tol["pmv"])
    assert value(r, "ppd_iso") == pytest.approx(row["ppd"], abs=tol["ppd"])


def test_iso_7730_row_12_installed_command():
    """ISO 7730:2005 Table D.1 row 12 through the installed command: 1.17 / 34 %."""
    r = run_installed({"air_temperature": 27, "mean_radiant_temperature": 27, "air_speed": 0.1,
                       "relative_humidity": 60, "met": 1.6, "clo": 0.5})
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["pmv_iso"]["value"] == pytest.approx(1.17, abs=0.02)
    assert out["ppd_iso"]["value"] == pytest.approx(34, abs=1)


# ------------------------------------------------------------------ ASHRAE 55

@pytest.mark.parametrize("row", table("pmv_ashrae_55"))
def test_ashrae_55_pmv(row, monkeypatch, capsys):
    """pythermalcomfort validation tables labelled ASHRAE 55-2017: vr 0.1 m/s, 1.1 met."""
    tol = PUBLISHED["pmv_ashrae_55"]["tolerance"]
    r = assess({"air_temperature": row["ta"], "mean_radiant_temperature": row["ta"],
                "air_speed": 0.1, "relative_air_speed": 0.1, "relative_humidity": row["rh"],
                "met": 1.1, "clo": row["clo"]}, monkeypatch, capsys)
    assert value(r, "pmv_ashrae") == pytest.approx(row["pmv"], abs=tol["pmv"])
    assert value(r, "ppd_ashrae") == pytest.approx(row["ppd"], abs=tol["ppd"])


@pytest.mark.parametrize("row", table("set_ashrae_55"))
def test_ashrae_55_set(row, monkeypatch, capsys):
    """ASHRAE 55-2017 SET table (measured air speed, static clothing), including the 2.0 met
    row (25.9 °C), which lies outside the PMV scope of ASHRAE 55 but inside SET's."""
    r = assess({"air_temperature": row["ta"], "mean_radiant_temperature": row["tr"],
                "air_speed": row["v"], "relative_humidity": row["rh"], "met": row["met"],
                "clo": row["clo"]}, monkeypatch, capsys)
    assert value(r, "set") == pytest.approx(row["set"], abs=PUBLISHED["set_ashrae_55"]["tolerance"])


# ------------------------------------------------------------------ humidex

@pytest.mark.parametrize("row", table("humidex"))
def test_humidex_environment_canada(row, monkeypatch, capsys):
    """Environment Canada's humidex formula (vapour pressure from the dew point)."""
    r = assess({"air_temperature": row["ta"], "relative_humidity": row["rh"],
                "environment": "outdoor"}, monkeypatch, capsys)
    assert value(r, "humidex") == pytest.approx(row["humidex"],
                                                abs=PUBLISHED["humidex"]["tolerance"])


@pytest.mark.parametrize("row", table("humidex_environment_canada_example"))
def test_humidex_environment_canada_example(row, monkeypatch, capsys):
    """Environment Canada's example, 30 °C with a 15 °C dew point -> 34."""
    tol = PUBLISHED["humidex_environment_canada_example"]["tolerance"]
    got = outdoor.humidex_from_dew_point(np.array([row["ta"]], dtype=float),
                                         np.array([row["td"]], dtype=float))[0]
    assert got == pytest.approx(row["humidex"], abs=tol)
    r = assess({"air_temperature": row["ta"], "relative_humidity": row["rh"],
                "environment": "outdoor"}, monkeypatch, capsys)
    assert value(r, "humidex") == pytest.approx(row["humidex"], abs=tol)


# ------------------------------------------------------------------ ISO 7933 PHS

def _phs_payload(row: dict[str, Any], met: float, edition: str) -> dict[str, Any]:
    return {"air_temperature": row["ta"], "mean_radiant_temperature": row["tr"],
            "air_speed": row["va"], "relative_humidity": row["rh"], "met": met,
            "clo": row["clo"], "posture": row["posture"], "acclimatised": row["acclimatised"],
            "hot_work": True, "phs_edition": edition}


def _check_phs(r: dict[str, Any], row: dict[str, Any], tol: dict[str, float]) -> None:
    assert value(r, "phs_rectal_temperature") == pytest.approx(row["t_re"], abs=tol["t_re"])
    assert value(r, "phs_sweat_loss") == pytest.approx(row["sweat_g"], abs=tol["sweat"])
    assert value(r, "phs_limit_rectal") == pytest.approx(row["d_lim_t_re"],
                                                         abs=tol["duration"])
    assert value(r, "phs_limit_water_loss_95") == pytest.approx(row["d_lim_loss_95"],
                                                                abs=tol["duration"])


@pytest.mark.parametrize("row", table("phs_iso_7933_2004_annex_f"))
def test_iso_7933_2004_annex_f(row, monkeypatch, capsys):
    """ISO 7933:2004 Annex F worked examples."""
    r = assess(_phs_payload(row, row["met_w_m2"] / MET_W_M2, "2004"), monkeypatch, capsys)
    _check_phs(r, row, PUBLISHED["phs_iso_7933_2004_annex_f"]["tolerance"])


@pytest.mark.parametrize("row", table("phs_iso_7933_2004_more"))
def test_iso_7933_2004_more_cases(row, monkeypatch, capsys):
    """Further ISO 7933:2004 cases, seated ones among them ("sitting" is accepted)."""
    r = assess(_phs_payload(row, row["met"], "2004"), monkeypatch, capsys)
    _check_phs(r, row, PUBLISHED["phs_iso_7933_2004_more"]["tolerance"])


@pytest.mark.parametrize("row", table("phs_iso_7933_2023"))
def test_iso_7933_2023_cases(row, monkeypatch, capsys):
    """ISO 7933:2023 (the default edition) cases as the reference library documents them."""
    tol = PUBLISHED["phs_iso_7933_2023"]["tolerance"]
    payload = {"air_temperature": row["ta"], "mean_radiant_temperature": row["tr"],
               "air_speed": row["va"], "relative_humidity": row["rh"], "met": row["met"],
               "clo": row["clo"], "acclimatised": True, "hot_work": True}
    r = assess(payload, monkeypatch, capsys)
    assert r["phs_rectal_temperature"]["method"] == "ISO 7933:2023"
    assert value(r, "phs_rectal_temperature") == pytest.approx(row["t_re"], abs=tol["t_re"])
    if row["sweat_g"] is not None:
        assert value(r, "phs_sweat_loss") == pytest.approx(row["sweat_g"], abs=tol["sweat"])


DUBOIS_75_KG_1_8_M = 0.202 * 75**0.425 * 1.8**0.725  # m², the ISO 7933 standard person


@pytest.mark.parametrize("row", table("phs_iso_7933_2023_standard_cases"))
def test_iso_7933_2023_standard_cases(row, monkeypatch, capsys):
    """ISO 7933:2023 cases as pythermalcomfort's test suite reproduces them (source in the
    data file): whole-body metabolic rate in W, per m² of the 75 kg, 1.8 m person."""
    tol = PUBLISHED["phs_iso_7933_2023_standard_cases"]["tolerance"]
    r = assess({"air_temperature": row["ta"], "mean_radiant_temperature": row["ta"],
                "air_speed": row["va"], "relative_humidity": row["rh"],
                "met": row["m_w"] / DUBOIS_75_KG_1_8_M / MET_W_M2, "clo": 0.5,
                "posture": "standing", "acclimatised": row["acclimatised"],
                "hot_work": True}, monkeypatch, capsys)
    assert r["phs_rectal_temperature"]["method"] == "ISO 7933:2023"
    assert value(r, "phs_rectal_temperature") == pytest.approx(row["t_core"], abs=tol["t_re"])
    assert value(r, "phs_sweat_loss") == pytest.approx(row["sweat_g"], rel=tol["sweat_rel"])
    assert value(r, "phs_limit_water_loss_95") == pytest.approx(row["d_lim_loss_95"],
                                                                abs=tol["duration"])
    if row["d_lim_t_re"] is not None:
        assert value(r, "phs_limit_rectal") == pytest.approx(row["d_lim_t_re"],
                                                             abs=tol["duration"])


@pytest.mark.parametrize("posture", ["seated", "sitting", "Sitting", "crouching", "standing"])
def test_hot_work_any_posture_spelling(posture):
    """A seated hot-work space used to print a traceback; every spelling now gives PHS."""
    r = run_installed({"air_temperature": 35, "mean_radiant_temperature": 35, "air_speed": 1.0,
                       "relative_humidity": 53.3, "met": 2.58, "clo": 0.5, "posture": posture,
                       "hot_work": True, "phs_edition": "2004"})
    assert r.returncode == 0, r.stderr
    assert "Traceback" not in r.stderr
    out = json.loads(r.stdout)
    assert out["phs_rectal_temperature"]["value"] is not None


# ------------------------------------------------------------------ natural wet bulb

@pytest.mark.parametrize("row", table("natural_wet_bulb_liljegren"))
def test_natural_wet_bulb_liljegren(row, monkeypatch, capsys):
    """Liljegren et al. (2008) reference code, no sun; pressure given in hPa."""
    r = assess({"air_temperature": row["ta"], "relative_humidity": row["rh"],
                "air_speed": row["v"], "mean_radiant_temperature": row["tr"],
                "barometric_pressure": row["p_hpa"]}, monkeypatch, capsys)
    got = value(r, "natural_wet_bulb_estimated")
    tol = PUBLISHED["natural_wet_bulb_liljegren"]["tolerance"]
    assert got == pytest.approx(row["tnw"], abs=tol)


@pytest.mark.parametrize("row", table("natural_wet_bulb_liljegren_sun"))
def test_natural_wet_bulb_liljegren_in_sun(row, monkeypatch, capsys):
    """Liljegren et al. (2008) reference code in sun, through its globe temperature."""
    tol = PUBLISHED["natural_wet_bulb_liljegren_sun"]["tolerance"]
    r = assess({"air_temperature": row["ta"], "relative_humidity": row["rh"],
                "air_speed": row["v"], "globe_temperature": row["tg"],
                "globe_diameter_m": 0.0508, "globe_emissivity": 0.95,
                "barometric_pressure": row["p_hpa"], "environment": "outdoor",
                "solar_load": True}, monkeypatch, capsys)
    assert value(r, "natural_wet_bulb_estimated") == pytest.approx(row["tnw"], abs=tol)
    assert value(r, "wbgt") > 0


@pytest.mark.parametrize("row", table("natural_wet_bulb_liljegren_irradiance"))
def test_natural_wet_bulb_from_irradiance_without_globe(row, monkeypatch, capsys):
    """Liljegren's reference code outdoors without a globe: the wick's radiation from the
    global horizontal irradiance, split at the sun's position for the time and place."""
    tol = PUBLISHED["natural_wet_bulb_liljegren_irradiance"]["tolerance"]
    r = assess({"air_temperature": row["ta"], "relative_humidity": row["rh"],
                "air_speed": row["v"], "solar_irradiance": row["ghi"],
                "latitude": row["lat"], "longitude": row["lon"], "time": row["time"],
                "barometric_pressure": row["p_hpa"], "environment": "outdoor",
                "solar_load": True}, monkeypatch, capsys)
    assert value(r, "natural_wet_bulb_estimated") == pytest.approx(row["tnw"], abs=tol["tnw"])
    assert "irradiance" in r["natural_wet_bulb_estimated"]["method"]


def test_natural_wet_bulb_irradiance_time_with_offset(monkeypatch, capsys):
    """The same instant written with a local offset gives the same sun and the same value."""
    row = table("natural_wet_bulb_liljegren_irradiance")[0]  # 18:00Z = 13:00-05:00
    base = {"air_temperature": row["ta"], "relative_humidity": row["rh"],
            "air_speed": row["v"], "solar_irradiance": row["ghi"], "latitude": row["lat"],
            "longitude": row["lon"], "barometric_pressure": row["p_hpa"],
            "environment": "outdoor", "solar_load": True}
    utc = value(assess({**base, "time": row["time"]}, monkeypatch, capsys),
                "natural_wet_bulb_estimated")
    local = value(assess({**base, "time": "2025-07-15T13:00:00-05:00"}, monkeypatch, capsys),
                  "natural_wet_bulb_estimated")
    assert local == pytest.approx(utc, abs=1e-9)


def test_a_trace_of_irradiance_reads_as_none(monkeypatch, capsys):
    """A near-zero global irradiance (a subnormal number, as a property test found) gives
    the value of zero irradiance, quietly: the direct beam's share is its limit, 0 (tests
    turn numpy warnings into errors)."""
    row = table("natural_wet_bulb_liljegren_irradiance")[0]
    base = {"air_temperature": row["ta"], "relative_humidity": row["rh"],
            "air_speed": row["v"], "latitude": row["lat"], "longitude": row["lon"],
            "time": row["time"], "environment": "outdoor", "solar_load": True}
    trace = value(assess({**base, "solar_irradiance": 2.2e-309}, monkeypatch, capsys),
                  "natural_wet_bulb_estimated")
    zero = value(assess({**base, "solar_irradiance": 0.0}, monkeypatch, capsys),
                 "natural_wet_bulb_estimated")
    assert trace == pytest.approx(zero, abs=1e-9)


@pytest.mark.parametrize(("drop", "reason"), [
    ("latitude", "latitude"), ("time", "time of the readings"),
    ("solar_irradiance", "solar_irradiance"), ("solar_load", "without solar load"),
    ("environment", "indoors"),
])
def test_natural_wet_bulb_without_globe_says_what_is_missing(drop, reason, monkeypatch,
                                                             capsys):
    """Without a globe the estimate needs the irradiance, the place and the time, outdoors in
    the sun; whatever is missing is named."""
    row = table("natural_wet_bulb_liljegren_irradiance")[0]
    payload: dict[str, Any] = {
        "air_temperature": row["ta"], "relative_humidity": row["rh"], "air_speed": row["v"],
        "solar_irradiance": row["ghi"], "latitude": row["lat"], "longitude": row["lon"],
        "time": row["time"], "environment": "outdoor", "solar_load": True}
    del payload[drop]
    if drop == "latitude":
        del payload["longitude"]
    if drop == "solar_load":  # outdoors it defaults to true, as for a site's space
        payload["solar_load"] = False
    r = assess(payload, monkeypatch, capsys)
    item = r["natural_wet_bulb_estimated"]
    assert item["value"] is None
    assert reason in item["reason"]


@pytest.mark.parametrize(("payload", "message"), [
    ({"time": "2025-07-15T18:00:00"}, "no UTC offset"),
    ({"time": "yesterday"}, "not an ISO 8601"),
    ({"time": 1752602400}, "expected an ISO 8601"),
    ({"latitude": 41.7}, "together"),
    ({"latitude": 95, "longitude": 0}, "impossible"),
])
def test_bad_time_or_place_is_refused(payload, message):
    r = run_installed({"air_temperature": 30, "relative_humidity": 50, **payload})
    assert r.returncode == 2, r.stdout
    assert message in r.stderr
    assert "Traceback" not in r.stderr


# ------------------------------------------------------------------ UTCI wind height

@pytest.mark.parametrize("row", table("utci"))
def test_utci_from_a_sensor_at_1_1_m(row, monkeypatch, capsys):
    """UTCI table rows (wind at 10 m) reproduced from the speed a sensor at 1.1 m would
    read on the logarithmic profile, and from the 10 m wind itself."""
    tol = PUBLISHED["utci"]["tolerance"]
    factor = PUBLISHED["utci_wind_height"]["rows"][0][2]  # 1 m/s at 1.1 m -> 1.470 at 10 m
    base = {"air_temperature": row["ta"], "mean_radiant_temperature": row["tr"],
            "relative_humidity": row["rh"], "environment": "outdoor"}
    at_10 = assess({**base, "air_speed": row["v"], "air_speed_height_m": 10}, monkeypatch,
                   capsys)
    assert value(at_10, "utci") == pytest.approx(row["utci"], abs=tol)
    at_1_1 = assess({**base, "air_speed": row["v"] / factor, "air_speed_height_m": 1.1},
                    monkeypatch, capsys)
    assert value(at_1_1, "utci") == pytest.approx(row["utci"], abs=tol + 0.01)
    default = assess({**base, "air_speed": row["v"] / factor}, monkeypatch, capsys)
    assert value(default, "utci") == pytest.approx(value(at_1_1, "utci"), abs=1e-9)


@pytest.mark.parametrize("row", table("utci_wind_height"))
def test_wind_height_conversion(row):
    """Logarithmic profile, z0 = 0.01 m."""
    got = outdoor.wind_at_10m(np.array([row["v"]]), row["height_m"])[0]
    assert got == pytest.approx(row["v10"], abs=PUBLISHED["utci_wind_height"]["tolerance"])


def test_a_low_sun_warms_no_more_than_the_clearest_beam_can(monkeypatch, capsys):
    """Sunrise (0.5° up) at 52.2 N on 14 July with a pyranometer reading 40 W/m²: Liljegren's
    split alone reads that as 90 % beam, a beam of about 1,000 W/m² that warmed a person in
    the open by about 30 K. The beam is capped at the clearest sky's (simplified Solis by
    pvlib, no aerosol: about 118 W/m² here), so the person's mean radiant rise over the same
    sky without sun stays within what ASHRAE 55-2020 Appendix C (SolarCal, as pythermalcomfort
    implements it) gives for that beam on a standing person facing the sun in the open
    (7.6 K), and UTCI stays below moderate heat stress (26 °C, Broede et al. 2012)."""
    from pythermalcomfort.models import solar_gain

    base = {"air_temperature": 19.8, "relative_humidity": 76, "air_speed": 2.5,
            "latitude": 52.2, "longitude": -1.5, "time": "2026-07-14T04:08:00Z",
            "environment": "outdoor", "solar_load": True}
    dark = assess({**base, "solar_irradiance": 0.0}, monkeypatch, capsys)
    lit = assess({**base, "solar_irradiance": 40.0}, monkeypatch, capsys)
    rise = value(lit, "mean_radiant_temperature") - value(dark, "mean_radiant_temperature")
    solarcal = solar_gain(sol_altitude=0.5, sharp=0, sol_radiation_dir=118.0,
                          sol_transmittance=1.0, f_svv=1.0, f_bes=1.0, asw=0.7,
                          posture="standing")
    assert 0.0 < rise <= float(solarcal.delta_mrt)
    assert value(lit, "utci") < 26.0
