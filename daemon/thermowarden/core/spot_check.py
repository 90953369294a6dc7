"""One space's readings as a JSON object -> :class:`SpaceInputs` for a spot check.

The contract of ``thermowarden assess``: keys are quantity names (SI units unless
``units`` says otherwise) and context keys. Anything unknown, mistyped or impossible is
refused with an :class:`InputError` naming the key.
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
from collections.abc import Mapping
from typing import Final

import numpy as np

from thermowarden.core import adaptive, heat_stress, radiation
from thermowarden.core.indices import MET_W_M2, SpaceInputs
from thermowarden.core.psychrometrics import pressure_from_altitude
from thermowarden.core.quantities import QUANTITIES
from thermowarden.core.units import UnitError, convert


class InputError(ValueError):
    """A bad spot-check input; ``key`` names the offending key."""

    def __init__(self, key: str, message: str) -> None:
        super().__init__(f"{key}: {message}")
        self.key = key


# spot-check key -> quantity whose unit kind and plausible range apply
MEASURED: Final[dict[str, str]] = {
    "air_temperature": "air_temperature",
    "relative_humidity": "relative_humidity",
    "globe_temperature": "globe_temperature",
    "mean_radiant_temperature": "mean_radiant_temperature",
    "air_speed": "air_speed",
    "relative_air_speed": "air_speed",
    "turbulence_intensity": "turbulence_intensity",
    "natural_wet_bulb": "natural_wet_bulb",
    "psychrometric_wet_bulb": "psychrometric_wet_bulb",
    "floor_temperature": "floor_temperature",
    "air_temperature_head": "air_temperature",
    "air_temperature_ankle": "air_temperature",
    "surface_temperature": "surface_temperature",
    "outdoor_air_temperature": "outdoor_air_temperature",
    "wbgt_time_weighted": "globe_temperature",
    "solar_irradiance": "solar_irradiance",
}
_SIDE_KEYS: Final = {
    f"{prefix}_{side}": prefix
    for prefix in ("plane_radiant_temperature", "radiant_flux")
    for side in radiation.SIDES + tuple(radiation.SIDE_ALIASES)
}
CONTEXT: Final = {
    "met", "clo", "work_class", "acclimatised", "environment", "solar_load", "posture",
    "hot_work", "phs_edition", "altitude_m", "barometric_pressure", "outdoor_daily_means",
    "globe_diameter_m", "globe_emissivity", "clothing", "clothing_adjustment_k", "target_pmv",
    "naturally_ventilated", "units", "air_speed_height_m", "latitude", "longitude", "time",
    "assume",
}
ASSUMABLE: Final = ("air_speed", "mean_radiant_temperature", "relative_humidity")
"""What ``assume`` may stand in for, as in a site's ``assume``."""
ALL_KEYS: Final = frozenset(MEASURED) | frozenset(_SIDE_KEYS) | CONTEXT


def _number(key: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InputError(key, f"expected a number, got {type(value).__name__} {value!r}")
    f = float(value)
    if not math.isfinite(f):
        raise InputError(key, "expected a finite number")
    return f


def _bool(key: str, value: object) -> bool:
    if not isinstance(value, bool):
        raise InputError(key, f"expected true or false, got {value!r}")
    return value


def _choice(key: str, value: object, options: tuple[str, ...]) -> str:
    if not isinstance(value, str) or value not in options:
        raise InputError(key, f"expected one of {', '.join(options)}, got {value!r}")
    return value


def _in_range(key: str, value: float, low: float, high: float, unit: str) -> float:
    if not low <= value <= high:
        raise InputError(key, f"{value:g} {unit} is impossible here (expected {low:g} to "
                              f"{high:g} {unit})")
    return value


def _pressure(data: Mapping[str, object], units: Mapping[str, str]) -> float:
    """Barometric pressure (Pa). Without a unit, the magnitude tells Pa (30000-110000),
    hPa (300-1100) and kPa (30-110) apart: those ranges do not overlap."""
    key = "barometric_pressure"
    raw = _number(key, data[key])
    if key in units:
        try:
            value = convert(raw, "pressure", units[key])
        except UnitError as exc:
            raise InputError(f"units.{key}", str(exc)) from None
    elif 30.0 <= raw <= 110.0:
        value = raw * 1000.0
    elif 300.0 <= raw <= 1100.0:
        value = raw * 100.0
    else:
        value = raw
    if not 30_000.0 <= value <= 110_000.0:
        raise InputError(key, f"{raw:g} is not a barometric pressure: expected 30000-110000 Pa, "
                              "300-1100 hPa or 30-110 kPa (or say the unit in units)")
    return value


def _time(value: object) -> float:
    """An ISO 8601 date and time with its UTC offset (``2025-07-15T13:00:00-05:00`` or
    ``...Z``) -> seconds since 1970-01-01 UTC."""
    if not isinstance(value, str):
        raise InputError("time", f"expected an ISO 8601 date and time, got {value!r}")
    try:
        when = dt.datetime.fromisoformat(value.replace("Z", "+00:00")
                                         if value.endswith("Z") else value)
    except ValueError:
        raise InputError("time", f"{value!r} is not an ISO 8601 date and time "
                         "(e.g. 2025-07-15T13:00:00-05:00)") from None
    if when.tzinfo is None or when.utcoffset() is None:
        raise InputError("time", f"{value!r} has no UTC offset: add Z or +hh:mm (the sun's "
                         "position depends on it)")
    return when.timestamp()


def _suggest(key: str) -> str:
    close = difflib.get_close_matches(key, sorted(ALL_KEYS), n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def assumptions_used(data: Mapping[str, object]) -> dict[str, str]:
    """quantity -> "assumed: ..." for each ``assume`` entry that stands in for a reading
    the object does not give (a measured value always wins), as a site shows them."""
    raw = data.get("assume", {})
    if not isinstance(raw, Mapping):
        raise InputError("assume", "expected an object such as {\"relative_humidity\": 50}")
    notes: dict[str, str] = {}
    for key, value in raw.items():
        if key not in ASSUMABLE:
            raise InputError(f"assume.{key}", f"only {', '.join(ASSUMABLE)} can be assumed")
        measured_too = key in data or (key == "mean_radiant_temperature" and (
            "globe_temperature" in data or any(k in data for k in _SIDE_KEYS))) or (
            key == "relative_humidity" and "psychrometric_wet_bulb" in data)
        if key == "air_speed":
            v = _in_range(f"assume.{key}", _number(f"assume.{key}", value), 0.0, 1.0, "m/s")
            note = f"assumed: {'still air, ' if v <= 0.1 else ''}{v:g} m/s"
        elif key == "relative_humidity":
            v = _in_range(f"assume.{key}", _number(f"assume.{key}", value), 5.0, 95.0, "%")
            note = f"assumed: {v:g} %"
        else:
            off = _mrt_offset(value)
            note = ("assumed: equal to the air temperature" if off == 0.0 else
                    f"assumed: air temperature {off:+g} K")
        if not measured_too:
            notes[key] = note
    return notes


def _mrt_offset(value: object) -> float:
    """``air``, ``air+2``, ``air-1.5`` -> the offset from the air temperature (K)."""
    text = value.replace(" ", "") if isinstance(value, str) else ""
    if text == "air":
        return 0.0
    if text.startswith(("air+", "air-")):
        try:
            off = float(text[3:])
        except ValueError:
            off = math.nan
        if math.isfinite(off):
            return off
    raise InputError("assume.mean_radiant_temperature",
                     f"expected 'air' or 'air+K' / 'air-K' (an offset in kelvin), got {value!r}")


def parse_spot_check(data: Mapping[str, object]) -> SpaceInputs:
    """Validate one space's spot-check object and build single-space inputs; ``assume``
    fills in what is not measured (see :func:`assumptions_used`)."""
    if not isinstance(data, Mapping):
        raise InputError("input", "expected a JSON object")
    for key in data:
        if key not in ALL_KEYS:
            raise InputError(key, f"unknown key{_suggest(key)}")
    units_raw = data.get("units", {})
    if not isinstance(units_raw, Mapping):
        raise InputError("units", "expected an object of key -> unit")
    units: dict[str, str] = {}
    for k, u in units_raw.items():
        if k not in MEASURED and k not in _SIDE_KEYS and k != "barometric_pressure":
            raise InputError(f"units.{k}", f"not a measured key{_suggest(k)}")
        if not isinstance(u, str):
            raise InputError(f"units.{k}", "expected a unit name")
        units[k] = u

    def measured(key: str, quantity_name: str) -> float:
        q = QUANTITIES[quantity_name]
        raw = _number(key, data[key])
        try:
            value = convert(raw, q.kind, units.get(key, q.unit))
        except UnitError as exc:
            raise InputError(f"units.{key}", str(exc)) from None
        return _in_range(key, value, q.low, q.high, q.unit)

    given: dict[str, object] = {}
    for key, qname in MEASURED.items():
        if key in data:
            value = measured(key, qname)
            name = "surface_temperature_min" if key == "surface_temperature" else key
            given[name] = np.array([value])
    planes: dict[str, float] = {}
    for key, prefix in _SIDE_KEYS.items():
        if key not in data:
            continue
        side = radiation.canonical_side(key[len(prefix) + 1:])
        if prefix == "radiant_flux":
            flux = measured(key, "radiant_flux")
            t = float(radiation.plane_radiant_temperature_from_flux(np.array([flux]))[0])
        else:
            t = measured(key, "plane_radiant_temperature")
        if side in planes:
            raise InputError(key, f"side {side!r} given twice")
        planes[side] = t
    given["plane_radiant"] = {k: np.array([v]) for k, v in planes.items()}
    assumed = assumptions_used(data)
    if "air_speed" in assumed:
        given["air_speed"] = np.array([_number("assume.air_speed", _assume(data)["air_speed"])])
    if "relative_humidity" in assumed:
        given["relative_humidity"] = np.array([_number("assume.relative_humidity",
                                                       _assume(data)["relative_humidity"])])
    if "mean_radiant_temperature" in _assume(data):  # also fills the planes not measured
        given["assumed_mrt_offset_k"] = np.array([_mrt_offset(
            _assume(data)["mean_radiant_temperature"])])
    if "mean_radiant_temperature" in assumed and "air_temperature" in given:
        air = given["air_temperature"]
        assert isinstance(air, np.ndarray)
        given["mean_radiant_temperature"] = air + _mrt_offset(
            _assume(data)["mean_radiant_temperature"])

    if "met" in data and "work_class" in data:
        raise InputError("work_class", "give either met or work_class, not both")
    if "met" in data:
        given["met"] = np.array([_in_range("met", _number("met", data["met"]), 0.7, 10.0, "met")])
    elif "work_class" in data:
        wc = _choice("work_class", data["work_class"], tuple(heat_stress.WORK_CLASSES_W_M2))
        given["met"] = np.array([heat_stress.WORK_CLASSES_W_M2[wc] / MET_W_M2])
    if "clo" in data:
        given["clo"] = np.array([_in_range("clo", _number("clo", data["clo"]), 0.0, 4.0, "clo")])
    if "clothing" in data and "clothing_adjustment_k" in data:
        raise InputError("clothing", "give either clothing or clothing_adjustment_k, not both")
    if "clothing" in data:
        c = _choice("clothing", data["clothing"], tuple(heat_stress.CLOTHING_ADJUSTMENTS_K))
        given["clothing_adjustment_k"] = np.array([heat_stress.CLOTHING_ADJUSTMENTS_K[c]])
    if "clothing_adjustment_k" in data:
        cav = _in_range("clothing_adjustment_k",
                        _number("clothing_adjustment_k", data["clothing_adjustment_k"]),
                        0.0, 20.0, "K")
        given["clothing_adjustment_k"] = np.array([cav])
    for key in ("acclimatised", "solar_load", "hot_work", "naturally_ventilated"):
        if key in data:
            given[key] = np.array([_bool(key, data[key])])
    if "environment" in data:
        env = _choice("environment", data["environment"], ("indoor", "outdoor"))
        given["indoor"] = np.array([env == "indoor"])
        if "solar_load" not in data:  # as a site's space: outdoors in the sun by default
            given["solar_load"] = np.array([env == "outdoor"])
    if "posture" in data:
        posture = heat_stress.canonical_posture(data["posture"])
        if posture is None:
            raise InputError("posture", f"expected one of "
                             f"{', '.join(heat_stress.POSTURE_SPELLINGS)}, got "
                             f"{data['posture']!r}")
        given["posture"] = (posture,)
    if "phs_edition" in data:
        raw = data["phs_edition"]
        given["phs_edition"] = _choice("phs_edition", str(raw) if isinstance(raw, int) else raw,
                                       heat_stress.PHS_EDITIONS)
    if "altitude_m" in data and "barometric_pressure" in data:
        raise InputError("altitude_m", "give either altitude_m or barometric_pressure, not both")
    if "altitude_m" in data:
        alt = _in_range("altitude_m", _number("altitude_m", data["altitude_m"]), -500.0, 9000.0,
                        "m")
        given["pressure_pa"] = np.array([float(pressure_from_altitude(alt))])
    if "barometric_pressure" in data:
        given["pressure_pa"] = np.array([_pressure(data, units)])
    for key, low, high in (("globe_diameter_m", 0.02, 0.3), ("globe_emissivity", 0.5, 1.0),
                           ("target_pmv", -1.0, 1.0), ("air_speed_height_m", 0.1, 100.0)):
        if key in data:
            given[key] = np.array([_in_range(key, _number(key, data[key]), low, high, "")])
    if ("latitude" in data) != ("longitude" in data):
        raise InputError("latitude" if "longitude" in data else "longitude",
                         "give latitude and longitude together")
    if "latitude" in data:
        given["latitude"] = np.array([_in_range("latitude", _number("latitude",
                                                                    data["latitude"]),
                                                -90.0, 90.0, "°")])
        given["longitude"] = np.array([_in_range("longitude", _number("longitude",
                                                                      data["longitude"]),
                                                 -180.0, 180.0, "°")])
    if "time" in data:
        given["time_s"] = np.array([_time(data["time"])])
    if "outdoor_daily_means" in data:
        means = data["outdoor_daily_means"]
        if not isinstance(means, list) or len(means) < 7:
            raise InputError("outdoor_daily_means", "expected a list of at least seven daily "
                             "mean outdoor temperatures (°C), newest first")
        values = [_in_range("outdoor_daily_means", _number("outdoor_daily_means", m), -80.0,
                            70.0, "°C") for m in means]
        given["running_mean_outdoor"] = adaptive.running_mean_outdoor([values])
    return SpaceInputs.create(1, **given)


def _assume(data: Mapping[str, object]) -> Mapping[str, object]:
    raw = data.get("assume", {})
    assert isinstance(raw, Mapping)
    return raw
