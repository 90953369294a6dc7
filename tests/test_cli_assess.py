"""``thermowarden assess``: the spot-check contract, run as a user runs it."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from tests.conftest import COMMAND_LIMIT_S

REQUIRED = ["operative_temperature", "mean_radiant_temperature", "radiant_asymmetry",
            "dew_point", "wet_bulb", "humidity_ratio", "relative_humidity", "pmv_iso", "ppd_iso",
            "pmv_ashrae", "ppd_ashrae", "set", "cooling_effect", "draught_rate", "wbgt",
            "wbgt_reference_acclimatised", "wbgt_reference_unacclimatised",
            "phs_rectal_temperature", "phs_sweat_loss", "phs_limit_rectal",
            "phs_limit_water_loss_50", "phs_limit_water_loss_95", "heat_index", "humidex", "utci",
            "running_mean_outdoor_temperature", "adaptive_ashrae_comfort", "adaptive_en_comfort"]


def run(payload: object, *args: str) -> subprocess.CompletedProcess[str]:
    text = payload if isinstance(payload, str) else json.dumps(payload)
    return subprocess.run([sys.executable, "-m", "thermowarden.cli", "assess", *args],
                          input=text, capture_output=True, text=True, timeout=COMMAND_LIMIT_S)


def test_office_spot_check_json():
    r = run({"air_temperature": 24.0, "relative_humidity": 50, "globe_temperature": 25.0,
             "air_speed": 0.15, "met": 1.2, "clo": 0.6,
             "plane_radiant_temperature_window": 30.0, "plane_radiant_temperature_room": 24.0,
             "outdoor_daily_means": [22.0, 20.5, 19.0, 18.5, 17.0, 16.5, 15.0]})
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    for key in REQUIRED:
        assert key in out, key
        assert set(out[key]) >= {"value", "unit", "method"}
        if out[key]["value"] is None:
            assert out[key]["reason"]
    assert out["running_mean_outdoor_temperature"]["value"] == pytest.approx(19.42, abs=0.01)
    assert out["radiant_asymmetry"]["value"] == pytest.approx(6.0)
    assert out["pmv_iso"]["method"].startswith("ISO 7730:2005")
    assert "NaN" not in r.stdout


def test_the_readme_example():
    """The README's spot check, run as written there; WBGT by ISO 7243:2017 eq. (1)
    (0.7 tnw + 0.3 tg) [std, calc] and the moderate-work reference values of
    tests/data/published_values.yaml (work_class_references)."""
    from tests.conftest import REPO, table

    readme = (REPO / "README.md").read_text(encoding="utf-8")
    example = readme.split("| thermowarden assess --format table")[0].rsplit("echo '", 1)[1]
    payload = json.loads(example.rsplit("'", 1)[0])
    r = run(payload)
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    wbgt = 0.7 * payload["natural_wet_bulb"] + 0.3 * payload["globe_temperature"]
    assert out["wbgt"]["value"] == pytest.approx(wbgt, abs=0.01)
    ref = next(row for row in table("work_class_references")
               if row["work_class"] == payload["work_class"])
    assert out["wbgt_reference_unacclimatised"]["value"] == pytest.approx(
        ref["unacclimatised"], abs=0.01)
    assert out["wbgt_margin_unacclimatised"]["value"] == pytest.approx(
        ref["unacclimatised"] - wbgt, abs=0.02)
    table_run = run(payload, "--format", "table")
    assert table_run.returncode == 0, table_run.stderr


def test_hot_work_with_units_and_table():
    r = run({"air_temperature": 95.0, "relative_humidity": 40, "globe_temperature": 40.0,
             "natural_wet_bulb": 25.0, "air_speed": 60, "work_class": "moderate", "clo": 0.6,
             "hot_work": True, "acclimatised": True,
             "units": {"air_temperature": "°F", "air_speed": "fpm"}}, "--format", "table")
    assert r.returncode == 0, r.stderr
    assert "WBGT reference, acclimatised workers" in r.stdout
    assert "Time to the water-loss limit, 95 % of people (PHS)" in r.stdout  # hot work
    assert "occupational hygienist" in r.stdout


@pytest.mark.parametrize("payload,key", [
    ({"air_temprature": 20}, "air_temprature"),
    ({"air_temperature": "warm"}, "air_temperature"),
    ({"relative_humidity": 140}, "relative_humidity"),
    ({"air_speed": 1, "units": {"air_speed": "knots"}}, "units.air_speed"),
    ({"work_class": "strenuous"}, "work_class"),
    ({"outdoor_daily_means": [20, 21]}, "outdoor_daily_means"),
    ([1, 2], "input"),
])
def test_bad_input_names_the_key(payload, key):
    r = run(payload)
    assert r.returncode != 0
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and key in lines[0], r.stderr


def test_not_json():
    r = run("{air_temperature: 20")
    assert r.returncode != 0 and "not valid JSON" in r.stderr


@pytest.mark.parametrize("text", ["", "   \n", "{air_temperature: 20", "[1, 2"])
def test_empty_and_invalid_json_exit_2(text):
    """The README's contract: bad input exits 2 with one line."""
    r = run(text)
    assert r.returncode == 2, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr


@pytest.mark.parametrize("pressure,units", [(101325, None), (1013.25, None), (101.325, None),
                                            (1013.25, "hPa"), (101.325, "kPa")])
def test_pressure_in_pa_hpa_or_kpa(pressure, units):
    payload = {"air_temperature": 30, "relative_humidity": 70, "barometric_pressure": pressure}
    if units:
        payload["units"] = {"barometric_pressure": units}
    r = run(payload)
    assert r.returncode == 0, r.stderr
    # psychrolib 2.5 (ASHRAE 2017 equations) [lib]: 30 °C, 70 % -> wet bulb 25.50 °C
    assert json.loads(r.stdout)["wet_bulb"]["value"] == pytest.approx(25.50, abs=0.05)


def test_impossible_pressure_says_what_is_expected():
    r = run({"air_temperature": 30, "barometric_pressure": 5})
    assert r.returncode == 2
    assert "barometric_pressure" in r.stderr and "hPa" in r.stderr and "kPa" in r.stderr


def test_psychrometer_pair_and_dry_air():
    """A wet bulb far below the dry bulb is called too low, not "above dry bulb"; RH 0 %
    still has a wet bulb."""
    low = json.loads(run({"air_temperature": 30, "psychrometric_wet_bulb": 2}).stdout)
    assert "too low" in low["relative_humidity"]["reason"]
    dry = json.loads(run({"air_temperature": 30, "relative_humidity": 0}).stdout)
    assert dry["wet_bulb"]["value"] is not None
    assert dry["dew_point"]["value"] is None and dry["dew_point"]["reason"]


def test_no_metabolic_rate_gives_no_heat_stress_reference():
    r = run({"air_temperature": 30, "relative_humidity": 50, "globe_temperature": 32,
             "natural_wet_bulb": 23, "hot_work": True, "clo": 0.6})
    out = json.loads(r.stdout)
    assert out["wbgt"]["value"] is not None
    for key in ("wbgt_reference_acclimatised", "wbgt_margin_acclimatised", "metabolic_rate"):
        assert out[key]["value"] is None and "metabolic rate" in out[key]["reason"]


def test_table_for_a_person():
    """At most 100 columns, a verdict first, one number of decimals per unit, humidex with
    its reading scale."""
    r = run({"air_temperature": 31.2, "relative_humidity": 44, "globe_temperature": 34.6,
             "natural_wet_bulb": 22.8, "air_speed": 0.4, "work_class": "moderate",
             "clo": 0.6}, "--format", "table")
    assert r.returncode == 0, r.stderr
    lines = r.stdout.splitlines()
    assert max(len(ln) for ln in lines) <= 100
    # WBGT 0.7 x 22.8 + 0.3 x 34.6 = 26.34 (ISO 7243:2017 eq. 1); moderate work references
    # 25.03 / 28.26 (tests/data/published_values.yaml, work_class_references)
    # not acclimatised unless said: the workers' own reference only (NIOSH RAL)
    assert lines[0] == ("HEAT STRESS (not acclimatised): WBGT 26.3 °C vs reference 25.0 °C "
                        "(margin -1.3 K: 1.3 K above)")

    def row(words):
        (line,) = [ln for ln in lines if ln.startswith(words + "  ")]
        return line[len(words):].split()[:2]
    assert row("Metabolic rate") == ["297", "W"]
    assert row("Margin below the not-acclimatised reference") == ["-1.3", "K"]
    dew = row("Dew point")
    assert dew[1] == "°C" and len(dew[0].split(".")[1]) == 1
    outdoor = run({"air_temperature": 31.2, "relative_humidity": 44, "environment": "outdoor"},
                  "--format", "table")
    humidex = next(ln for ln in outdoor.stdout.splitlines() if ln.startswith("Humidex "))
    assert humidex.split()[2:4] == ["(°C", "equivalent)"]  # dimensionless, read as °C


def test_a_margin_inside_instrument_accuracy_is_called_reached():
    r = run({"air_temperature": 30, "relative_humidity": 50, "globe_temperature": 33.5,
             "natural_wet_bulb": 21.4, "air_speed": 0.3, "work_class": "moderate"},
            "--format", "table")
    assert r.returncode == 0, r.stderr
    assert "treat as reached" in " ".join(r.stdout.split("\n\n")[0].split())


@pytest.mark.long
def test_assumptions_fill_in_and_are_marked():
    """A thermostat's reading with declared assumptions, as a site's ``assume`` does; the
    PMV is the same as with the values given as readings (ISO 7730 Table D.1 gives +0.77 at
    27 °C, 60 %, 0.1 m/s, 1.2 met, 0.5 clo: the method checked elsewhere)."""
    base = {"air_temperature": 28.6, "met": 1.2, "clo": 0.5}
    r = run({**base, "assume": {"relative_humidity": 50, "air_speed": 0.1,
                                "mean_radiant_temperature": "air"}})
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    same = json.loads(run({**base, "relative_humidity": 50, "air_speed": 0.1,
                           "mean_radiant_temperature": 28.6}).stdout)
    assert out["pmv_iso"]["value"] == same["pmv_iso"]["value"]
    assert out["relative_humidity"]["method"] == "assumed: 50 % (not measured)"
    assert out["mean_radiant_temperature"]["method"] == \
        "assumed: equal to the air temperature (not measured)"
    assert "air speed still air, 0.1 m/s" in out["assumed"]["reason"]
    # a measured value wins over the assumption, and is not marked
    r = run({**base, "relative_humidity": 40, "air_speed": 0.1,
             "mean_radiant_temperature": 28.6, "assume": {"relative_humidity": 50}})
    out = json.loads(r.stdout)
    assert out["relative_humidity"]["value"] == 40 and "assumed" not in out
    table = run({**base, "assume": {"relative_humidity": 50, "air_speed": 0.1,
                                    "mean_radiant_temperature": "air+2"}}, "--format", "table")
    assert "Not measured, assumed: relative humidity 50 %" in table.stdout
    bad = run({**base, "assume": {"globe_temperature": 30}})
    assert bad.returncode == 2 and "assume.globe_temperature" in bad.stderr


@pytest.mark.parametrize(("acclimatised", "verdict"), [
    (False, "HEAT STRESS (not acclimatised, above even the acclimatised limit): WBGT 29.0 °C "
            "vs reference 25.0 °C (margin -3.9 K: 3.9 K above; acclimatised limit 28.3 °C, "
            "margin -0.7 K: 0.7 K above)"),
    (True, "HEAT STRESS (acclimatised, above their limit): WBGT 29.0 °C vs reference 28.3 °C "
           "(margin -0.7 K: 0.7 K above; action value 25.0 °C, margin -3.9 K: 3.9 K above)"),
])
def test_the_verdict_follows_the_workers_acclimatisation(acclimatised, verdict):
    """WBGT 0.7 x 25 + 0.3 x 38.2 = 28.96 °C (ISO 7243:2017 eq. 1); moderate work: RAL
    25.03, REL 28.26 °C (NIOSH 2016; tests/data/published_values.yaml,
    work_class_references): +3.93 and +0.70 K."""
    r = run({"air_temperature": 33, "relative_humidity": 40, "globe_temperature": 38.2,
             "natural_wet_bulb": 25.0, "air_speed": 0.4, "work_class": "moderate",
             "acclimatised": acclimatised, "clo": 0.6}, "--format", "table")
    assert r.returncode == 0, r.stderr
    first = r.stdout.split("\nRead as ")[0]
    assert " ".join(first.split()) == verdict  # (wrapped at 100)
    out = json.loads(run({"air_temperature": 33, "relative_humidity": 40,
                          "globe_temperature": 38.2, "natural_wet_bulb": 25.0,
                          "air_speed": 0.4, "work_class": "moderate",
                          "acclimatised": acclimatised}).stdout)
    own = 28.26 if acclimatised else 25.03
    assert out["wbgt_reference"]["value"] == pytest.approx(own, abs=0.01)
    assert out["wbgt_margin"]["value"] == pytest.approx(own - out["wbgt_effective"]["value"],
                                                        abs=0.01)


@pytest.mark.long
@pytest.mark.parametrize("speed, raised", [(0.3, 0.0), (0.6, 1.2), (0.9, 1.8), (1.2, 2.2)])
def test_adaptive_upper_limits_rise_with_air_speed(speed, raised):
    """ASHRAE 55-2020 5.4.2.4, Table 5.4.2.4: +1.2 K at 0.6 m/s, +1.8 K at 0.9, +2.2 K at
    1.2 above 25 °C operative; the values as pythermalcomfort 2.x's adaptive_ashrae gives
    them (a general reference library, run once: tdb 28, tr 28.5, running mean 20.4 ->
    upper 80 % limits 27.6, 28.8, 29.4, 29.8 °C)."""
    means = [20.4] * 7
    r = run({"air_temperature": 28.0, "mean_radiant_temperature": 28.5, "air_speed": speed,
             "relative_humidity": 50, "met": 1.1, "clo": 0.5, "naturally_ventilated": True,
             "outdoor_daily_means": means})
    out = json.loads(r.stdout)
    assert out["adaptive_ashrae_80_upper"]["value"] == pytest.approx(27.62 + raised, abs=0.01)
    assert out["adaptive_ashrae_90_upper"]["value"] == pytest.approx(26.62 + raised, abs=0.01)
    assert out["adaptive_ashrae_80_lower"]["value"] == pytest.approx(20.62, abs=0.01)
    # EN 16798-1 category II upper limit, raised the same way (pythermalcomfort's
    # adaptive_en, same inputs: 28.5, 29.7, 30.3, 30.7 °C)
    assert out["adaptive_en_II_upper"]["value"] == pytest.approx(28.53 + raised, abs=0.01)
    # only above 25 °C operative
    cool = json.loads(run({"air_temperature": 24.0, "mean_radiant_temperature": 24.0,
                           "air_speed": speed, "relative_humidity": 50, "met": 1.1,
                           "clo": 0.5, "naturally_ventilated": True,
                           "outdoor_daily_means": means}).stdout)
    assert cool["adaptive_ashrae_80_upper"]["value"] == pytest.approx(27.62, abs=0.01)


def test_a_reader_that_goes_away_gets_no_traceback():
    """``assess ... | head -1``: the command stops quietly when its reader is gone (here the
    reading end is closed before anything is written, so every write meets a broken pipe)."""
    import os
    import subprocess
    import sys

    r, w = os.pipe()
    os.close(r)
    try:
        proc = subprocess.run(
            [sys.executable, "-m", "thermowarden.cli", "assess", "--format", "table"],
            input=json.dumps({"air_temperature": 24, "relative_humidity": 50,
                              "mean_radiant_temperature": 24, "air_speed": 0.1, "met": 1.1,
                              "clo": 0.6}),
            stdout=w, stderr=subprocess.PIPE, text=True, timeout=300)
    finally:
        os.close(w)
    assert proc.returncode == 141
    assert "Traceback" not in proc.stderr and "BrokenPipeError" not in proc.stderr
