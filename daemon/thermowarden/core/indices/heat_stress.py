"""Heat stress: the natural wet bulb (measured or estimated, Liljegren et al. 2008), WBGT
(ISO 7243:2017) spot, 60-minute and assessed, the reference values and margins (ISO 7243
Annex A, NIOSH REL/RAL), and ISO 7933 PHS."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Final

import numpy as np

from thermowarden.core import heat_stress
from thermowarden.core import psychrometrics as psy
from thermowarden.core.columns import Applicability, FloatArray, absent
from thermowarden.core.indices.inputs import (
    MET_W_M2,
    UPPER_TOLERANCE,
    Derived,
    IndexTable,
    SpaceInputs,
    between,
    people,
)


def compute(s: SpaceInputs, d: Derived, out: IndexTable) -> None:
    """Natural wet bulb (estimated where not measured), WBGT, its reference values and
    margins (ISO 7243:2017), and ISO 7933 PHS for hot work when ``d.with_phs``."""
    n = s.n
    rh, mrt, sun, mrt_from_sun = d.rh, d.mrt, d.sun, d.mrt_from_sun
    # natural wet bulb: measured, else the wetted-wick energy balance (Liljegren et al. 2008)
    # with the wick's radiation from the mean radiant temperature (a globe) or, outdoors in
    # the open without one, from the global irradiance and the sun's position (then the
    # wick's own view of the sun, not the sphere's). Outdoors in full sun a globe can read
    # more than 70 K above the air, beyond the globe method's range: there the irradiance
    # method takes over where the site has the sun's position, so that the 60-minute WBGT
    # does not lose hours of full sun.
    cos_zenith, ghi, direct = sun.cos_zenith, sun.global_w_m2, sun.direct
    mrt_for_wick = np.where(mrt_from_sun, np.nan, mrt)
    with_mrt = np.isfinite(mrt_for_wick)
    globe_beyond = with_mrt & ~between(mrt_for_wick - s.air_temperature, -10.0, 70.0)
    with_mrt = with_mrt & ~(globe_beyond & sun.usable)
    sun_path = ~with_mrt & ~s.indoor & s.solar_load
    est = np.where(with_mrt, heat_stress.natural_wet_bulb_liljegren(
        s.air_temperature, rh, s.air_speed, mrt_for_wick, s.pressure_pa), np.nan)
    if sun_path.any():
        sun_est = heat_stress.natural_wet_bulb_liljegren_sun(
            np.where(sun_path, s.air_temperature, np.nan), rh, s.air_speed, ghi, direct,
            cos_zenith, s.pressure_pa)
        est = np.where(sun_path, sun_est, est)
    est_app = Applicability(n)
    est_app.require(np.isnan(s.natural_wet_bulb), "measured: natural_wet_bulb sensor present")
    est_app.require_present([("air_temperature", s.air_temperature),
                             ("relative_humidity", rh), ("air_speed", s.air_speed)])
    est_app.require(with_mrt | ~s.indoor, "input missing or stale: mean_radiant_temperature "
                    "(from the globe; indoors the wick's radiation is not known without it)")
    est_app.require(with_mrt | s.solar_load, "input missing or stale: mean_radiant_temperature "
                    "(from the globe; outdoors without solar load, in shade, the wick's "
                    "radiation is not known without it)")
    est_app.require(with_mrt | np.isfinite(s.solar_irradiance), "input missing or stale: "
                    "globe_temperature or solar_irradiance (outdoors in the sun the wick's "
                    "radiation comes from the one or the other)")
    est_app.require(with_mrt | (np.isfinite(s.latitude) & np.isfinite(s.longitude)),
                    "site latitude and longitude not configured (the sun's position is needed "
                    "with solar_irradiance and no globe)")
    est_app.require(with_mrt | ~sun_path | np.isfinite(s.time_s), "time of the readings "
                    "unknown (the sun's position is needed with solar_irradiance and no globe)")
    est_app.require(between(s.air_temperature, 0.0, 50.0), "outside the natural wet-bulb "
                    "estimate's range: air_temperature 0-50 °C (a liquid wick)")
    est_app.require(between(s.air_speed, 0.0, 10.0), "outside the natural wet-bulb "
                    "estimate's range: air_speed 0-10 m/s")
    est_app.require(~with_mrt | between(mrt_for_wick - s.air_temperature, -10.0, 70.0),
                    "outside the "
                    "natural wet-bulb estimate's range: mean radiant minus air temperature "
                    "-10..70 K")
    est_col = est_app.column(est, "°C", "Liljegren et al. (2008) wetted-wick energy balance, "
                             "radiation exchanged with the mean radiant temperature (globe), or "
                             "outdoors without a globe (or with a globe beyond that method's "
                             "range) from the global irradiance split into direct and diffuse "
                             "at the sun's position (Liljegren's code)")
    out["natural_wet_bulb_estimated"] = est_col
    tnw = np.where(np.isfinite(s.natural_wet_bulb), s.natural_wet_bulb, est_col.values)

    globe = np.where(np.isfinite(s.globe_temperature), s.globe_temperature,
                     out["globe_temperature_estimated"].values)
    w_app = Applicability(n)
    w_app.require(np.isfinite(tnw), "input missing or stale: natural_wet_bulb (and no estimate "
                  "possible: see natural_wet_bulb_estimated)")
    w_app.require(np.isfinite(globe), "input missing or stale: globe_temperature (and no "
                  "estimate possible: see globe_temperature_estimated)")
    w_app.require(~s.solar_load | np.isfinite(s.air_temperature),
                  "input missing or stale: air_temperature (needed with solar load)")
    w = heat_stress.wbgt(tnw, globe, s.air_temperature, s.solar_load)
    out["wbgt"] = w_app.column(w, "°C", "ISO 7243:2017 eq. (1)/(2) (globe measured, or "
                               "outdoors estimated from the irradiance: see "
                               "globe_temperature_estimated)")
    m_w = heat_stress.metabolic_rate_w(s.met * MET_W_M2)
    m_app = Applicability(n)
    m_app.require(np.isfinite(m_w), "no metabolic rate: give met or work_class (a heat-stress "
                  "reference value rests on the work done; none is assumed)")
    m_app.require(between(m_w, 100.0, 800.0),
                  "outside ISO 7243 Annex A range: metabolic rate 100-800 W")
    out["metabolic_rate"] = m_app.column(m_w, "W", "ISO 8996:2021 (standard person, 1.8 m²)")
    out["wbgt_reference_acclimatised"] = m_app.column(heat_stress.reference_acclimatised(m_w),
                                                      "°C", heat_stress.REFERENCE_METHOD)
    out["wbgt_reference_unacclimatised"] = m_app.column(
        heat_stress.reference_unacclimatised(m_w), "°C", heat_stress.REFERENCE_METHOD)
    # the reference of the space's own workers: acclimatised (REL) or not (RAL), as
    # configured (not acclimatised unless said)
    out["wbgt_reference"] = m_app.column(
        np.where(s.acclimatised, out["wbgt_reference_acclimatised"].values,
                 out["wbgt_reference_unacclimatised"].values), "°C",
        heat_stress.REFERENCE_METHOD + ", for the space's workers as configured: "
        "acclimatised (REL) or not (RAL)")
    _wbgt_assessment(s.wbgt_time_weighted, w, s.clothing_adjustment_k, out)
    compute_phs(s, d, out)


PHS_COLUMNS: Final[Mapping[str, tuple[str, str]]] = {"t_re": ("phs_rectal_temperature", "°C"),
               "sweat_loss_g": ("phs_sweat_loss", "g"),
               "d_lim_t_re": ("phs_limit_rectal", "min"),
               "d_lim_loss_50": ("phs_limit_water_loss_50", "min"),
               "d_lim_loss_95": ("phs_limit_water_loss_95", "min")}
"""Result of the PHS model -> (index name, unit) of its column."""


def compute_phs(s: SpaceInputs, d: Derived, out: IndexTable) -> None:
    """The ISO 7933 PHS columns (rectal temperature °C, sweat loss g, the duration limits
    min) of hot-work spaces, each in the edition it asks for; absent with "PHS not
    requested" when not ``d.with_phs``. Reads only the inputs, the relative humidity and
    the mean radiant temperature of ``d`` (the engine refreshes PHS on its own schedule
    without the other families: :func:`thermowarden.core.indices.compute_phs`)."""
    n = s.n
    rh, mrt, with_phs = d.rh, d.mrt, d.with_phs
    # ISO 7933 PHS, hot work only; each space in the edition it asks for
    editions = np.array(s.phs_edition if isinstance(s.phs_edition, tuple)
                        else (s.phs_edition,) * n, dtype=object)
    used = sorted({str(e) for e in editions}, reverse=True)
    method_phs = (f"ISO 7933:{used[0]}" if len(used) == 1
                  else "ISO 7933:2023 or 2004 (the phs_edition of each space)")

    if not with_phs:
        for name, unit in PHS_COLUMNS.values():
            out[name] = absent(n, "PHS not requested for this evaluation", unit, method_phs)
        return
    is_2004 = editions == "2004"
    clo, _, _ = people(s)
    app = Applicability(n)
    app.require(s.hot_work, "PHS is computed only for spaces marked as hot work")
    app.require_present([("air_temperature", s.air_temperature), ("mean_radiant_temperature", mrt),
                         ("air_speed", s.air_speed), ("relative_humidity", rh)])
    app.require(np.isfinite(s.met), "no metabolic rate: give met or work_class")
    app.require(np.isfinite(clo), "clothing not configured")
    app.require(np.array([heat_stress.canonical_posture(p) is not None for p in s.posture],
                         dtype=bool),
                f"unknown posture (expected {', '.join(sorted(heat_stress.POSTURE_SPELLINGS))})")
    app.require(between(s.air_temperature, 15.0, 50.0),
                "outside ISO 7933 range: air_temperature 15-50 °C")
    app.require(between(mrt - s.air_temperature, 0.0, 60.0),
                "outside ISO 7933 range: mean radiant minus air temperature 0-60 K")
    pa = psy.vapour_pressure(s.air_temperature, rh)
    app.require(pa <= 4500.0 + UPPER_TOLERANCE,
                "outside ISO 7933 range: water vapour pressure above 4.5 kPa")
    app.require(is_2004 | (pa >= 500.0 - UPPER_TOLERANCE), "outside ISO 7933:2023 range: water "
                "vapour pressure below 0.5 kPa")
    app.require(between(s.air_speed, 0.0, 3.0), "outside ISO 7933 range: air_speed 0-3 m/s")
    app.require(between(clo, 0.1, 1.0), "outside ISO 7933 range: clo 0.1-1.0")
    m_wm2 = s.met * MET_W_M2
    app.require(~is_2004 | between(m_wm2, 100.0, 450.0), "outside ISO 7933:2004 range: "
                "metabolic rate 100-450 W/m²")
    app.require(is_2004 | between(m_wm2, 56.0, 250.0), "outside ISO 7933:2023 range: "
                "metabolic rate 56-250 W/m²")
    ok = app.ok
    res = {k: np.full(n, np.nan) for k in PHS_COLUMNS}
    for edition in used:
        sel = ok & (editions == edition)
        if not sel.any():
            continue
        part = heat_stress.predicted_heat_strain(
            np.where(sel, s.air_temperature, np.nan), mrt, s.air_speed, rh, m_wm2, clo,
            list(s.posture), s.acclimatised.astype(np.float64), edition=edition)
        for key in PHS_COLUMNS:
            res[key] = np.where(sel, part[key], res[key])
    for key, (name, unit) in PHS_COLUMNS.items():
        out[name] = app.column(res[key], unit, method_phs)


def _wbgt_assessment(twa: FloatArray, w: FloatArray, adjustment_k: FloatArray,
                     out: IndexTable) -> None:
    """The columns that depend on the time-weighted WBGT ``twa`` (°C): the effective WBGT
    (ISO 7243:2017: time-weighted where available, else the spot value ``w``, plus the
    clothing adjustment) and the margins to the reference values already in ``out``."""
    n = w.size
    twa_app = Applicability(n)
    twa_app.require(np.isfinite(twa), "no time-weighted WBGT: fewer than "
                    "48 of the last 60 minutes covered")
    wbgt_tw = twa_app.column(twa, "°C", "ISO 7243:2017 (60-min time-weighted average)")
    basis = np.where(np.isfinite(twa), twa, w)
    eff = basis + adjustment_k
    eff_app = Applicability(n)
    eff_app.require(np.isfinite(basis), "no WBGT (see wbgt)")
    effective = eff_app.column(eff, "°C", "ISO 7243:2017 (time-weighted WBGT where "
                               "available, else spot value; plus clothing adjustment)")
    ref_a = out["wbgt_reference_acclimatised"]
    margin_app = Applicability(n)
    for code in np.unique(ref_a.codes[ref_a.codes != 0]):
        margin_app.require(ref_a.codes != code, ref_a.reasons[int(code)])
    margin_app.require(np.isfinite(eff), "no WBGT (see wbgt)")
    margins = {
        "wbgt_margin_acclimatised": margin_app.column(ref_a.values - eff, "K",
                                                      heat_stress.REFERENCE_METHOD),
        "wbgt_margin_unacclimatised": margin_app.column(
            out["wbgt_reference_unacclimatised"].values - eff, "K",
            heat_stress.REFERENCE_METHOD),
        "wbgt_margin": margin_app.column(out["wbgt_reference"].values - eff, "K",
                                         out["wbgt_reference"].method)}
    out["wbgt_time_weighted"] = wbgt_tw
    out["wbgt_effective"] = effective
    out.update(margins)


def with_time_weighted_wbgt(table: IndexTable, twa: FloatArray,
                            adjustment_k: FloatArray) -> None:
    """Recompute, in place, the columns of ``table`` that depend on the time-weighted WBGT,
    for a new ``twa`` (°C per space; the engine knows it only after it has recorded the spot
    WBGT of earlier evaluations)."""
    _wbgt_assessment(twa, table["wbgt"].values, adjustment_k, table)

