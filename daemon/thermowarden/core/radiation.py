"""Radiant environment: plane radiant temperature, radiant asymmetry, mean radiant
temperature and operative temperature. Temperatures in °C, fluxes in W/m², air speed in m/s.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from thermowarden.core.columns import FloatArray

STEFAN_BOLTZMANN = 5.670374419e-8  # W/(m² K⁴), CODATA 2018

SIDES = ("up", "down", "left", "right", "front", "back")
"""The six directions of ISO 7726 plane radiant temperatures."""

SIDE_ALIASES = {"ceiling": "up", "floor": "down", "window": "front", "room": "back"}
"""Names a site may use for a side: the window-facing sensor is ``front``."""

Posture = Literal["standing", "seated", "sphere"]

# ISO 7726:1998 Annex B: projected-area factors for the six plane radiant temperatures.
_POSTURE_WEIGHTS: dict[str, tuple[float, float, float]] = {
    # (up/down, left/right, front/back)
    "standing": (0.08, 0.23, 0.35),
    "seated": (0.18, 0.22, 0.30),
    "sphere": (1.0, 1.0, 1.0),
}


def canonical_side(side: str) -> str:
    """The ISO 7726 direction a side name stands for (``window`` -> ``front``)."""
    s = side.lower()
    s = SIDE_ALIASES.get(s, s)
    if s not in SIDES:
        raise ValueError(f"unknown side {side!r}; expected one of "
                         f"{', '.join(SIDES + tuple(SIDE_ALIASES))}")
    return s


def plane_radiant_temperature_from_flux(flux_w_m2: FloatArray) -> FloatArray:
    """Plane radiant temperature (°C) from the incident radiant flux on one side (W/m²).

    Stefan-Boltzmann for a black receiving surface (ISO 7726:1998 Annex B):
    tpr = (E / sigma)^(1/4) - 273.15. NaN for a negative flux.
    """
    e = np.asarray(flux_w_m2, dtype=np.float64)
    result: FloatArray = np.where(e >= 0, (np.maximum(e, 0.0) / STEFAN_BOLTZMANN) ** 0.25 - 273.15,
                                  np.nan)
    return result


def mean_radiant_from_globe(globe_c: FloatArray, air_c: FloatArray, air_speed: FloatArray,
                            diameter_m: FloatArray | float = 0.15,
                            emissivity: FloatArray | float = 0.95) -> FloatArray:
    """Mean radiant temperature (°C) from a globe thermometer, ISO 7726:1998 Annex B.

    General form (eq. B.2/B.3) for any globe diameter D (m) and emissivity: the globe's
    convective coefficient is the larger of natural convection ``1.4 (|tg-ta|/D)^0.25`` and
    forced convection ``6.3 va^0.6 / D^0.4`` (W/m² K), and
    ``tr = [(tg+273.15)^4 + hcg / (eps sigma) (tg - ta)]^0.25 - 273.15``.
    This is not the standard-globe shortcut; the two differ by up to 0.8 K in natural
    convection.
    """
    tg = np.asarray(globe_c, dtype=np.float64)
    ta = np.asarray(air_c, dtype=np.float64)
    va = np.maximum(np.asarray(air_speed, dtype=np.float64), 0.0)
    d = np.asarray(diameter_m, dtype=np.float64)
    eps = np.asarray(emissivity, dtype=np.float64)
    h_natural = 1.4 * (np.abs(tg - ta) / d) ** 0.25
    h_forced = 6.3 * va**0.6 / d**0.4
    hcg = np.maximum(h_natural, h_forced)
    t4 = (tg + 273.15) ** 4 + hcg / (eps * STEFAN_BOLTZMANN) * (tg - ta)
    result: FloatArray = np.where(t4 > 0, np.abs(t4) ** 0.25 - 273.15, np.nan)
    return result


def mean_radiant_from_planes(planes: dict[str, FloatArray], posture: Posture = "standing"
                             ) -> FloatArray:
    """Mean radiant temperature (°C) from the six plane radiant temperatures.

    ISO 7726:1998 Annex B, weighting by the projected area factors of a standing or seated
    person (or equal weights for a sphere). ``planes`` maps each side in :data:`SIDES` to a
    (N,) array; NaN where any side is missing.
    """
    w_ud, w_lr, w_fb = _POSTURE_WEIGHTS[posture]
    num = (w_ud * (planes["up"] + planes["down"]) + w_lr * (planes["left"] + planes["right"])
           + w_fb * (planes["front"] + planes["back"]))
    result: FloatArray = num / (2.0 * (w_ud + w_lr + w_fb))
    return result


def operative_weighting(air_speed: FloatArray) -> FloatArray:
    """ASHRAE 55 weighting A of air temperature in operative temperature.

    ASHRAE 55-2020 Normative Appendix A: A = 0.5 below 0.2 m/s, 0.6 for 0.2-0.6 m/s, 0.7 for
    0.6-1.0 m/s (and, here, above 1.0 m/s, where the standard gives no value).
    """
    v = np.asarray(air_speed, dtype=np.float64)
    result: FloatArray = np.where(v < 0.2, 0.5, np.where(v < 0.6, 0.6, 0.7))
    return result


def operative_temperature(air_c: FloatArray, mean_radiant_c: FloatArray,
                          air_speed: FloatArray) -> FloatArray:
    """Operative temperature (°C): to = A ta + (1 - A) tr, A from :func:`operative_weighting`."""
    a = operative_weighting(air_speed)
    result: FloatArray = a * np.asarray(air_c) + (1.0 - a) * np.asarray(mean_radiant_c)
    return result
