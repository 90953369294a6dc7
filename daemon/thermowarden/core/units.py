"""Unit conversion to the canonical SI units of each quantity kind.

Kinds and canonical units: temperature °C, humidity %, speed m/s, irradiance W/m²,
pressure Pa. Conversions are exact where the definition is exact (1 ft = 0.3048 m,
1 fpm = 0.00508 m/s, °F = °C x 9/5 + 32).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Final

Converter = Callable[[float], float]

_FT: Final = 0.3048

UNITS: Final[dict[str, dict[str, Converter]]] = {
    "temperature": {
        "°C": lambda x: x, "degC": lambda x: x, "C": lambda x: x, "Cel": lambda x: x,
        "°F": lambda x: (x - 32.0) * 5.0 / 9.0, "degF": lambda x: (x - 32.0) * 5.0 / 9.0,
        "F": lambda x: (x - 32.0) * 5.0 / 9.0,
        "K": lambda x: x - 273.15,
    },
    "humidity": {
        "%": lambda x: x, "%RH": lambda x: x, "fraction": lambda x: x * 100.0,
        "/": lambda x: x * 100.0,  # SenML "/" = ratio
    },
    "speed": {
        "m/s": lambda x: x, "fpm": lambda x: x * _FT / 60.0, "ft/min": lambda x: x * _FT / 60.0,
        "ft/s": lambda x: x * _FT, "km/h": lambda x: x / 3.6,
        "mph": lambda x: x * 1609.344 / 3600.0,
    },
    "irradiance": {"W/m²": lambda x: x, "W/m2": lambda x: x},
    "pressure": {"Pa": lambda x: x, "hPa": lambda x: x * 100.0, "kPa": lambda x: x * 1000.0},
    "state": {"": lambda x: x},
    "ratio": {"": lambda x: x, "%": lambda x: x, "fraction": lambda x: x * 100.0,
              "/": lambda x: x * 100.0},  # per cent; a sensor reporting 0.3 says fraction
}

CANONICAL: Final[dict[str, str]] = {
    "temperature": "°C", "humidity": "%", "speed": "m/s", "irradiance": "W/m²",
    "pressure": "Pa", "state": "", "ratio": "",
}


class UnitError(ValueError):
    """A unit that does not exist or does not fit the quantity."""


def converter(kind: str, unit: str) -> Converter:
    """The function converting ``unit`` to the canonical unit of ``kind``.

    Raises :class:`UnitError` naming the accepted units when ``unit`` does not fit.
    """
    table = UNITS[kind]
    try:
        return table[unit]
    except KeyError:
        accepted = ", ".join(u for u in table if u)
        raise UnitError(f"unit {unit!r} does not fit a {kind} (accepted: {accepted})") from None


def convert(value: float, kind: str, unit: str) -> float:
    """``value`` in ``unit`` converted to the canonical unit of ``kind``."""
    return converter(kind, unit)(value)

