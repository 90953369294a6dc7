"""The quantities thermowarden understands: names, kinds, canonical units, plausible ranges.

Names follow DESIGN.md. The plausible range is physical, not a comfort judgement: a value
outside it is a sensor or wiring fault and is refused at ingest.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final


@dataclass(frozen=True)
class Quantity:
    """One measured quantity: its kind (for units), canonical unit and plausible range."""

    name: str
    kind: str
    unit: str
    low: float
    high: float
    description: str


def _q(name: str, kind: str, low: float, high: float, description: str) -> Quantity:
    from thermowarden.core.units import CANONICAL

    return Quantity(name, kind, CANONICAL[kind], low, high, description)


QUANTITIES: Final[dict[str, Quantity]] = {q.name: q for q in (
    _q("air_temperature", "temperature", -60.0, 80.0, "dry-bulb air temperature"),
    _q("relative_humidity", "humidity", 0.0, 100.0, "relative humidity"),
    _q("globe_temperature", "temperature", -60.0, 150.0, "black-globe temperature"),
    _q("mean_radiant_temperature", "temperature", -60.0, 150.0, "mean radiant temperature"),
    _q("plane_radiant_temperature", "temperature", -60.0, 250.0,
       "plane radiant temperature of one side"),
    _q("radiant_flux", "irradiance", 0.0, 5000.0, "incident radiant flux on one side"),
    _q("air_speed", "speed", 0.0, 60.0, "mean air speed"),
    _q("turbulence_intensity", "ratio", 0.0, 100.0, "turbulence intensity, %"),
    _q("natural_wet_bulb", "temperature", -60.0, 60.0, "natural wet-bulb temperature"),
    _q("psychrometric_wet_bulb", "temperature", -60.0, 60.0,
       "psychrometric (aspirated) wet-bulb temperature"),
    _q("surface_temperature", "temperature", -60.0, 150.0, "surface temperature"),
    _q("floor_temperature", "temperature", -20.0, 60.0, "floor surface temperature"),
    _q("outdoor_air_temperature", "temperature", -80.0, 70.0, "outdoor air temperature"),
    _q("outdoor_relative_humidity", "humidity", 0.0, 100.0, "outdoor relative humidity"),
    _q("wind_speed", "speed", 0.0, 80.0, "outdoor wind speed at 10 m"),
    _q("solar_irradiance", "irradiance", 0.0, 1500.0, "global solar irradiance"),
    _q("barometric_pressure", "pressure", 30_000.0, 110_000.0, "barometric pressure"),
    _q("shading_position", "ratio", 0.0, 100.0, "shading lowered, % (0 up, 100 fully down)"),
    _q("fan_state", "state", 0.0, 1.0, "fan running (1) or off (0)"),
    _q("occupancy", "state", 0.0, 1.0, "occupied (1) or vacant (0)"),
)}

STATE_QUANTITIES: Final = frozenset({"shading_position", "fan_state", "occupancy"})
