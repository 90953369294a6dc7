"""The index core against published values. Each check names its source (see
tests/data/published_values.yaml, where every table carries its citation)."""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import PUBLISHED, table
from thermowarden.core import (
    adaptive,
    comfort,
    heat_stress,
    local_discomfort,
    outdoor,
    radiation,
    units,
)
from thermowarden.core import psychrometrics as psy


def arr(*v: float) -> np.ndarray:
    return np.array(v, dtype=np.float64)


@pytest.mark.parametrize("row", table("pmv_iso_7730_table_d1"))
def test_pmv_iso_7730_table_d1(row):
    """ISO 7730:2005 Annex D Table D.1."""
    tol = PUBLISHED["pmv_iso_7730_table_d1"]["tolerance"]
    pmv = comfort.pmv_fanger(arr(row["ta"]), arr(row["tr"]), arr(row["vr"]), arr(row["rh"]),
                             arr(row["met"]), arr(row["clo"]))
    assert pmv[0] == pytest.approx(row["pmv"], abs=tol["pmv"])
    assert comfort.ppd_from_pmv(pmv)[0] == pytest.approx(row["ppd"], abs=tol["ppd"])


@pytest.mark.parametrize("row", table("ppd_from_pmv"))
def test_ppd_from_pmv(row):
    """ISO 7730:2005 eq. (5)."""
    got = comfort.ppd_from_pmv(arr(row["pmv"]))[0]
    assert got == pytest.approx(row["ppd"], abs=PUBLISHED["ppd_from_pmv"]["tolerance"])


@pytest.mark.parametrize("row", table("pmv_ashrae_55"))
def test_pmv_ashrae_55(row):
    """pythermalcomfort validation tables labelled ASHRAE 55-2017."""
    tol = PUBLISHED["pmv_ashrae_55"]["tolerance"]
    t = arr(row["ta"])
    pmv = comfort.pmv_ashrae(t, t, arr(0.1), arr(row["rh"]), arr(1.1), arr(row["clo"]))
    assert pmv[0] == pytest.approx(row["pmv"], abs=tol["pmv"])
    assert comfort.ppd_from_pmv(pmv)[0] == pytest.approx(row["ppd"], abs=tol["ppd"])


@pytest.mark.parametrize("row", table("set_ashrae_55"))
def test_set_ashrae_55(row):
    """ASHRAE 55-2017 SET table via pythermalcomfort."""
    got = comfort.set_temperature(arr(row["ta"]), arr(row["tr"]), arr(row["v"]), arr(row["rh"]),
                                  arr(row["met"]), arr(row["clo"]))[0]
    assert got == pytest.approx(row["set"], abs=PUBLISHED["set_ashrae_55"]["tolerance"])


def test_cooling_effect_matches_pythermalcomfort():
    """Cross-check against pythermalcomfort's own cooling_effect (brentq per space) [lib]:
    its docstring example gives CE 1.68 K at 25/25 °C, 0.3 m/s, 50 %, 1.2 met, 0.5 clo."""
    ce = comfort.cooling_effect(arr(25.0), arr(25.0), arr(0.3), arr(50.0), arr(1.2), arr(0.5))
    assert ce[0] == pytest.approx(1.68, abs=0.02)


def test_air_speed_for_pmv_reaches_target():
    """The speed found gives the target PMV when fed back through the ASHRAE 55 method."""
    ta = arr(28.0, 29.0)
    rh = arr(50.0, 50.0)
    met = arr(1.1, 1.1)
    clo = arr(0.5, 0.5)
    v = comfort.air_speed_for_pmv(ta, ta, arr(0.1, 0.1), rh, met, clo, arr(0.5, 0.5))
    assert np.all(np.isfinite(v)) and np.all(v > 0.1)
    pmv = comfort.pmv_ashrae(ta, ta, v, rh, met, clo)
    assert pmv == pytest.approx([0.5, 0.5], abs=0.02)


@pytest.mark.parametrize("row", table("draught_rate"))
def test_draught_rate(row):
    """ISO 7730:2005 eq. (6)."""
    got = local_discomfort.draught_rate(arr(row["ta"]), arr(row["v"]), arr(row["tu"]))[0]
    assert got == pytest.approx(row["dr"], abs=PUBLISHED["draught_rate"]["tolerance"])


def test_draught_rate_floor_and_cap():
    """ISO 7730:2005 6.2: v < 0.05 m/s is taken as 0.05 (DR 0); DR above 100 % is 100 %."""
    got = local_discomfort.draught_rate(arr(22.0, 10.0), arr(0.01, 5.0), arr(40.0, 60.0))
    assert got[0] == 0.0 and got[1] == 100.0


@pytest.mark.parametrize("row", table("vertical_difference_pd"))
def test_vertical_difference_pd(row):
    """ISO 7730:2005 eq. (7)."""
    got = local_discomfort.vertical_difference_pd(arr(row["dt"]))[0]
    assert got == pytest.approx(row["pd"], abs=PUBLISHED["vertical_difference_pd"]["tolerance"])


@pytest.mark.parametrize("row", table("floor_temperature_pd"))
def test_floor_temperature_pd(row):
    """ISO 7730:2005 eq. (8)."""
    got = local_discomfort.floor_temperature_pd(arr(row["tf"]))[0]
    assert got == pytest.approx(row["pd"], abs=PUBLISHED["floor_temperature_pd"]["tolerance"])


@pytest.mark.parametrize("row", table("radiant_asymmetry_pd"))
def test_radiant_asymmetry_pd(row):
    """ISO 7730:2005 eqs. (9)-(12)."""
    f = getattr(local_discomfort, f"{row['kind']}_pd")
    got = f(arr(row["dt"]))[0]
    assert got == pytest.approx(row["pd"], abs=PUBLISHED["radiant_asymmetry_pd"]["tolerance"])


@pytest.mark.parametrize("row", table("plane_radiant_from_flux"))
def test_plane_radiant_from_flux(row):
    """Stefan-Boltzmann."""
    got = radiation.plane_radiant_temperature_from_flux(arr(row["flux"]))[0]
    assert got == pytest.approx(row["tpr"], abs=PUBLISHED["plane_radiant_from_flux"]["tolerance"])


@pytest.mark.parametrize("row", table("mrt_from_globe"))
def test_mrt_from_globe(row):
    """ISO 7726:1998 Annex B, general form."""
    got = radiation.mean_radiant_from_globe(arr(row["tg"]), arr(row["ta"]), arr(row["va"]))[0]
    assert got == pytest.approx(row["mrt"], abs=PUBLISHED["mrt_from_globe"]["tolerance"])


def test_mrt_from_planes_uniform_and_weighted():
    """ISO 7726:1998 Annex B: equal planes give that temperature; a warm window side raises
    a standing person's mean radiant temperature by 2 x 0.35 / 1.32 of the excess [calc]."""
    base = {s: arr(22.0) for s in radiation.SIDES}
    assert radiation.mean_radiant_from_planes(base)[0] == pytest.approx(22.0)
    warm = dict(base, front=arr(32.0))
    got = radiation.mean_radiant_from_planes(warm, "standing")[0]
    assert got == pytest.approx(22.0 + 10.0 * 0.35 / 1.32, abs=1e-9)


@pytest.mark.parametrize("row", table("operative_temperature"))
def test_operative_temperature(row):
    """ASHRAE 55 weighting of air and radiant temperature."""
    got = radiation.operative_temperature(arr(row["ta"]), arr(row["tr"]), arr(row["v"]))[0]
    assert got == pytest.approx(row["to"], abs=PUBLISHED["operative_temperature"]["tolerance"])


@pytest.mark.parametrize("row", table("wbgt"))
def test_wbgt(row):
    """ISO 7243:2017 eq. (1)."""
    got = heat_stress.wbgt(arr(row["tnw"]), arr(row["tg"]))[0]
    assert got == pytest.approx(row["wbgt"], abs=PUBLISHED["wbgt"]["tolerance"])


def test_wbgt_with_solar_load():
    """ISO 7243:2017 eq. (2): 0.7 tnw + 0.2 tg + 0.1 ta [calc]: 25, 50, 35 -> 31.0."""
    got = heat_stress.wbgt(arr(25.0), arr(50.0), arr(35.0), np.array([True]))[0]
    assert got == pytest.approx(31.0, abs=1e-9)


@pytest.mark.parametrize("row", table("wbgt_references"))
def test_wbgt_references(row):
    """ISO 7243:2017 Annex A = NIOSH 2016 REL/RAL."""
    tol = PUBLISHED["wbgt_references"]["tolerance"]
    m = arr(row["m_w"])
    assert heat_stress.reference_acclimatised(m)[0] == pytest.approx(row["acclimatised"], abs=tol)
    assert heat_stress.reference_unacclimatised(m)[0] == pytest.approx(row["unacclimatised"],
                                                                       abs=tol)


@pytest.mark.parametrize("edition", ["2004"])
@pytest.mark.parametrize("row", table("phs_iso_7933_2004_annex_f"))
def test_phs_annex_f(row, edition):
    """ISO 7933:2004 Annex F worked examples."""
    tol = PUBLISHED["phs_iso_7933_2004_annex_f"]["tolerance"]
    res = heat_stress.predicted_heat_strain(
        arr(row["ta"]), arr(row["tr"]), arr(row["va"]), arr(row["rh"]), arr(row["met_w_m2"]),
        arr(row["clo"]), [row["posture"]], arr(1.0 if row["acclimatised"] else 0.0),
        edition=edition)
    assert res["t_re"][0] == pytest.approx(row["t_re"], abs=tol["t_re"])
    assert res["sweat_loss_g"][0] == pytest.approx(row["sweat_g"], abs=tol["sweat"])
    assert res["d_lim_t_re"][0] == pytest.approx(row["d_lim_t_re"], abs=tol["duration"])
    assert res["d_lim_loss_95"][0] == pytest.approx(row["d_lim_loss_95"], abs=tol["duration"])


@pytest.mark.parametrize("row", table("heat_index"))
def test_heat_index(row):
    """NWS heat index algorithm, including both humidity adjustments."""
    got = outdoor.heat_index(arr(row["ta"]), arr(row["rh"]))[0]
    assert got == pytest.approx(row["hi"], abs=PUBLISHED["heat_index"]["tolerance"])


@pytest.mark.parametrize("row", table("humidex"))
def test_humidex(row):
    """Environment Canada humidex."""
    got = outdoor.humidex(arr(row["ta"]), arr(row["rh"]))[0]
    assert got == pytest.approx(row["humidex"], abs=PUBLISHED["humidex"]["tolerance"])


@pytest.mark.parametrize("row", table("utci"))
def test_utci(row):
    """UTCI polynomial (Broede et al. 2012)."""
    got = outdoor.utci(arr(row["ta"]), arr(row["tr"]), arr(row["v"]), arr(row["rh"]))[0]
    assert got == pytest.approx(row["utci"], abs=PUBLISHED["utci"]["tolerance"])


@pytest.mark.parametrize("row", table("saturation_pressure"))
def test_saturation_pressure(row):
    """ASHRAE Handbook Fundamentals 2017 ch. 1."""
    got = psy.saturation_pressure(arr(row["t"]))[0]
    assert got == pytest.approx(row["pws"], rel=PUBLISHED["saturation_pressure"]["tolerance"])


@pytest.mark.parametrize("row", table("psychrometer_example_1"))
def test_psychrometer_example_1(row):
    """ASHRAE Handbook Fundamentals 2017 ch. 1 Example 1."""
    rh = psy.relative_humidity_from_wet_bulb(arr(row["tdb"]), arr(row["twb"]))
    assert rh[0] == pytest.approx(row["rh"], abs=row["rh_tol"])
    w = psy.humidity_ratio(arr(row["tdb"]), rh)
    assert w[0] == pytest.approx(row["w"], abs=row["w_tol"])
    assert psy.dew_point(arr(row["tdb"]), rh)[0] == pytest.approx(row["td"], abs=row["td_tol"])


@pytest.mark.parametrize("row", table("dew_point"))
def test_dew_point(row):
    """psychrolib (ASHRAE 2017 equations)."""
    got = psy.dew_point(arr(row["t"]), arr(row["rh"]))[0]
    assert got == pytest.approx(row["td"], abs=PUBLISHED["dew_point"]["tolerance"])


@pytest.mark.parametrize("row", table("wet_bulb"))
def test_wet_bulb(row):
    """psychrolib (ASHRAE 2017 equations)."""
    got = psy.wet_bulb(arr(row["t"]), arr(row["rh"]))[0]
    assert got == pytest.approx(row["twb"], abs=PUBLISHED["wet_bulb"]["tolerance"])


@pytest.mark.long
def test_psychrometrics_against_psychrolib_over_a_grid():
    """Reference library psychrolib 2.5 (ASHRAE Handbook 2017 equations) [lib] over a grid of
    conditions and at altitude, including below freezing.

    Below 0 °C psychrolib takes RH over ice; thermowarden takes it over water (WMO
    convention, how hygrometers report it). The same air is compared: our RH over water is
    given to psychrolib as RH over ice = RH x pws,water / pws,ice, and our dew point (over
    water) is checked against the vapour pressure it stands for."""
    import psychrolib

    psychrolib.SetUnitSystem(psychrolib.SI)
    for t in (-10.0, 0.5, 12.0, 25.0, 38.0, 49.0):
        for rh in (10.0, 35.0, 60.0, 95.0):
            for alt in (0.0, 1600.0):
                p = psychrolib.GetStandardAtmPressure(alt)
                assert float(psy.pressure_from_altitude(alt)) == pytest.approx(p, rel=1e-6)
                rh_lib = rh / 100.0
                if t < 0:
                    rh_lib *= float(psy.saturation_pressure_water(t)) / psychrolib.GetSatVapPres(t)
                    if rh_lib > 1.0:
                        continue  # supersaturated over ice: psychrolib refuses it
                tw = psychrolib.GetTWetBulbFromRelHum(t, rh_lib, p)
                w = psychrolib.GetHumRatioFromRelHum(t, rh_lib, p)
                td_lib = psychrolib.GetTDewPointFromRelHum(t, rh_lib)
                if td_lib >= 0:
                    assert psy.dew_point(arr(t), arr(rh))[0] == pytest.approx(td_lib, abs=0.01)
                else:  # psychrolib gives the frost point; ours is the dew point over water
                    pw = psychrolib.GetVapPresFromRelHum(t, rh_lib)
                    td = psy.dew_point(arr(t), arr(rh))[0]
                    assert td < td_lib
                    assert float(psy.saturation_pressure_water(td)) == pytest.approx(pw, rel=1e-6)
                assert psy.wet_bulb(arr(t), arr(rh), p)[0] == pytest.approx(tw, abs=0.01)
                assert psy.humidity_ratio(arr(t), arr(rh), p)[0] == pytest.approx(w, rel=1e-4)
                back = psy.relative_humidity_from_wet_bulb(arr(t), arr(tw), p)[0]
                assert back == pytest.approx(rh, abs=0.05)


@pytest.mark.parametrize("row", table("adaptive_ashrae"))
def test_adaptive_ashrae(row):
    """ASHRAE 55-2020 5.4."""
    tol = PUBLISHED["adaptive_ashrae"]["tolerance"]
    t = adaptive.ashrae_comfort_temperature(arr(row["tpma"]))[0]
    assert t == pytest.approx(row["tcmf"], abs=tol)
    assert t - adaptive.ASHRAE_BANDS_K["80"] == pytest.approx(row["low80"], abs=tol)
    assert t + adaptive.ASHRAE_BANDS_K["80"] == pytest.approx(row["up80"], abs=tol)


@pytest.mark.parametrize("row", table("adaptive_en"))
def test_adaptive_en(row):
    """EN 16798-1:2019 Annex B."""
    tol = PUBLISHED["adaptive_en"]["tolerance"]
    t = adaptive.en_comfort_temperature(arr(row["trm"]))[0]
    up, down = adaptive.EN_BANDS_K["II"]
    assert t == pytest.approx(row["tc"], abs=tol)
    assert t - down == pytest.approx(row["low2"], abs=tol)
    assert t + up == pytest.approx(row["up2"], abs=tol)


def test_running_mean():
    """EN 16798-1:2019 eq. (B.2)."""
    g = PUBLISHED["running_mean"]
    got = adaptive.running_mean_outdoor([g["daily_means_newest_first"]])[0]
    assert got == pytest.approx(g["expected"], abs=g["tolerance"])


@pytest.mark.parametrize("row", table("units"))
def test_units(row):
    """Unit definitions."""
    assert units.convert(row["value"], row["kind"], row["unit"]) == pytest.approx(row["si"],
                                                                                   abs=1e-9)


@pytest.mark.parametrize("row", table("work_class_references"))
def test_work_class_references(row):
    """A work class through ISO 8996 watts to the ISO 7243 reference values."""
    m = heat_stress.metabolic_rate_w(arr(heat_stress.WORK_CLASSES_W_M2[row["work_class"]]))
    tol = PUBLISHED["work_class_references"]["tolerance"]
    assert m[0] == pytest.approx(row["metabolic_w"], abs=tol)
    assert heat_stress.reference_acclimatised(m)[0] == pytest.approx(row["acclimatised"],
                                                                     abs=tol)
    assert heat_stress.reference_unacclimatised(m)[0] == pytest.approx(row["unacclimatised"],
                                                                       abs=tol)


def test_compiled_set_equals_library_set():
    """Our compiled SET ufunc equals pythermalcomfort's public set_tmp [lib] over a grid."""
    from pythermalcomfort.models import set_tmp

    rng = np.random.default_rng(3)
    n = 200
    ta, tr = rng.uniform(12, 38, n), rng.uniform(12, 38, n)
    v, rh = rng.uniform(0.05, 1.5, n), rng.uniform(10, 90, n)
    met, clo = rng.uniform(1.0, 2.0, n), rng.uniform(0.3, 1.4, n)
    ours = comfort.set_temperature(ta, tr, v, rh, met, clo)
    ref = set_tmp(ta, tr, v, rh, met, clo, limit_inputs=False, round_output=False).set
    np.testing.assert_allclose(ours, ref, atol=1e-9)
    ours_ce = comfort.set_temperature(ta, tr, v, rh, met, clo, for_cooling_effect=True)
    ref_ce = set_tmp(ta, tr, v, rh, met, clo, limit_inputs=False, round_output=False,
                     calculate_ce=True).set
    np.testing.assert_allclose(ours_ce, ref_ce, atol=1e-9)
