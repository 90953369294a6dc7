"""Every comfort and heat-stress index for N spaces at once.

:func:`compute_indices` takes a :class:`SpaceInputs` (arrays of what each space measured,
NaN where it lacks a quantity, plus per-space context) and returns an ordered mapping of
index name -> :class:`IndexColumn`. Each index carries its unit, its method, and per space
either a value or the reason it does not apply. This is the vectorised core: a handful of
array calls per index whatever the number of spaces.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from typing import Final

import numpy as np
import numpy.typing as npt

from thermowarden.core import (
    adaptive,
    comfort,
    heat_stress,
    local_discomfort,
    outdoor,
    radiation,
    solar,
)
from thermowarden.core import psychrometrics as psy
from thermowarden.core.columns import Applicability, BoolArray, FloatArray, IndexColumn, absent

MET_W_M2: Final = 58.15
"""1 met in W/m² (ISO 7730:2005, ISO 8996)."""

ISO_CATEGORY_LABELS: Final = ("A", "B", "C", "outside C")


def _nan(n: int) -> FloatArray:
    return np.full(n, np.nan)


@dataclass(frozen=True)
class SpaceInputs:
    """What N spaces measured and the context of the people in them.

    Measured quantities are (N,) float64 arrays in SI units with NaN where a space lacks the
    quantity or its reading is stale. Context arrays are (N,) too. Build with
    :meth:`create`, which fills anything not given with "absent" or the documented default.
    """

    n: int
    air_temperature: FloatArray
    relative_humidity: FloatArray
    globe_temperature: FloatArray
    mean_radiant_temperature: FloatArray
    air_speed: FloatArray
    """Mean air speed measured in the space (m/s), ISO 7726 (over about 3 minutes)."""
    relative_air_speed: FloatArray
    """Air speed relative to the moving body (m/s) where a user knows it; NaN otherwise."""
    air_speed_height_m: FloatArray
    """Height of the air speed (wind) measurement above ground (m); UTCI needs 10 m."""
    turbulence_intensity: FloatArray
    natural_wet_bulb: FloatArray
    psychrometric_wet_bulb: FloatArray
    floor_temperature: FloatArray
    air_temperature_head: FloatArray
    air_temperature_ankle: FloatArray
    surface_temperature_min: FloatArray
    outdoor_air_temperature: FloatArray
    wbgt_time_weighted: FloatArray
    """Time-weighted WBGT over the assessment window (°C), supplied by the engine."""
    running_mean_outdoor: FloatArray
    solar_irradiance: FloatArray
    """Global horizontal solar irradiance (W/m²) at the site; NaN where not measured."""
    latitude: FloatArray
    """Site latitude (degrees, north positive); NaN where not configured."""
    longitude: FloatArray
    """Site longitude (degrees, east positive); NaN where not configured."""
    time_s: FloatArray
    """Time of the readings (s since 1970-01-01 UTC), for the sun's position; NaN unknown."""
    plane_radiant: dict[str, FloatArray]
    """Side (:data:`radiation.SIDES`) -> plane radiant temperature (°C)."""
    met: FloatArray
    """Metabolic rate, met (1 met = 58.15 W/m²); NaN where not given (then no heat-stress
    reference values, and the comfort indices assume 1.2 met and say so)."""
    clo: FloatArray
    """Basic clothing insulation, clo; NaN -> predicted from the outdoor temperature."""
    acclimatised: BoolArray
    indoor: BoolArray
    solar_load: BoolArray
    hot_work: BoolArray
    naturally_ventilated: BoolArray
    pressure_pa: FloatArray
    globe_diameter_m: FloatArray
    globe_emissivity: FloatArray
    clothing_adjustment_k: FloatArray
    target_pmv: FloatArray
    assumed_mrt_offset_k: FloatArray
    """The space's assumed mean radiant minus air temperature (K), NaN where it assumes
    nothing: fills the planes a space does not measure (else the air temperature does)."""
    posture: tuple[str, ...] = field(default=())
    phs_edition: str | tuple[str, ...] = "2023"
    """ISO 7933 edition, "2023" or "2004": one for every space, or one per space."""

    @classmethod
    def create(cls, n: int, **given: object) -> SpaceInputs:
        """Inputs for ``n`` spaces; every field not in ``given`` gets its default.

        Defaults: measured quantities absent; met absent; air speed measured at 1.1 m (ISO
        7726 abdomen height of a standing person); clo absent; acclimatised false;
        indoor true; no solar load; not hot work; mechanically ventilated; 101325 Pa;
        150 mm globe of emissivity 0.95; no clothing adjustment; target PMV +0.5; standing.
        """
        defaults: dict[str, object] = {
            "air_speed_height_m": np.full(n, 1.1), "acclimatised": np.zeros(n, dtype=bool),
            "indoor": np.ones(n, dtype=bool), "solar_load": np.zeros(n, dtype=bool),
            "hot_work": np.zeros(n, dtype=bool),
            "naturally_ventilated": np.zeros(n, dtype=bool),
            "pressure_pa": np.full(n, psy.STANDARD_PRESSURE_PA),
            "globe_diameter_m": np.full(n, 0.15), "globe_emissivity": np.full(n, 0.95),
            "clothing_adjustment_k": np.zeros(n), "target_pmv": np.full(n, 0.5),
            "posture": ("standing",) * n, "plane_radiant": {},
        }
        values: dict[str, object] = {"n": n}
        for f in fields(cls):
            if f.name == "n":
                continue
            if f.name in given:
                v = given[f.name]
                if isinstance(v, np.ndarray) and v.dtype != np.bool_:
                    v = v.astype(np.float64, copy=False)
                values[f.name] = v
            elif f.name in defaults:
                values[f.name] = defaults[f.name]
            elif f.name == "phs_edition":
                values[f.name] = "2023"
            else:
                values[f.name] = _nan(n)
        unknown = set(given) - {f.name for f in fields(cls)}
        if unknown:
            raise TypeError(f"unknown SpaceInputs fields: {sorted(unknown)}")
        return cls(**values)  # type: ignore[arg-type]


IndexTable = dict[str, IndexColumn]


def _between(x: FloatArray, lo: float, hi: float) -> BoolArray:
    """lo <= x <= hi, with a tolerance of :data:`UPPER_TOLERANCE` at both ends."""
    result: BoolArray = (x >= lo - UPPER_TOLERANCE) & (x <= hi + UPPER_TOLERANCE)
    return result


def relative_humidity_method(measured: BoolArray) -> str:
    """The method of the relative humidity column for spaces where it was ``measured`` (the
    others derive it from a psychrometric wet bulb)."""
    if measured.all():
        return "measured"
    if not measured.any():
        return "ASHRAE Handbook Fundamentals 2017 ch. 1 (from the wet/dry-bulb pair)"
    return "measured, or ASHRAE 2017 ch. 1 from the wet/dry-bulb pair"


def _psychrometrics(s: SpaceInputs, out: IndexTable) -> FloatArray:
    """Humidity indices; returns the relative humidity (%) the other indices use."""
    n = s.n
    rh_from_psy = psy.relative_humidity_from_wet_bulb(s.air_temperature, s.psychrometric_wet_bulb,
                                                      s.pressure_pa)
    rh = np.where(np.isfinite(s.relative_humidity), s.relative_humidity, rh_from_psy)
    app = Applicability(n)
    app.require(np.isfinite(s.relative_humidity) | np.isfinite(s.psychrometric_wet_bulb),
                "input missing or stale: relative_humidity (or psychrometric_wet_bulb)")
    app.require_present([("air_temperature", s.air_temperature)])
    pair = np.isnan(s.relative_humidity) & np.isfinite(s.psychrometric_wet_bulb)
    app.require(~(pair & (s.psychrometric_wet_bulb > s.air_temperature + 1e-9)),
                "wet bulb above dry bulb: impossible psychrometer reading")
    app.require(~(pair & ~np.isfinite(rh)), "psychrometer wet bulb too low for its dry bulb "
                "(it would mean less than no moisture): check that the wick is wet and "
                "ventilated")
    out["relative_humidity"] = app.column(rh, "%", relative_humidity_method(
        np.isfinite(s.relative_humidity)))
    ok = app.ok
    ta = np.where(ok, s.air_temperature, np.nan)
    rh_ok = np.where(ok, rh, np.nan)
    method_psy = "ASHRAE Handbook Fundamentals 2017 ch. 1"
    dp_app = Applicability(n)
    dp_app.require_from(app)
    dp_app.require(~(rh_ok <= 0.0), "no dew point in perfectly dry air (relative humidity 0 %)")
    out["dew_point"] = dp_app.column(psy.dew_point(ta, rh_ok), "°C",
                                     method_psy + " (over water, also below 0 °C)")
    out["wet_bulb"] = app.column(psy.wet_bulb(ta, rh_ok, s.pressure_pa), "°C", method_psy)
    out["humidity_ratio"] = app.column(psy.humidity_ratio(ta, rh_ok, s.pressure_pa), "kg/kg",
                                       method_psy)
    return rh_ok


MRT_SOURCES: Final = ("measured", "globe", "six planes",
                      "planes measured, the others at the air temperature",
                      "planes measured, the others assumed",
                      "sun and irradiance (no globe)")
"""Labels of ``mean_radiant_temperature_source``: where each space's value came from."""


@dataclass(frozen=True)
class Sun:
    """The sun for outdoor spaces in the sun at a site with latitude and longitude: its
    position and the measured global irradiance split as Liljegren et al. (2008) split it."""

    cos_zenith: FloatArray
    global_w_m2: FloatArray
    direct: FloatArray
    usable: BoolArray
    """Outdoors, with solar load, irradiance measured, the sun's position known."""


def _sun(s: SpaceInputs) -> Sun:
    cos_zenith, distance = solar.sun_position(s.time_s, s.latitude, s.longitude)
    ghi, direct = solar.direct_fraction(s.solar_irradiance, cos_zenith, distance)
    usable = (~s.indoor & s.solar_load & np.isfinite(s.solar_irradiance)
              & np.isfinite(cos_zenith) & np.isfinite(ghi) & np.isfinite(direct))
    return Sun(cos_zenith, ghi, direct, usable)


def _planes_filled(s: SpaceInputs) -> tuple[FloatArray, BoolArray, BoolArray]:
    """ISO 7726 Annex B from the planes a space measures, the others at the air temperature
    or at the space's assumption (``assumed_mrt_offset_k``): (mrt, all six measured, some
    filled by the assumption)."""
    n = s.n
    planes = s.plane_radiant
    fill = s.air_temperature + np.where(np.isfinite(s.assumed_mrt_offset_k),
                                        s.assumed_mrt_offset_k, 0.0)
    some = np.zeros(n, dtype=bool)
    every = np.ones(n, dtype=bool)
    full: dict[str, FloatArray] = {}
    for side in radiation.SIDES:
        v = planes.get(side, _nan(n))
        known = np.isfinite(v)
        some |= known
        every &= known
        full[side] = np.where(known, v, fill)
    by_posture = {p: radiation.mean_radiant_from_planes(full, p) for p in ("standing", "seated")}
    seated = np.array([p == "seated" for p in s.posture], dtype=bool)
    mrt = np.where(seated, by_posture["seated"], by_posture["standing"])
    mrt = np.where(some, mrt, np.nan)
    return mrt, every, some & ~every & np.isfinite(s.assumed_mrt_offset_k)


def _radiant(s: SpaceInputs, out: IndexTable, sun: Sun, rh: FloatArray
             ) -> tuple[FloatArray, FloatArray, BoolArray]:
    """Mean radiant and operative temperature, and the black globe estimated outdoors in
    the sun without one; returns (mrt, operative, whether the mrt came from the sun)."""
    n = s.n
    from_planes, six, assumed_fill = _planes_filled(s)
    from_globe = radiation.mean_radiant_from_globe(s.globe_temperature, s.air_temperature,
                                                   s.air_speed, s.globe_diameter_m,
                                                   s.globe_emissivity)
    from_sun = heat_stress.mean_radiant_liljegren_sun(
        np.where(sun.usable, s.air_temperature, np.nan), rh,
        sun.global_w_m2, sun.direct, sun.cos_zenith, heat_stress.PERSON_SHORTWAVE_ABSORPTIVITY,
        heat_stress.PERSON_LONGWAVE_EMISSIVITY)
    measured = np.isfinite(s.mean_radiant_temperature)
    globe_cold = s.air_temperature - s.globe_temperature > GLOBE_COLDER_LIMIT_K
    use_globe = ~measured & np.isfinite(s.globe_temperature)
    use_planes = ~measured & ~use_globe & np.isfinite(from_planes)
    use_sun = ~measured & ~use_globe & ~use_planes & sun.usable
    mrt = np.where(measured, s.mean_radiant_temperature,
                   np.where(use_globe, from_globe, np.where(use_planes, from_planes, from_sun)))
    source = np.select([measured, use_globe, use_planes & six, use_planes & ~assumed_fill,
                        use_planes, use_sun], [0.0, 1.0, 2.0, 3.0, 4.0, 5.0], np.nan)
    app = Applicability(n)
    app.require(measured | use_globe | use_planes | use_sun, "input missing or stale: "
                "mean_radiant_temperature (or globe_temperature with air_temperature and "
                "air_speed, or plane radiant temperatures with air_temperature, or outdoors "
                "in the sun solar_irradiance with the site's latitude and longitude)")
    app.require(~use_planes | np.isfinite(s.air_temperature) | six,
                "input missing or stale: air_temperature (it stands in for the planes not "
                "measured)")
    app.require(~use_sun | (np.isfinite(s.air_temperature) & np.isfinite(rh)),
                "input missing or stale: air_temperature and relative_humidity (the sky's "
                "long-wave radiation rests on them)")
    app.require(~use_globe | np.isfinite(s.air_temperature),
                "input missing or stale: air_temperature (needed with the globe)")
    app.require(~use_globe | np.isfinite(s.air_speed),
                "input missing or stale: air_speed (the globe's convective exchange depends "
                "on it; ISO 7726 Annex B; no still air is assumed)")
    app.require(~(use_globe & globe_cold), "globe more than 5 K colder than the air: check the "
                "globe sensor (wet, not yet settled, or misplaced); no mean radiant temperature")
    app.require(np.isfinite(mrt), "no finite mean radiant temperature from these inputs")
    out["mean_radiant_temperature"] = app.column(
        mrt, "°C", "measured, or ISO 7726:1998 Annex B (globe: larger of natural and forced "
        "convection; planes: posture weights, a plane not measured at the air temperature or "
        "the assumption), or outdoors in the sun without a globe a person (as a sphere, "
        "absorbing 70 % of the short-wave radiation) in the radiation field of Liljegren "
        "et al. (2008) (see mean_radiant_temperature_source)")
    out["mean_radiant_temperature_source"] = app.column(
        np.where(app.ok, source, 0.0), "", "where the mean radiant temperature came "
        "from", MRT_SOURCES)
    globe_app = Applicability(n)
    globe_app.require(~np.isfinite(s.globe_temperature), "measured: globe_temperature sensor "
                      "present")
    globe_app.require(sun.usable, "only outdoors with solar load, solar_irradiance and the "
                      "site's latitude and longitude")
    globe_app.require_present([("air_temperature", s.air_temperature),
                               ("relative_humidity", rh),
                               ("air_speed", s.air_speed)])
    out["globe_temperature_estimated"] = globe_app.column(
        heat_stress.globe_temperature_liljegren_sun(
            np.where(globe_app.ok, s.air_temperature, np.nan), rh,
            s.air_speed, sun.global_w_m2, sun.direct, sun.cos_zenith, s.pressure_pa),
        "°C", "Liljegren et al. (2008) black globe (50.8 mm) from the global irradiance at "
        "the sun's position")
    op_app = Applicability(n)
    op_app.require_present([("air_temperature", s.air_temperature)])
    # only a mean radiant temperature that is given (a rejected globe gives none)
    op_app.require(app.ok, "no mean radiant temperature (see mean_radiant_temperature)")
    op_app.require(np.isfinite(s.air_speed), "input missing or stale: air_speed (sets the "
                   "weighting of air and radiant temperature)")
    operative = radiation.operative_temperature(s.air_temperature, mrt, s.air_speed)
    out["operative_temperature"] = op_app.column(operative, "°C",
                                                 "ASHRAE 55-2020 Appendix A (A = 0.5/0.6/0.7)")
    return (np.where(app.ok, mrt, np.nan), np.where(op_app.ok, operative, np.nan),
            app.ok & use_sun)


GLOBE_COLDER_LIMIT_K: Final = 5.0
"""A globe more than this colder than the air gives no mean radiant temperature (a check
of the sensor: rooms and even a clear night sky rarely put a globe that far below the air;
decision, common practice, no source)."""


def _asymmetry(s: SpaceInputs, out: IndexTable) -> None:
    """Radiant asymmetry (K) and its ISO 7730 percentage dissatisfied."""
    n = s.n
    p = s.plane_radiant
    nan = _nan(n)
    horizontal = p.get("front", nan) - p.get("back", nan)  # window side minus room side
    vertical = p.get("up", nan) - p.get("down", nan)
    pd_wall = np.where(horizontal >= 0, local_discomfort.warm_wall_pd(np.abs(horizontal)),
                       local_discomfort.cool_wall_pd(np.abs(horizontal)))
    pd_ceiling = np.where(vertical >= 0, local_discomfort.warm_ceiling_pd(np.abs(vertical)),
                          local_discomfort.cool_ceiling_pd(np.abs(vertical)))
    pd_wall = np.where(np.isnan(horizontal), np.nan, pd_wall)
    pd_ceiling = np.where(np.isnan(vertical), np.nan, pd_ceiling)
    asym = np.fmax(np.abs(horizontal), np.abs(vertical))
    pd = np.fmax(pd_wall, pd_ceiling)
    app = Applicability(n)
    app.require(np.isfinite(asym), "input missing or stale: a pair of opposite plane radiant "
                "temperatures (front/back = window/room, or up/down)")
    valid = (np.isnan(horizontal) | np.where(horizontal >= 0, np.abs(horizontal) < 35,
                                             np.abs(horizontal) < 15))
    valid &= np.isnan(vertical) | np.where(vertical >= 0, np.abs(vertical) < 23,
                                           np.abs(vertical) < 15)
    app.require(valid, "outside ISO 7730 range: radiant asymmetry beyond the measured "
                "curves (warm ceiling 23 K, cool wall/ceiling 15 K, warm wall 35 K)")
    method = "ISO 7730:2005 6.5"
    out["radiant_asymmetry_horizontal"] = app.column(horizontal, "K", method)
    out["radiant_asymmetry_vertical"] = app.column(vertical, "K", method)
    out["radiant_asymmetry"] = app.column(asym, "K", method)
    out["radiant_asymmetry_pd"] = app.column(pd, "%", method)
    cat_wall = np.where(horizontal >= 0,
                        local_discomfort.category(np.abs(horizontal), "asymmetry_warm_wall"),
                        local_discomfort.category(np.abs(horizontal), "asymmetry_cool_wall"))
    cat_ceiling = np.where(vertical >= 0,
                           local_discomfort.category(np.abs(vertical), "asymmetry_warm_ceiling"),
                           local_discomfort.category(np.abs(vertical), "asymmetry_cool_ceiling"))
    out["radiant_asymmetry_category"] = app.column(
        np.fmax(cat_wall, cat_ceiling), "category",
        "ISO 7730:2005 Table A.4 (limits on the asymmetry, K)", ISO_CATEGORY_LABELS)


def _local_discomfort(s: SpaceInputs, out: IndexTable) -> None:
    n = s.n
    tu = np.where(np.isfinite(s.turbulence_intensity), s.turbulence_intensity,
                  local_discomfort.DEFAULT_TURBULENCE_INTENSITY)
    app = Applicability(n)
    app.require_present([("air_temperature", s.air_temperature), ("air_speed", s.air_speed)])
    app.require(_between(s.air_temperature, 20.0, 26.0),
                "outside ISO 7730 range: draught rate needs air_temperature 20-26 °C")
    app.require(s.air_speed < 0.5, "outside ISO 7730 range: draught rate needs air_speed < 0.5 m/s")
    app.require(_between(tu, 10.0, 60.0),
                "outside ISO 7730 range: turbulence_intensity must be 10-60 %")
    app.require(s.indoor, "draught rate applies to indoor spaces")
    dr = local_discomfort.draught_rate(s.air_temperature, s.air_speed, tu)
    out["draught_rate"] = app.column(dr, "%", "ISO 7730:2005 6.2")
    out["draught_category"] = app.column(local_discomfort.category(dr, "draught_rate"),
                                         "category", "ISO 7730:2005 Table A.2", ISO_CATEGORY_LABELS)

    dv = s.air_temperature_head - s.air_temperature_ankle
    app = Applicability(n)
    app.require_present([("air_temperature_head", s.air_temperature_head),
                         ("air_temperature_ankle", s.air_temperature_ankle)])
    app.require(dv < 8.0, "outside ISO 7730 range: vertical difference must be below 8 K")
    pd_v = local_discomfort.vertical_difference_pd(dv)
    out["vertical_temperature_difference"] = app.column(dv, "K", "ISO 7726:1998 (head 1.1 m "
                                                        "minus ankle 0.1 m, seated)")
    out["vertical_temperature_difference_pd"] = app.column(pd_v, "%", "ISO 7730:2005 6.3")
    out["vertical_temperature_difference_category"] = app.column(
        local_discomfort.category(dv, "vertical_difference"), "category",
        "ISO 7730:2005 Table A.2 (limits on the difference, K)", ISO_CATEGORY_LABELS)

    app = Applicability(n)
    app.require_present([("floor_temperature", s.floor_temperature)])
    app.require(_between(s.floor_temperature, 10.0, 40.0),
                "outside ISO 7730 range: floor_temperature 10-40 °C")
    pd_f = local_discomfort.floor_temperature_pd(s.floor_temperature)
    out["floor_temperature_pd"] = app.column(pd_f, "%", "ISO 7730:2005 6.4")
    out["floor_temperature_category"] = app.column(
        local_discomfort.floor_category(s.floor_temperature), "category",
        "ISO 7730:2005 Table A.3 (floor surface temperature ranges)", ISO_CATEGORY_LABELS)


def _people(s: SpaceInputs) -> tuple[FloatArray, FloatArray, str]:
    """Clothing (clo, basic) and where it came from."""
    predicted = comfort.clothing_from_outdoor(
        np.where(np.isnan(s.clo), s.outdoor_air_temperature, np.nan))
    clo = np.where(np.isfinite(s.clo), s.clo, predicted)
    return clo, predicted, "configured, or Schiavon and Lee (2013) from the outdoor temperature"


COMFORT_MET_ASSUMED: Final = 1.2
"""met assumed for the comfort indices where no metabolic rate is given (sedentary office
work, ISO 7730:2005 Table B.1 / ASHRAE 55-2020 Table 5.2.1.2). Never used for heat stress."""

UPPER_TOLERANCE: Final = 1e-9
"""Added to range limits so that a value equal to a limit up to rounding (for example
33.50000000000001 from a running mean) is inside it."""


def _comfort_met(s: SpaceInputs) -> FloatArray:
    result: FloatArray = np.where(np.isfinite(s.met), s.met, COMFORT_MET_ASSUMED)
    return result


def _comfort(s: SpaceInputs, rh: FloatArray, mrt: FloatArray, operative: FloatArray,
             out: IndexTable) -> None:
    n = s.n
    clo, _, _ = _people(s)
    met = _comfort_met(s)
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
    iso.require(_between(s.air_temperature, 10.0, 30.0),
                "outside ISO 7730 range: air_temperature 10-30 °C")
    iso.require(_between(mrt, 10.0, 40.0),
                "outside ISO 7730 range: mean_radiant_temperature 10-40 °C")
    iso.require(_between(vr_iso, 0.0, 1.0), "outside ISO 7730 range: relative air speed 0-1 m/s")
    iso.require(psy.vapour_pressure(s.air_temperature, rh) <= 2700.0 + UPPER_TOLERANCE,
                "outside ISO 7730 range: water vapour pressure above 2700 Pa")
    iso.require(_between(met, 0.8, 4.0), "outside ISO 7730 range: met 0.8-4")
    iso.require(_between(clo, 0.0, 2.0), "outside ISO 7730 range: clo 0-2")
    ok = iso.ok
    pmv_i = comfort.pmv_fanger(np.where(ok, s.air_temperature, np.nan), mrt, vr_iso, rh, met,
                               clo)
    iso.require(_between(pmv_i, -2.0, 2.0) | ~np.isfinite(pmv_i),
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
    ash.require(_between(s.air_temperature, 10.0, 40.0),
                "outside ASHRAE 55 range: air_temperature 10-40 °C")
    ash.require(_between(mrt, 10.0, 40.0),
                "outside ASHRAE 55 range: mean_radiant_temperature 10-40 °C")
    ash.require(_between(vr_ash, 0.0, 2.0), "outside ASHRAE 55 range: relative air speed 0-2 m/s")
    ash.require(_between(met, 1.0, 2.0), "outside ASHRAE 55 scope: met 1.0-2.0")
    ash.require(_between(clo_d, 0.0, 1.5), "outside ASHRAE 55 scope: clo 0-1.5")
    ok = ash.ok
    ta_a = np.where(ok, s.air_temperature, np.nan)
    ce = comfort.cooling_effect(ta_a, mrt, vr_ash, rh, met, clo_d)
    pmv_a = comfort.pmv_ashrae(ta_a, mrt, vr_ash, rh, met, clo_d, ce)
    ash.require(_between(pmv_a, -3.0, 3.0) | ~np.isfinite(pmv_a),
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
    set_app.require(_between(s.air_temperature, 10.0, 40.0),
                    "outside SET range: air_temperature 10-40 °C")
    set_app.require(_between(mrt, 10.0, 40.0),
                    "outside SET range: mean_radiant_temperature 10-40 °C")
    set_app.require(_between(s.air_speed, 0.0, 2.0), "outside SET range: air_speed 0-2 m/s")
    set_app.require(_between(met, 1.0, 4.0), "outside SET range: met 1-4")
    set_app.require(_between(clo, 0.0, 1.5), "outside SET range: clo 0-1.5")
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

    # Adaptive comfort, for naturally ventilated spaces.
    rm_app = Applicability(n)
    rm_app.require(np.isfinite(s.running_mean_outdoor),
                   "input missing: seven daily outdoor means (newest first)")
    out["running_mean_outdoor_temperature"] = rm_app.column(
        s.running_mean_outdoor, "°C", "EN 16798-1:2019 eq. (B.2)")
    tpma = s.running_mean_outdoor
    a_app = Applicability(n)
    a_app.require(s.indoor, "adaptive comfort applies to indoor spaces")
    a_app.require(np.isfinite(tpma), "input missing: seven daily outdoor means (newest first)")
    a_app.require(_between(tpma, 10.0, 33.5),
                  "outside ASHRAE 55 adaptive range: prevailing mean outdoor 10-33.5 °C")
    a_app.require(_between(met, 1.0, 1.3), "outside ASHRAE 55 adaptive scope: 1.0-1.3 met")
    a_app.require(s.naturally_ventilated, "adaptive comfort applies to occupant-controlled "
                  "naturally ventilated spaces (ASHRAE 55-2020 5.4.1)")
    t_cmf = adaptive.ashrae_comfort_temperature(tpma)
    m55 = "ASHRAE 55-2020 5.4"
    out["adaptive_ashrae_comfort"] = a_app.column(t_cmf, "°C", m55)
    raised = adaptive.ashrae_air_speed_increase(s.air_speed, operative)
    m55_up = (m55 + " (raised for elevated air speed above 25 °C operative, Table 5.4.2.4: "
              "+1.2 K from 0.6 m/s, +1.8 K from 0.9 m/s, +2.2 K from 1.2 m/s)")
    for band, half in adaptive.ASHRAE_BANDS_K.items():
        out[f"adaptive_ashrae_{band}_lower"] = a_app.column(t_cmf - half, "°C", m55)
        out[f"adaptive_ashrae_{band}_upper"] = a_app.column(t_cmf + half + raised, "°C", m55_up)
    en_app = Applicability(n)
    en_app.require(s.indoor, "adaptive comfort applies to indoor spaces")
    en_app.require(np.isfinite(tpma), "input missing: seven daily outdoor means (newest first)")
    en_app.require(_between(tpma, 10.0, 30.0),
                   "outside EN 16798-1 adaptive range: running mean outdoor 10-30 °C")
    en_app.require(_between(met, 1.0, 1.3), "outside EN 16798-1 adaptive scope: sedentary "
                   "activity, 1.0-1.3 met")
    en_app.require(s.naturally_ventilated, "EN 16798-1 adaptive limits apply to buildings "
                   "without mechanical cooling (naturally ventilated), not to mechanically "
                   "ventilated spaces")
    theta_c = adaptive.en_comfort_temperature(tpma)
    m_en = "EN 16798-1:2019 Annex B"
    out["adaptive_en_comfort"] = en_app.column(theta_c, "°C", m_en)
    # the lower limit: EN 16798-1 B.2.2 gives it for a running mean of 15 °C and above
    # (below, the heating-season limits of the mechanically heated building apply)
    low_app = Applicability(n)
    low_app.require(en_app.ok, "EN 16798-1 adaptive limits do not apply (see "
                    "adaptive_en_comfort)")
    low_app.require(tpma >= 15.0 - UPPER_TOLERANCE, "EN 16798-1 gives the adaptive lower "
                    "limit only for a running mean outdoor temperature of 15 °C and above")
    m_en_up = (m_en + " (raised for elevated air speed above 25 °C operative: +1.2 K from "
               "0.6 m/s, +1.8 K from 0.9 m/s, +2.2 K from 1.2 m/s, as pythermalcomfort's "
               "adaptive_en "
               "applies them)")
    for cat, (up, down) in adaptive.EN_BANDS_K.items():
        out[f"adaptive_en_{cat}_lower"] = low_app.column(theta_c - down, "°C", m_en)
        out[f"adaptive_en_{cat}_upper"] = en_app.column(theta_c + up + raised, "°C", m_en_up)
    en_app.require(np.isfinite(operative), "input missing or stale: operative temperature")
    # the category on the warm side against the raised upper limits
    warm = operative - theta_c
    effective = np.where(warm > 0.0, theta_c + np.maximum(warm - raised, 0.0), operative)
    out["adaptive_en_category"] = en_app.column(adaptive.en_category(effective, theta_c),
                                                "category", m_en_up, adaptive.EN_CATEGORY_LABELS)


def _heat_stress(s: SpaceInputs, rh: FloatArray, mrt: FloatArray, out: IndexTable,
                 with_phs: bool, sun: Sun, mrt_from_sun: BoolArray) -> None:
    n = s.n
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
    globe_beyond = with_mrt & ~_between(mrt_for_wick - s.air_temperature, -10.0, 70.0)
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
    est_app.require(_between(s.air_temperature, 0.0, 50.0), "outside the natural wet-bulb "
                    "estimate's range: air_temperature 0-50 °C (a liquid wick)")
    est_app.require(_between(s.air_speed, 0.0, 10.0), "outside the natural wet-bulb "
                    "estimate's range: air_speed 0-10 m/s")
    est_app.require(~with_mrt | _between(mrt_for_wick - s.air_temperature, -10.0, 70.0),
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
    m_app.require(_between(m_w, 100.0, 800.0),
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

    # ISO 7933 PHS, hot work only; each space in the edition it asks for
    editions = np.array(s.phs_edition if isinstance(s.phs_edition, tuple)
                        else (s.phs_edition,) * n, dtype=object)
    used = sorted({str(e) for e in editions}, reverse=True)
    method_phs = (f"ISO 7933:{used[0]}" if len(used) == 1
                  else "ISO 7933:2023 or 2004 (the phs_edition of each space)")
    phs_names = {"t_re": ("phs_rectal_temperature", "°C"), "sweat_loss_g": ("phs_sweat_loss", "g"),
                 "d_lim_t_re": ("phs_limit_rectal", "min"),
                 "d_lim_loss_50": ("phs_limit_water_loss_50", "min"),
                 "d_lim_loss_95": ("phs_limit_water_loss_95", "min")}
    if not with_phs:
        for name, unit in phs_names.values():
            out[name] = absent(n, "PHS not requested for this evaluation", unit, method_phs)
        return
    is_2004 = editions == "2004"
    clo, _, _ = _people(s)
    app = Applicability(n)
    app.require(s.hot_work, "PHS is computed only for spaces marked as hot work")
    app.require_present([("air_temperature", s.air_temperature), ("mean_radiant_temperature", mrt),
                         ("air_speed", s.air_speed), ("relative_humidity", rh)])
    app.require(np.isfinite(s.met), "no metabolic rate: give met or work_class")
    app.require(np.isfinite(clo), "clothing not configured")
    app.require(np.array([heat_stress.canonical_posture(p) is not None for p in s.posture],
                         dtype=bool),
                f"unknown posture (expected {', '.join(sorted(heat_stress.POSTURE_SPELLINGS))})")
    app.require(_between(s.air_temperature, 15.0, 50.0),
                "outside ISO 7933 range: air_temperature 15-50 °C")
    app.require(_between(mrt - s.air_temperature, 0.0, 60.0),
                "outside ISO 7933 range: mean radiant minus air temperature 0-60 K")
    pa = psy.vapour_pressure(s.air_temperature, rh)
    app.require(pa <= 4500.0 + UPPER_TOLERANCE,
                "outside ISO 7933 range: water vapour pressure above 4.5 kPa")
    app.require(is_2004 | (pa >= 500.0 - UPPER_TOLERANCE), "outside ISO 7933:2023 range: water "
                "vapour pressure below 0.5 kPa")
    app.require(_between(s.air_speed, 0.0, 3.0), "outside ISO 7933 range: air_speed 0-3 m/s")
    app.require(_between(clo, 0.1, 1.0), "outside ISO 7933 range: clo 0.1-1.0")
    m_wm2 = s.met * MET_W_M2
    app.require(~is_2004 | _between(m_wm2, 100.0, 450.0), "outside ISO 7933:2004 range: "
                "metabolic rate 100-450 W/m²")
    app.require(is_2004 | _between(m_wm2, 56.0, 250.0), "outside ISO 7933:2023 range: "
                "metabolic rate 56-250 W/m²")
    ok = app.ok
    res = {k: np.full(n, np.nan) for k in phs_names}
    for edition in used:
        sel = ok & (editions == edition)
        if not sel.any():
            continue
        part = heat_stress.predicted_heat_strain(
            np.where(sel, s.air_temperature, np.nan), mrt, s.air_speed, rh, m_wm2, clo,
            list(s.posture), s.acclimatised.astype(np.float64), edition=edition)
        for key in phs_names:
            res[key] = np.where(sel, part[key], res[key])
    for key, (name, unit) in phs_names.items():
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


HEAT_INDEX_MAX_C: Final = 60.0
"""Heat index values above this are not given: beyond the top of Steadman's apparent
temperature tables (about 136-140 °F), where the NWS regression only extrapolates
(decision; the NWS states the regression is not valid beyond Steadman's data)."""

HUMIDEX_MAX_DEW_POINT_C: Final = 40.0
"""Humidex is not given above this dew point: outdoor dew points have not been observed much
above 35 °C (from memory), so beyond 40 °C the reading, not the weather, is in question
(decision)."""


def _outdoor(s: SpaceInputs, rh: FloatArray, mrt: FloatArray, out: IndexTable) -> None:
    n = s.n
    hi_values = outdoor.heat_index(s.air_temperature, rh)
    app = Applicability(n)
    app.require(~s.indoor, "heat index is an outdoor weather index (shade, light wind); "
                "indoors use PMV/SET, or WBGT for hot work")
    app.require_present([("air_temperature", s.air_temperature), ("relative_humidity", rh)])
    app.require(_between(s.air_temperature, 20.0, 50.0),
                "heat index applies at air_temperature 20-50 °C")
    app.require(~(hi_values > HEAT_INDEX_MAX_C),
                "heat index above 60 °C: beyond Steadman's tables, the NWS regression only "
                "extrapolates there")
    out["heat_index"] = app.column(hi_values, "°C",
                                   "NWS heat index (Rothfusz regression with adjustments)")
    hx = Applicability(n)
    hx.require(~s.indoor, "humidex is an outdoor weather index; indoors use PMV/SET, or WBGT "
               "for hot work")
    hx.require_present([("air_temperature", s.air_temperature), ("relative_humidity", rh)])
    hx.require(_between(s.air_temperature, 20.0, 50.0),
               "humidex applies at air_temperature 20-50 °C")
    hx.require(out["dew_point"].present, "no dew point (see dew_point)")
    hx.require(~(psy.dew_point(s.air_temperature, rh) > HUMIDEX_MAX_DEW_POINT_C),
               "humidex not given above a dew point of 40 °C (beyond any outdoor dew point "
               "observed: check the humidity sensor)")
    out["humidex"] = hx.column(outdoor.humidex_from_dew_point(s.air_temperature,
                                                              out["dew_point"].values), "1",
                               "Environment Canada humidex (Masterson and Richardson 1979) "
                               "from the dew point given here")
    wind10 = outdoor.wind_at_10m(s.air_speed, s.air_speed_height_m)
    u = Applicability(n)
    u.require(~s.indoor, "UTCI applies to outdoor spaces")
    u.require_present([("air_temperature", s.air_temperature), ("mean_radiant_temperature", mrt),
                       ("air_speed", s.air_speed), ("relative_humidity", rh)])
    u.require(np.isfinite(wind10), "air speed height must be above 0.01 m (roughness length)")
    u.require(_between(s.air_temperature, -50.0, 50.0),
              "outside UTCI range: air_temperature -50..50 °C")
    u.require(_between(mrt - s.air_temperature, -30.0, 70.0),
              "outside UTCI range: mean radiant minus air temperature -30..70 K")
    u.require(_between(wind10, 0.5, 17.0), "outside UTCI range: wind at 10 m 0.5-17 m/s "
              "(converted from the sensor height by the logarithmic profile)")
    u.require(psy.vapour_pressure(s.air_temperature, rh) <= 5000.0 + UPPER_TOLERANCE,
              "outside UTCI range: water vapour pressure above 5 kPa")
    ok = u.ok
    out["utci"] = u.column(outdoor.utci(np.where(ok, s.air_temperature, np.nan), mrt, wind10, rh),
                           "°C", "UTCI, Broede et al. (2012) polynomial; wind converted to 10 m "
                           "(logarithmic profile, z0 0.01 m)")


def _condensation(s: SpaceInputs, out: IndexTable) -> None:
    app = Applicability(s.n)
    app.require_present([("surface_temperature", s.surface_temperature_min)])
    app.require(out["dew_point"].present, "no dew point (see dew_point)")
    margin = s.surface_temperature_min - out["dew_point"].values
    out["condensation_margin"] = app.column(margin, "K", "coldest monitored surface minus dew "
                                            "point (ASHRAE 2017 ch. 1)")


def compute_indices(s: SpaceInputs, with_phs: bool = True) -> IndexTable:
    """Every index for every space in ``s``; see the module docstring.

    ``with_phs=False`` skips ISO 7933 PHS (a 480-minute simulation per hot-work space),
    which the engine runs on its own, slower schedule.
    """
    out: IndexTable = {}
    sun = _sun(s)
    humidity: IndexTable = {}
    rh = _psychrometrics(s, humidity)
    mrt, operative, mrt_from_sun = _radiant(s, out, sun, rh)
    out.update(humidity)
    _asymmetry(s, out)
    _local_discomfort(s, out)
    _comfort(s, rh, mrt, operative, out)
    _heat_stress(s, rh, mrt, out, with_phs, sun, mrt_from_sun)
    _outdoor(s, rh, mrt, out)
    _condensation(s, out)
    return out


def space_result(table: IndexTable, i: int) -> dict[str, dict[str, object]]:
    """The JSON-ready result of space ``i``: index name -> value, unit, method, reason."""
    return {name: col.as_dict(i) for name, col in table.items()}


def select(table: IndexTable, index: npt.NDArray[np.intp]) -> IndexTable:
    """The same table for a subset of spaces."""
    return {k: v.take(index) for k, v in table.items()}
