"""What the indices take per space from the configuration rather than from the readings:
the people (metabolic rate, clothing, acclimatisation, posture), the globe (diameter,
emissivity), the sensor heights, the barometric pressure, the site's position and the
space's flags. Arrays over the spaces, built once per site."""

from __future__ import annotations

from typing import Final

import numpy as np

from thermowarden.core.psychrometrics import STANDARD_PRESSURE_PA, pressure_from_altitude
from thermowarden.site_model import SITE, SiteModel

DEFAULT_AIR_SPEED_HEIGHT_M: Final = 1.1
"""Height of a space's air speed sensor unless its point says height_m: ISO 7726's abdomen
height of a standing person."""
WIND_HEIGHT_M: Final = 10.0
"""Height of the site's wind_speed unless its point says height_m (meteorological 10 m)."""


def space_constants(model: SiteModel) -> tuple[dict[str, object], float]:
    """Per space, what the indices take from the configuration rather than the readings
    (people, globe, sensor heights, pressure, position, flags), as arrays over the spaces;
    and the height of the site's wind speed sensor (m)."""
    cfg = model.config
    spaces = cfg.spaces
    n = len(spaces)
    people = [cfg.people(s) for s in spaces]
    globe_d = np.full(n, 0.15)
    globe_e = np.full(n, 0.95)
    for p in model.points:  # each point's own globe (not the first on its topic)
        if p.space != SITE and p.quantity == "globe_temperature":
            if p.globe_diameter_m:
                globe_d[p.space] = p.globe_diameter_m
            if p.globe_emissivity:
                globe_e[p.space] = p.globe_emissivity
    # heights of the air speed sensors (UTCI converts to 10 m): a space's own air_speed
    # point at 1.1 m unless it says height_m; the site's wind_speed at 10 m unless it says
    speed_height = np.full(n, DEFAULT_AIR_SPEED_HEIGHT_M)
    wind_height_m = WIND_HEIGHT_M
    for p in model.points:
        # each point's own height (several points may share one topic: a SenML pack)
        if p.quantity not in ("air_speed", "wind_speed") or p.height_m is None:
            continue
        if p.space == SITE:
            wind_height_m = p.height_m
        else:
            speed_height[p.space] = p.height_m
    if cfg.site.barometric_pressure_pa is not None:
        pressure = cfg.site.barometric_pressure_pa
    elif cfg.site.altitude_m is not None:
        pressure = float(pressure_from_altitude(cfg.site.altitude_m))
    else:
        pressure = STANDARD_PRESSURE_PA
    indoor = np.array([s.kind == "indoor" for s in spaces], dtype=bool)
    solar = np.array([(s.solar_load if s.solar_load is not None else s.kind == "outdoor")
                      for s in spaces], dtype=bool)
    constants: dict[str, object] = {
        "met": np.array([p.met_value for p in people]),
        "clo": np.array([p.clo if p.clothing_model == "fixed" and p.clo is not None
                         else np.nan for p in people]),
        "acclimatised": np.array([p.acclimatised for p in people], dtype=bool),
        "clothing_adjustment_k": np.array([p.adjustment_k for p in people]),
        "posture": tuple(p.posture for p in people),
        "indoor": indoor, "solar_load": solar,
        "hot_work": np.array([s.hot_work for s in spaces], dtype=bool),
        "naturally_ventilated": np.array([s.ventilation == "natural" for s in spaces],
                                         dtype=bool),
        "pressure_pa": np.full(n, pressure),
        "latitude": np.full(n, np.nan if cfg.site.latitude is None else cfg.site.latitude),
        "longitude": np.full(n, np.nan if cfg.site.longitude is None
                             else cfg.site.longitude),
        "air_speed_height_m": speed_height,
        "globe_diameter_m": globe_d, "globe_emissivity": globe_e,
        "target_pmv": np.array([float(cfg.parameters(s).get("target_pmv", 0.5))
                                for s in spaces]),
        "phs_edition": tuple(s.phs_edition for s in spaces),
    }
    return constants, wind_height_m
