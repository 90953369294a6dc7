"""What every family of indices reads: the spaces' inputs (:class:`SpaceInputs`), the sun
over outdoor spaces (:class:`Sun`), what the families derive first (:class:`Derived`) and the
helpers they share."""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from typing import Final

import numpy as np

from thermowarden.core import comfort, solar
from thermowarden.core import psychrometrics as psy
from thermowarden.core.columns import BoolArray, FloatArray, IndexColumn

MET_W_M2: Final = 58.15
"""1 met in W/m² (ISO 7730:2005, ISO 8996)."""

UPPER_TOLERANCE: Final = 1e-9
"""Added to range limits so that a value equal to a limit up to rounding (for example
33.50000000000001 from a running mean) is inside it."""

IndexTable = dict[str, IndexColumn]


def nan_array(n: int) -> FloatArray:
    """(n,) NaN."""
    return np.full(n, np.nan)


def between(x: FloatArray, lo: float, hi: float) -> BoolArray:
    """lo <= x <= hi, with a tolerance of :data:`UPPER_TOLERANCE` at both ends."""
    result: BoolArray = (x >= lo - UPPER_TOLERANCE) & (x <= hi + UPPER_TOLERANCE)
    return result


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
                values[f.name] = nan_array(n)
        unknown = set(given) - {f.name for f in fields(cls)}
        if unknown:
            raise TypeError(f"unknown SpaceInputs fields: {sorted(unknown)}")
        return cls(**values)  # type: ignore[arg-type]



@dataclass(frozen=True)
class Sun:
    """The sun for outdoor spaces in the sun at a site with latitude and longitude: its
    position and the measured global irradiance split as Liljegren et al. (2008) split it."""

    cos_zenith: FloatArray
    global_w_m2: FloatArray
    direct: FloatArray
    usable: BoolArray
    """Outdoors, with solar load, irradiance measured, the sun's position known."""


def sun_over(s: SpaceInputs) -> Sun:
    """The sun over each space (see :class:`Sun`)."""
    cos_zenith, distance = solar.sun_position(s.time_s, s.latitude, s.longitude)
    ghi, direct = solar.direct_fraction(s.solar_irradiance, cos_zenith, distance)
    usable = (~s.indoor & s.solar_load & np.isfinite(s.solar_irradiance)
              & np.isfinite(cos_zenith) & np.isfinite(ghi) & np.isfinite(direct))
    return Sun(cos_zenith, ghi, direct, usable)



def people(s: SpaceInputs) -> tuple[FloatArray, FloatArray, str]:
    """Clothing (clo, basic) and where it came from."""
    predicted = comfort.clothing_from_outdoor(
        np.where(np.isnan(s.clo), s.outdoor_air_temperature, np.nan))
    clo = np.where(np.isfinite(s.clo), s.clo, predicted)
    return clo, predicted, "configured, or Schiavon and Lee (2013) from the outdoor temperature"


@dataclass(frozen=True)
class Derived:
    """What the first families give the others, (N,) per space: the relative humidity (%),
    the mean radiant and operative temperatures (°C, NaN where they do not apply), whether
    the mean radiant temperature came from the sun, and the sun."""

    rh: FloatArray
    mrt: FloatArray
    operative: FloatArray
    mrt_from_sun: BoolArray
    sun: Sun
    with_phs: bool = True
    """Whether ISO 7933 PHS is computed in this evaluation."""
