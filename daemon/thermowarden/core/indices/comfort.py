"""Comfort: PMV/PPD by ISO 7730:2005 and by ASHRAE 55-2020, the cooling effect of air
movement, SET (Gagge two-node model) and the air speed needed for comfort."""

from __future__ import annotations

from typing import Final

import numpy as np

from thermowarden.core import comfort, local_discomfort
from thermowarden.core import psychrometrics as psy
from thermowarden.core.columns import Applicability, FloatArray
from thermowarden.core.indices.inputs import (
    UPPER_TOLERANCE,
    Derived,
    IndexTable,
    SpaceInputs,
    between,
    people,
)
from thermowarden.core.local_discomfort import ISO_CATEGORY_LABELS

COMFORT_MET_ASSUMED: Final = 1.2
"""met assumed for the comfort indices where no metabolic rate is given (sedentary office
work, ISO 7730:2005 Table B.1 / ASHRAE 55-2020 Table 5.2.1.2). Never used for heat stress."""


def comfort_met(s: SpaceInputs) -> FloatArray:
    """met for the comfort indices: given, else :data:`COMFORT_MET_ASSUMED`."""
    result: FloatArray = np.where(np.isfinite(s.met), s.met, COMFORT_MET_ASSUMED)
    return result


def compute(s: SpaceInputs, d: Derived, out: IndexTable) -> None:
    """PMV and PPD by ISO 7730 and by ASHRAE 55, the cooling effect, SET and the air speed
    that would bring PMV down to the target."""
    n = s.n
    rh, mrt = d.rh, d.mrt
    clo, _, _ = people(s)
    met = comfort_met(s)
    assumed = "; 1.2 met assumed where no metabolic rate is given"
    given_vr = np.isfinite(s.relative_air_speed)
    # ISO 7730: the relative air speed as given, else the measured air speed (no
    # addition for body movement: ISO 7730 has none); static clothing.
    vr_iso = np.where(given_vr, s.relative_air_speed, s.air_speed)
    # ASHRAE 55: its own rules for relative speed and dynamic clothing.
    vr_ash = np.where(given_vr, s.relative_air_speed, comfort.relative_air_speed(s.air_speed, met))
    clo_d = comfort.dynamic_clothing(clo, met)
    inputs_present = [("air_temperature", s.air_temperature), ("mean_radiant_temperature", mrt),
                      ("air_speed", np.where(given_vr, s.relative_air_speed, s.air_speed)),
                      ("relative_humidity", rh)]

    iso = Applicability(n)
    iso.require(s.indoor, "PMV applies to indoor spaces")
    iso.require_present(inputs_present)
    iso.require(np.isfinite(clo), "clothing not configured and no outdoor temperature to "
                "predict it")
    iso.require(between(s.air_temperature, 10.0, 30.0),
                "outside ISO 7730 range: air_temperature 10-30 °C")
    iso.require(between(mrt, 10.0, 40.0),
                "outside ISO 7730 range: mean_radiant_temperature 10-40 °C")
    iso.require(between(vr_iso, 0.0, 1.0), "outside ISO 7730 range: relative air speed 0-1 m/s")
    iso.require(psy.vapour_pressure(s.air_temperature, rh) <= 2700.0 + UPPER_TOLERANCE,
                "outside ISO 7730 range: water vapour pressure above 2700 Pa")
    iso.require(between(met, 0.8, 4.0), "outside ISO 7730 range: met 0.8-4")
    iso.require(between(clo, 0.0, 2.0), "outside ISO 7730 range: clo 0-2")
    ok = iso.ok
    pmv_i = comfort.pmv_fanger(np.where(ok, s.air_temperature, np.nan), mrt, vr_iso, rh, met,
                               clo)
    iso.require(between(pmv_i, -2.0, 2.0) | ~np.isfinite(pmv_i),
                "outside ISO 7730 range: PMV beyond ±2 (use a heat or cold stress index)")
    ppd_i = comfort.ppd_from_pmv(pmv_i)
    method_iso = ("ISO 7730:2005 (relative_air_speed where given, else the measured air "
                  "speed; static clothing" + assumed + ")")
    out["pmv_iso"] = iso.column(pmv_i, "1", method_iso)
    out["ppd_iso"] = iso.column(ppd_i, "%", "ISO 7730:2005 eq. (5)")
    out["comfort_category_iso"] = iso.column(local_discomfort.category(ppd_i, "ppd"), "category",
                                             "ISO 7730:2005 Table A.1", ISO_CATEGORY_LABELS)

    ash = Applicability(n)
    ash.require(s.indoor, "PMV applies to indoor spaces")
    ash.require_present(inputs_present)
    ash.require(np.isfinite(clo), "clothing not configured and no outdoor temperature to "
                "predict it")
    ash.require(between(s.air_temperature, 10.0, 40.0),
                "outside ASHRAE 55 range: air_temperature 10-40 °C")
    ash.require(between(mrt, 10.0, 40.0),
                "outside ASHRAE 55 range: mean_radiant_temperature 10-40 °C")
    ash.require(between(vr_ash, 0.0, 2.0), "outside ASHRAE 55 range: relative air speed 0-2 m/s")
    ash.require(between(met, 1.0, 2.0), "outside ASHRAE 55 scope: met 1.0-2.0")
    ash.require(between(clo_d, 0.0, 1.5), "outside ASHRAE 55 scope: clo 0-1.5")
    ok = ash.ok
    ta_a = np.where(ok, s.air_temperature, np.nan)
    ce = comfort.cooling_effect(ta_a, mrt, vr_ash, rh, met, clo_d)
    pmv_a = comfort.pmv_ashrae(ta_a, mrt, vr_ash, rh, met, clo_d, ce)
    ash.require(between(pmv_a, -3.0, 3.0) | ~np.isfinite(pmv_a),
                "outside ASHRAE 55 scope: PMV beyond ±3, the end of the seven-point "
                "sensation scale (use a heat or cold stress index)")
    method_a = ("ASHRAE 55-2020 5.3 (relative air speed: the air speed plus 0.3 m/s for each met "
                "above 1 met, unless relative_air_speed is given; "
                "dynamic clothing above 1.2 met; SET-based cooling effect above 0.1 m/s"
                + assumed + ")")
    out["pmv_ashrae"] = ash.column(pmv_a, "1", method_a)
    out["ppd_ashrae"] = ash.column(comfort.ppd_from_pmv(pmv_a), "%", method_a)
    out["cooling_effect"] = ash.column(ce, "K", "ASHRAE 55-2020 5.3.2 and Appendix D")

    # SET: its own scope (the two-node model's), wider than PMV's; measured air speed and
    # static clothing, as ASHRAE 55's SET check table is computed.
    set_app = Applicability(n)
    set_app.require(s.indoor, "SET is given for indoor spaces here (outdoors: UTCI)")
    set_app.require_present([("air_temperature", s.air_temperature),
                             ("mean_radiant_temperature", mrt), ("air_speed", s.air_speed),
                             ("relative_humidity", rh)])
    set_app.require(np.isfinite(clo), "clothing not configured and no outdoor temperature to "
                    "predict it")
    set_app.require(between(s.air_temperature, 10.0, 40.0),
                    "outside SET range: air_temperature 10-40 °C")
    set_app.require(between(mrt, 10.0, 40.0),
                    "outside SET range: mean_radiant_temperature 10-40 °C")
    set_app.require(between(s.air_speed, 0.0, 2.0), "outside SET range: air_speed 0-2 m/s")
    set_app.require(between(met, 1.0, 4.0), "outside SET range: met 1-4")
    set_app.require(between(clo, 0.0, 1.5), "outside SET range: clo 0-1.5")
    set_ok = set_app.ok
    set_v = comfort.set_temperature(np.where(set_ok, s.air_temperature, np.nan), mrt,
                                    np.maximum(s.air_speed, 0.0), rh, met, clo,
                                    pressure_pa=s.pressure_pa)
    out["set"] = set_app.column(set_v, "°C", "ASHRAE 55-2020 Appendix D (Gagge two-node "
                                "model; measured air speed, static clothing" + assumed + ")")

    need = Applicability(n)
    need.require(ok, "ASHRAE 55 PMV does not apply to this space")
    need.require(~(pmv_a <= s.target_pmv), "not warmer than the target PMV: no extra air speed "
                 "needed")
    v_needed_rel = comfort.air_speed_for_pmv(np.where(need.ok, ta_a, np.nan), mrt, vr_ash, rh,
                                             met, clo_d, s.target_pmv)
    need.require(np.isfinite(v_needed_rel) | ~need.ok, "no air speed up to 2 m/s brings PMV "
                 "down to the target")
    # back from relative to room air speed: remove the body-movement part again
    movement = np.where(given_vr, s.relative_air_speed - s.air_speed,
                        vr_ash - s.air_speed)
    movement = np.where(np.isfinite(movement), np.maximum(movement, 0.0), 0.0)
    v_needed = np.maximum(v_needed_rel - movement, 0.0)
    out["cooling_air_speed_needed"] = need.column(
        v_needed, "m/s",
        "ASHRAE 55-2020 5.3.2 (speed whose cooling effect brings PMV to the target)")
    ok_need = need.ok & set_ok
    set_after = comfort.set_temperature(np.where(ok_need, ta_a, np.nan), mrt, v_needed, rh,
                                        met, clo, pressure_pa=s.pressure_pa)
    set_need = Applicability(n)
    set_need.require(need.ok, "no cooling air speed (see cooling_air_speed_needed)")
    set_need.require(set_ok, "SET does not apply to this space (see set)")
    out["set_at_cooling_air_speed"] = set_need.column(
        set_after, "°C", "ASHRAE 55-2020 Appendix D, at cooling_air_speed_needed")
