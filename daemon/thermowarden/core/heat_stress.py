"""Heat stress: WBGT, its reference values, and ISO 7933 Predicted Heat Strain.

WBGT is a screening index. Every result built from it is advisory: individual factors
(acclimatisation, hydration, fitness, medication, clothing) matter, and local regulations
and a qualified occupational hygienist have the last word.

Temperatures °C, metabolic rate W (whole body, standard 1.8 m² person) or W/m² where noted.
"""

from __future__ import annotations

import warnings
from typing import Final

import numpy as np

from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.solve import IndexArray, illinois

BODY_SURFACE_AREA_M2: Final = 1.8
"""Standard person of ISO 7243:2017 Annex A and ISO 8996."""

WORK_CLASSES_W_M2: Final[dict[str, float]] = {
    # ISO 8996:2021 Table A.2 (class: mean metabolic rate, W/m²), recalled from the standard.
    "rest": 65.0,
    "low": 100.0,
    "moderate": 165.0,
    "high": 230.0,
    "very_high": 290.0,
}

CLOTHING_ADJUSTMENTS_K: Final[dict[str, float]] = {
    # Clothing adjustment values (CAV, K of WBGT), ISO 7243:2017 Table B.1 / ACGIH TLV,
    # recalled from the standard (confirm against the current edition before relying on it).
    "work_clothes": 0.0,
    "cloth_coveralls": 0.0,
    "double_layer_woven": 3.0,
    "sms_polypropylene_coveralls": 0.5,
    "polyolefin_coveralls": 1.0,
    "limited_use_vapour_barrier_coveralls": 11.0,
}

POSTURES: Final = ("standing", "seated", "crouching")
"""Canonical postures (ISO 7726 radiant weights; ISO 7933 PHS)."""

POSTURE_SPELLINGS: Final[dict[str, str]] = {
    "standing": "standing", "stand": "standing", "upright": "standing",
    "seated": "seated", "sitting": "seated", "sit": "seated",
    "crouching": "crouching", "crouch": "crouching", "crouched": "crouching",
    "squatting": "crouching",
}
"""Common spellings a site or a user may write, mapped to :data:`POSTURES`."""

_PHS_POSTURE: Final = {"standing": "standing", "seated": "sitting", "crouching": "crouching"}
"""The words pythermalcomfort's PHS model expects."""


def canonical_posture(name: object) -> str | None:
    """The canonical posture for a spelling (case and spaces ignored), or None."""
    if not isinstance(name, str):
        return None
    return POSTURE_SPELLINGS.get(name.strip().lower())


REFERENCE_METHOD: Final = "ISO 7243:2017 Annex A (= NIOSH 2016 REL/RAL)"


def metabolic_rate_w(met_w_m2: FloatArray) -> FloatArray:
    """Whole-body metabolic rate (W) of the 1.8 m² standard person from W/m²."""
    result: FloatArray = np.asarray(met_w_m2, dtype=np.float64) * BODY_SURFACE_AREA_M2
    return result


def wbgt(natural_wet_bulb: FloatArray, globe: FloatArray, air: FloatArray | None = None,
         solar_load: BoolArray | bool = False) -> FloatArray:
    """WBGT (°C), ISO 7243:2017 eq. (1) and (2).

    Without solar load: 0.7 tnw + 0.3 tg. With solar load (outdoors in sun):
    0.7 tnw + 0.2 tg + 0.1 ta.
    """
    tnw = np.asarray(natural_wet_bulb, dtype=np.float64)
    tg = np.asarray(globe, dtype=np.float64)
    indoor = 0.7 * tnw + 0.3 * tg
    if air is None:
        return indoor
    ta = np.asarray(air, dtype=np.float64)
    outdoor = 0.7 * tnw + 0.2 * tg + 0.1 * ta
    result: FloatArray = np.where(np.asarray(solar_load, dtype=bool), outdoor, indoor)
    return result


# Natural wet-bulb temperature: the energy balance of a wetted wick, Liljegren et al. (2008).
# Constants of the paper (and of its reference C code): wick, air and water properties.
_WICK_DIAMETER_M: Final = 0.007
_WICK_EMISSIVITY: Final = 0.95
_MIN_SPEED: Final = 0.13
"""m/s: Liljegren et al. take lower air speeds as 0.13 m/s (the wick's own free convection
dominates there)."""
_R_GAS: Final = 8314.34  # J/(kmol K)
_M_AIR: Final = 28.97
_M_H2O: Final = 18.015
_R_AIR: Final = _R_GAS / _M_AIR
_CP: Final = 1003.5  # J/(kg K), dry air
_PRANDTL: Final = _CP / (_CP + 1.25 * _R_AIR)
_RATIO: Final = _CP * _M_AIR / _M_H2O
_STEFAN_BOLTZMANN: Final = 5.670374e-8


def _viscosity(t_k: FloatArray) -> FloatArray:
    """Dynamic viscosity of air (kg/(m s)), Bird, Stewart and Lightfoot, as in Liljegren."""
    omega = (t_k / 97.0 - 2.9) / 0.4 * (-0.034) + 1.048
    result: FloatArray = 2.6693e-6 * np.sqrt(_M_AIR * t_k) / (3.617**2 * omega)
    return result


def _diffusivity(t_k: FloatArray, p_hpa: FloatArray) -> FloatArray:
    """Diffusivity of water vapour in air (m²/s), Bird, Stewart and Lightfoot eq. 16.3-1."""
    t_crit12 = (132.0 * 647.3) ** 0.5
    p_crit13 = (36.4 * 218.0) ** (1.0 / 3.0)
    t_crit512 = (132.0 * 647.3) ** (5.0 / 12.0)
    m_mix = (1.0 / _M_AIR + 1.0 / _M_H2O) ** 0.5
    result: FloatArray = (3.640e-4 * (t_k / t_crit12) ** 2.334 * p_crit13 * t_crit512 * m_mix
                          / (p_hpa / 1013.25) * 1e-4)
    return result


def _heat_of_evaporation(t_k: FloatArray) -> FloatArray:
    """Latent heat of evaporation of water (J/kg), linear in 283-313 K (Van Wylen and Sonntag)."""
    result: FloatArray = (313.15 - t_k) / 30.0 * (-71100.0) + 2407300.0
    return result


def natural_wet_bulb_liljegren(air_c: FloatArray, rh: FloatArray, air_speed: FloatArray,
                               mean_radiant_c: FloatArray,
                               pressure_pa: FloatArray | float = 101_325.0) -> FloatArray:
    """Natural wet-bulb temperature (°C) from the energy balance of a wetted wick.

    Liljegren J.C., Carhart R.A., Lawday P., Tschopp S., Sharp R. (2008), "Modeling the wet
    bulb globe temperature using standard meteorological measurements", J. Occup. Environ.
    Hyg. 5:645-655, eq. for the natural wet bulb: the wick (a 7 mm cylinder of emissivity
    0.95) loses heat by evaporation into the air and gains it by convection (Bedingfield and
    Drew's cylinder correlation, Nu = 0.281 Re^0.6 Pr^0.44) and by radiation:

        Tw = Ta - (dHvap / ratio) (ew - ea) / (P - ew) (Pr / Sc)^0.56 + F / h,

    properties at the mean of Tw and Ta. The paper writes the radiation F from solar
    irradiance, sun angle and sky and ground emission (that form is
    :func:`natural_wet_bulb_liljegren_sun`); here the wick exchanges radiation with the
    **mean radiant temperature** (F = sigma eps (Tr^4 - Tw^4)), which a globe measures
    indoors and outdoors, sun included. That differs from the paper in one respect: the
    wick's (cylinder's) view of the direct sun is taken as the globe's (sphere's). Air speed
    below 0.13 m/s is taken as 0.13 m/s, as in the paper. Vapour pressures: ASHRAE 2017
    saturation over liquid water (the wick is wet). Solved for all spaces at once (bracketed
    regula falsi, to 0.001 K). NaN where an input is missing.
    """
    tr_k = np.asarray(mean_radiant_c, dtype=np.float64) + 273.15
    return _wick_balance(air_c, rh, air_speed, pressure_pa, tr_k ** 4, np.zeros_like(tr_k))


_WICK_LENGTH_M: Final = 0.0254
_WICK_ALBEDO: Final = 0.4
_GROUND_EMISSIVITY: Final = 0.999
_GROUND_ALBEDO: Final = 0.45


def natural_wet_bulb_liljegren_sun(air_c: FloatArray, rh: FloatArray, air_speed: FloatArray,
                                   global_w_m2: FloatArray, direct: FloatArray,
                                   cos_zenith: FloatArray,
                                   pressure_pa: FloatArray | float = 101_325.0) -> FloatArray:
    """Natural wet-bulb temperature (°C) outdoors from the global horizontal irradiance,
    without a globe: Liljegren et al. (2008) with their radiation term.

    The wick (7 mm x 25.4 mm, emissivity 0.95, albedo 0.4) exchanges long-wave radiation
    with half sky (emissivity 0.575 ea^0.143, ea in hPa; Oke) and half ground (at the air
    temperature, emissivity 0.999), and absorbs sunlight: the diffuse part over its whole
    surface and its top, the direct beam on its side (tan z / pi of the horizontal beam) and
    its top, and the light the ground reflects (albedo 0.45):

        F = sigma eps [ (eps_atm + eps_sfc) Ta^4 / 2 - Tw^4 ]
            + (1 - a_w) S [ (1 - f)(1 + D/4L) + f (tan z / pi + D/4L) + a_sfc ].

    ``global_w_m2`` S and ``direct`` f as :func:`thermowarden.core.solar.direct_fraction`
    gives them; ``cos_zenith`` from :func:`thermowarden.core.solar.sun_position`. For a
    place in the open: sky above, level ground at the air temperature around (the paper's
    assumptions); shade, walls or hot surfaces nearby need a globe instead.
    """
    from thermowarden.core.psychrometrics import saturation_pressure_water

    ta = np.asarray(air_c, dtype=np.float64)
    ta_k = ta + 273.15
    ea_hpa = np.asarray(rh, dtype=np.float64) / 100.0 * saturation_pressure_water(ta) / 100.0
    with np.errstate(invalid="ignore"):
        eps_atm = 0.575 * ea_hpa ** 0.143
    radiant_t4 = 0.5 * (eps_atm + _GROUND_EMISSIVITY) * ta_k ** 4
    cza = np.asarray(cos_zenith, dtype=np.float64)
    f = np.asarray(direct, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        beam_side = np.where(f > 0.0, np.tan(np.arccos(np.clip(cza, -1.0, 1.0))) / np.pi, 0.0)
    top = 0.25 * _WICK_DIAMETER_M / _WICK_LENGTH_M
    absorbed = ((1.0 - _WICK_ALBEDO) * np.asarray(global_w_m2, dtype=np.float64)
                * ((1.0 - f) * (1.0 + top) + f * (beam_side + top) + _GROUND_ALBEDO))
    return _wick_balance(air_c, rh, air_speed, pressure_pa, radiant_t4, absorbed)


_GLOBE_DIAMETER_M: Final = 0.0508
"""The globe of Liljegren et al. (2008) and their code: 2 in (50.8 mm), black."""
_GLOBE_EMISSIVITY: Final = 0.95
_GLOBE_ALBEDO: Final = 0.05


def _sky_and_ground_t4(air_c: FloatArray, rh: FloatArray) -> FloatArray:
    """Fourth power (K^4) of the long-wave radiant temperature of half sky (emissivity
    0.575 ea^0.143, ea in hPa; Oke) and half ground at the air temperature (emissivity
    0.999), as Liljegren et al. (2008) take them."""
    from thermowarden.core.psychrometrics import saturation_pressure_water

    ta = np.asarray(air_c, dtype=np.float64)
    ea_hpa = np.asarray(rh, dtype=np.float64) / 100.0 * saturation_pressure_water(ta) / 100.0
    with np.errstate(invalid="ignore"):
        eps_atm = 0.575 * ea_hpa ** 0.143
    result: FloatArray = 0.5 * (eps_atm + _GROUND_EMISSIVITY) * (ta + 273.15) ** 4
    return result


def _sphere_sun_w_m2(global_w_m2: FloatArray, direct: FloatArray, cos_zenith: FloatArray,
                     absorptivity: float = 1.0 - _GLOBE_ALBEDO) -> FloatArray:
    """Sunlight absorbed per m² of a sphere's surface (a black globe's absorptivity 0.95
    unless told), Liljegren et al. (2008): S (1 - a) / 2 [f (1 / (2 cos z) - 1) + 1 + a_sfc],
    the direct beam on the sphere's cross-section, the diffuse light and the light the
    ground reflects."""
    cza = np.asarray(cos_zenith, dtype=np.float64)
    f = np.asarray(direct, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        beam = np.where((f > 0.0) & (cza > 0.0), f * (1.0 / (2.0 * cza) - 1.0), 0.0)
    result: FloatArray = (np.asarray(global_w_m2, dtype=np.float64) * absorptivity
                          / 2.0 * (beam + 1.0 + _GROUND_ALBEDO))
    return result


def sphere_convection(globe_c: FloatArray, air_c: FloatArray, air_speed: FloatArray,
                      pressure_pa: FloatArray | float = 101_325.0,
                      diameter_m: float = _GLOBE_DIAMETER_M) -> FloatArray:
    """Convective heat transfer coefficient of a sphere in air (W/(m² K)), Liljegren et al.
    (2008): Nu = 2 + 0.6 Re^0.5 Pr^(1/3), air properties at the mean of globe and air
    temperature, air speed at least 0.13 m/s."""
    t_ref = 0.5 * (np.asarray(globe_c, dtype=np.float64) + np.asarray(air_c)) + 273.15
    mu = _viscosity(t_ref)
    density = np.asarray(pressure_pa, dtype=np.float64) / (_R_AIR * t_ref)
    v = np.maximum(np.asarray(air_speed, dtype=np.float64), _MIN_SPEED)
    reynolds = v * density * diameter_m / mu
    nusselt = 2.0 + 0.6 * np.sqrt(reynolds) * _PRANDTL ** 0.3333
    result: FloatArray = nusselt * (_CP + 1.25 * _R_AIR) * mu / diameter_m
    return result


PERSON_SHORTWAVE_ABSORPTIVITY: Final = 0.7
"""Short-wave absorptivity of a clothed person (ASHRAE 55-2020 Appendix C, its default)."""
PERSON_LONGWAVE_EMISSIVITY: Final = 0.95
"""Long-wave absorptivity and emissivity of a person (ASHRAE 55-2020 Appendix C)."""


def mean_radiant_liljegren_sun(air_c: FloatArray, rh: FloatArray, global_w_m2: FloatArray,
                               direct: FloatArray, cos_zenith: FloatArray,
                               absorptivity: float = 1.0 - _GLOBE_ALBEDO,
                               emissivity: float = _GLOBE_EMISSIVITY) -> FloatArray:
    """Mean radiant temperature (°C) of a sphere in the open, outdoors in the sun, from the
    global horizontal irradiance: the radiation field of Liljegren et al. (2008) (sky and
    ground as :func:`natural_wet_bulb_liljegren_sun` takes them, the sun split into direct
    beam and diffuse at its position), exactly:

        Tr^4 = (eps_atm + eps_sfc) Ta^4 / 2 + S alpha / (2 eps sigma) [f (1/(2 cos z) - 1)
               + 1 + a_sfc],  a_sfc = 0.45.

    With the defaults (alpha = eps = 0.95) it is a black globe's, what a globe there would
    give through ISO 7726 Annex B. With a person's absorptivity (0.7 short-wave, 0.95
    long-wave: :data:`PERSON_SHORTWAVE_ABSORPTIVITY`) it is a person's taken as a sphere
    (a standing person's projected area faces a high sun less than a sphere's and a low sun
    more). For a place in the open: shade, walls or hot surfaces need a globe.
    """
    t4 = (_sky_and_ground_t4(air_c, rh)
          + _sphere_sun_w_m2(global_w_m2, direct, cos_zenith, absorptivity)
          / (emissivity * _STEFAN_BOLTZMANN))
    result: FloatArray = np.where(t4 > 0, np.abs(t4) ** 0.25 - 273.15, np.nan)
    return result


def globe_temperature_liljegren_sun(air_c: FloatArray, rh: FloatArray, air_speed: FloatArray,
                                    global_w_m2: FloatArray, direct: FloatArray,
                                    cos_zenith: FloatArray,
                                    pressure_pa: FloatArray | float = 101_325.0) -> FloatArray:
    """Black globe temperature (°C) outdoors in the sun without a globe, Liljegren et al.
    (2008): the 50.8 mm globe of their model and code (emissivity 0.95, albedo 0.05) in the
    radiation field of :func:`mean_radiant_liljegren_sun`, losing heat by convection
    (:func:`sphere_convection`):

        eps sigma Tg^4 + h (Tg - Ta) = eps sigma Tr^4.

    Solved for all spaces at once (bracketed regula falsi, to 0.001 K). NaN where an input
    is missing.
    """
    ta = np.asarray(air_c, dtype=np.float64)
    n = ta.shape[0]
    out = np.full(n, np.nan)
    tr = np.broadcast_to(mean_radiant_liljegren_sun(air_c, rh, global_w_m2, direct,
                                                    cos_zenith), (n,))
    v_all = np.broadcast_to(np.asarray(air_speed, dtype=np.float64), (n,))
    p_all = np.broadcast_to(np.asarray(pressure_pa, dtype=np.float64), (n,))
    idx = np.flatnonzero(np.isfinite(ta) & np.isfinite(tr) & np.isfinite(v_all)
                         & np.isfinite(p_all))
    if idx.size == 0:
        return out
    ta_i, tr4, v, p = ta[idx], (tr[idx] + 273.15) ** 4, v_all[idx], p_all[idx]

    def residual(tg_c: FloatArray, sub: IndexArray) -> FloatArray:
        h = sphere_convection(tg_c, ta_i[sub], v[sub], p[sub])
        result: FloatArray = (_GLOBE_EMISSIVITY * _STEFAN_BOLTZMANN
                              * (tr4[sub] - (tg_c + 273.15) ** 4) - h * (tg_c - ta_i[sub]))
        return result

    all_sub = np.arange(idx.size)
    lo = np.minimum(ta_i, tr[idx]) - 1.0
    hi = np.maximum(ta_i, tr[idx]) + 1.0
    out[idx] = illinois(residual, lo, hi, residual(lo, all_sub), residual(hi, all_sub),
                        tolerance=1e-3, max_iterations=100)
    return out


def _wick_balance(air_c: FloatArray, rh: FloatArray, air_speed: FloatArray,
                  pressure_pa: FloatArray | float, radiant_t4: FloatArray,
                  absorbed_w_m2: FloatArray) -> FloatArray:
    """Solve the wick's energy balance (see :func:`natural_wet_bulb_liljegren`) with the
    long-wave surroundings at ``radiant_t4`` (K^4, the fourth power of their radiant
    temperature) and ``absorbed_w_m2`` of sunlight absorbed per m² of wick."""
    from thermowarden.core.psychrometrics import saturation_pressure_water

    ta = np.asarray(air_c, dtype=np.float64)
    n = ta.shape[0]
    out = np.full(n, np.nan)
    p_all = np.broadcast_to(np.asarray(pressure_pa, dtype=np.float64), (n,))
    t4_all = np.broadcast_to(np.asarray(radiant_t4, dtype=np.float64), (n,))
    sun_all = np.broadcast_to(np.asarray(absorbed_w_m2, dtype=np.float64), (n,))
    ok = (np.isfinite(ta) & np.isfinite(rh) & np.isfinite(air_speed)
          & np.isfinite(t4_all) & np.isfinite(sun_all) & np.isfinite(p_all))
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        return out
    ta_k = ta[idx] + 273.15
    t4 = t4_all[idx]
    sun = sun_all[idx]
    p_hpa = p_all[idx] / 100.0
    ea = np.asarray(rh, dtype=np.float64)[idx] / 100.0 * saturation_pressure_water(ta[idx]) / 100.0
    v = np.maximum(np.asarray(air_speed, dtype=np.float64)[idx], _MIN_SPEED)

    def residual(tw_c: FloatArray, sub: IndexArray) -> FloatArray:
        tw = tw_c + 273.15
        t_ref = 0.5 * (tw + ta_k[sub])
        mu = _viscosity(t_ref)
        density = p_hpa[sub] * 100.0 / (_R_AIR * t_ref)
        reynolds = v[sub] * density * _WICK_DIAMETER_M / mu
        nusselt = 0.281 * reynolds ** 0.6 * _PRANDTL ** 0.44
        h = nusselt * (_CP + 1.25 * _R_AIR) * mu / _WICK_DIAMETER_M
        schmidt = mu / (density * _diffusivity(t_ref, p_hpa[sub]))
        ew = saturation_pressure_water(tw_c) / 100.0
        radiation = _STEFAN_BOLTZMANN * _WICK_EMISSIVITY * (t4[sub] - tw ** 4) + sun[sub]
        balance = (ta_k[sub] - _heat_of_evaporation(t_ref) / _RATIO * (ew - ea[sub])
                   / (p_hpa[sub] - ew) * (_PRANDTL / schmidt) ** 0.56 + radiation / h)
        result: FloatArray = balance - tw
        return result

    all_sub = np.arange(idx.size)
    lo = np.full(idx.size, -40.0)
    # the wick stays below boiling: bracket up to 20 K above the air at most
    hi = np.minimum(np.maximum(ta[idx], t4 ** 0.25 - 273.15) + 5.0, ta[idx] + 20.0)
    tw = illinois(residual, lo, hi, residual(lo, all_sub), residual(hi, all_sub),
                  tolerance=1e-3, max_iterations=100, residual_tolerance=1e-4)
    out[idx] = tw
    return out


def reference_acclimatised(metabolic_w: FloatArray) -> FloatArray:
    """WBGT reference (°C) for acclimatised workers: 56.7 - 11.5 log10(M), M in W.

    ISO 7243:2017 Annex A eq. (A.1); identical to the NIOSH (2016) REL.
    """
    result: FloatArray = 56.7 - 11.5 * np.log10(np.asarray(metabolic_w, dtype=np.float64))
    return result


def reference_unacclimatised(metabolic_w: FloatArray) -> FloatArray:
    """WBGT reference (°C) for unacclimatised workers: 59.9 - 14.1 log10(M), M in W.

    ISO 7243:2017 Annex A eq. (A.2); identical to the NIOSH (2016) RAL.
    """
    result: FloatArray = 59.9 - 14.1 * np.log10(np.asarray(metabolic_w, dtype=np.float64))
    return result



PHS_EDITIONS: Final = ("2023", "2004")


def predicted_heat_strain(air_c: FloatArray, mrt_c: FloatArray, air_speed: FloatArray,
                          rh: FloatArray, met_w_m2: FloatArray, clo: FloatArray,
                          posture: list[str], acclimatised: FloatArray,
                          edition: str = "2023", duration_min: int = 480
                          ) -> dict[str, FloatArray]:
    """ISO 7933 Predicted Heat Strain for spaces marked as hot work, via pythermalcomfort.

    Returns rectal temperature at the end of the work period (°C), sweat loss (g), and the
    allowable exposure durations (min) limited by rectal temperature and by water loss for
    a mean (50 %) and a 95 % worker. Drinking freely, 75 kg, 1.8 m, no external work.
    ``edition`` is "2023" (default) or "2004"; ``acclimatised`` 1/0 per space; ``posture``
    any spelling of :data:`POSTURE_SPELLINGS` (NaN for a posture it does not know).
    """
    n = np.asarray(air_c).shape[0]
    keys = ("t_re", "sweat_loss_g", "d_lim_t_re", "d_lim_loss_50", "d_lim_loss_95")
    out = {k: np.full(n, np.nan) for k in keys}
    if edition not in PHS_EDITIONS:
        raise ValueError(f"unknown ISO 7933 edition {edition!r}; expected 2023 or 2004")
    ok = (np.isfinite(air_c) & np.isfinite(mrt_c) & np.isfinite(air_speed) & np.isfinite(rh)
          & np.isfinite(met_w_m2) & np.isfinite(clo))
    met = np.asarray(met_w_m2) / 58.15
    phs_posture = [_PHS_POSTURE.get(canonical_posture(p) or "", "") for p in posture]
    ok = ok & np.array([bool(p) for p in phs_posture], dtype=bool)
    for accl_value in (1.0, 0.0):
        sel = np.flatnonzero(ok & (np.asarray(acclimatised) == accl_value))
        if sel.size == 0:
            continue
        from pythermalcomfort.models import phs as _ptc_phs  # costly to import: only here

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = _ptc_phs(tdb=air_c[sel], tr=mrt_c[sel], v=air_speed[sel], rh=rh[sel],
                           met=met[sel], clo=clo[sel], posture=[phs_posture[i] for i in sel],
                           model=f"7933-{edition}", round_output=False, limit_inputs=False,
                           acclimatized=100 if accl_value else 0, duration=duration_min)
        for k in keys:
            out[k][sel] = np.asarray(getattr(res, k), dtype=np.float64)
    return out
