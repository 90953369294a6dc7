"""What a topic carries: the quantity, its unit and payload format, calibration and the
bounds a reading must keep to be trusted (explicit points and topic templates)."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import Field, ValidationInfo, field_validator, model_validator

from thermowarden.config.base import Strict
from thermowarden.core import radiation
from thermowarden.core.quantities import QUANTITIES, STATE_QUANTITIES
from thermowarden.core.topics import TemplateError, TopicTemplate
from thermowarden.core.units import UnitError, converter

SIDED_QUANTITIES = frozenset({"plane_radiant_temperature", "radiant_flux"})

Quantity = Literal[
    "air_temperature", "relative_humidity", "globe_temperature", "mean_radiant_temperature",
    "plane_radiant_temperature", "radiant_flux", "air_speed", "turbulence_intensity",
    "natural_wet_bulb", "psychrometric_wet_bulb", "surface_temperature", "floor_temperature",
    "outdoor_air_temperature", "outdoor_relative_humidity", "wind_speed", "solar_irradiance",
    "barometric_pressure", "shading_position", "fan_state", "occupancy",
]
Side = Literal["up", "down", "left", "right", "front", "back", "ceiling", "floor", "window",
               "room"]
Height = Literal["ankle", "abdomen", "head"]


# ----------------------------------------------------------------------------- payloads

class NumberFormat(Strict):
    """The payload is a plain number (ASCII), for example ``23.4``."""

    type: Literal["number"] = "number"


class JsonFormat(Strict):
    """A JSON object; ``value_path`` (dots, list indices as numbers) locates the value.

    ``time_path`` optionally locates a timestamp: epoch seconds or milliseconds (told apart
    by size) or ISO 8601. ``unit_path`` optionally locates a unit string.
    """

    type: Literal["json"]
    value_path: str = "value"
    time_path: str | None = None
    unit_path: str | None = None


class SenmlFormat(Strict):
    """SenML JSON (RFC 8428). ``name`` selects the record whose resolved name (base name +
    name) it is; without a name the pack must hold exactly one record."""

    type: Literal["senml"]
    name: str | None = None


class StateFormat(Strict):
    """Equipment and occupancy states: booleans (true/false, on/off, 1/0, yes/no) or named
    states mapped to numbers by ``states`` (for shading: % lowered)."""

    type: Literal["state"]
    value_path: str | None = None
    states: dict[str, float] = Field(default_factory=dict)


PayloadFormat = Annotated[NumberFormat | JsonFormat | SenmlFormat | StateFormat,
                          Field(discriminator="type")]


def _format_shorthand(value: object) -> object:
    if isinstance(value, str):
        return {"type": value}
    return value


# ----------------------------------------------------------------------------- points

class PointBase(Strict):
    """What a topic carries: quantity, unit, payload format, expected interval and tags."""

    quantity: Quantity
    unit: str | None = None
    format: PayloadFormat = Field(default_factory=NumberFormat)
    interval_s: float = Field(60.0, gt=0, le=86_400)
    side: Side | None = None
    height: Height | None = None
    surface: str | None = None
    sensor: str | None = None
    globe_diameter_m: float | None = Field(None, ge=0.02, le=0.3)
    globe_emissivity: float | None = Field(None, ge=0.5, le=1.0)
    offset: float = Field(0.0, ge=-1e6, le=1e6)
    """Calibration: added after the reading is converted to the canonical unit (and scaled),
    for example ``-1.5`` for a sensor that reads 1.5 K high."""
    scale: float = Field(1.0, gt=0.0, le=1e6)
    """Calibration: the canonical value is multiplied by this before ``offset`` is added."""
    plausible_min: float | None = None
    """Lowest believable value for this point, in the canonical unit (°C, %, m/s, W/m²,
    Pa); narrows the physical range of the quantity. Values below are refused as implausible."""
    plausible_max: float | None = None
    """Highest believable value for this point, in the canonical unit."""
    max_change_per_min: float | None = Field(None, gt=0.0)
    """Largest believable change per minute (canonical unit) between accepted readings; a
    larger jump is refused as implausible (a spike), and later readings are compared with
    the last accepted one."""
    stuck_after_s: float | None = Field(None, ge=60.0, le=30 * 86_400)
    """A fresh point whose value has not changed for this long counts as stuck (sensor
    health); default 3 hours."""
    height_m: float | None = Field(None, gt=0.01, le=200.0)
    """Height of an air_speed or wind_speed sensor above ground (m); UTCI converts the speed
    to 10 m from it (default 1.1 m for a space's air_speed, 10 m for the site's wind_speed)."""

    _shorthand = field_validator("format", mode="before")(_format_shorthand)

    @field_validator("unit")
    @classmethod
    def _unit(cls, v: str | None, info: ValidationInfo) -> str | None:
        quantity = info.data.get("quantity")
        if v is not None and quantity is not None:
            try:
                converter(QUANTITIES[quantity].kind, v)
            except UnitError as exc:
                raise ValueError(str(exc)) from None
        return v

    @model_validator(mode="after")
    def _check(self) -> PointBase:
        if self.quantity in SIDED_QUANTITIES and self.side is None and "{side}" not in getattr(
                self, "topic", ""):
            raise ValueError(f"a {self.quantity} point needs the side it faces "
                             f"(side: one of {', '.join(radiation.SIDES)}, or window/room/"
                             "ceiling/floor)")
        if self.quantity not in SIDED_QUANTITIES and self.side is not None:
            raise ValueError(f"side applies only to {' and '.join(sorted(SIDED_QUANTITIES))}")
        if self.height_m is not None and self.quantity not in ("air_speed", "wind_speed"):
            raise ValueError("height_m applies only to air_speed and wind_speed")
        if (self.globe_diameter_m is not None or self.globe_emissivity is not None) and \
                self.quantity != "globe_temperature":
            raise ValueError("globe_diameter_m and globe_emissivity apply only to "
                             "globe_temperature")
        if isinstance(self.format, StateFormat) and self.quantity not in (
                "shading_position", "fan_state", "occupancy"):
            raise ValueError("format state applies to shading_position, fan_state, occupancy")
        q = QUANTITIES[self.quantity]
        if isinstance(self.format, StateFormat) or self.quantity in STATE_QUANTITIES:
            tuned = [k for k in ("offset", "scale", "max_change_per_min", "stuck_after_s")
                     if k in self.model_fields_set]
            if tuned:
                raise ValueError(f"{', '.join(tuned)} apply to measured quantities, not to the "
                                 f"state {self.quantity}")
        low = q.low if self.plausible_min is None else self.plausible_min
        high = q.high if self.plausible_max is None else self.plausible_max
        if low >= high:
            raise ValueError(f"plausible_min ({low:g}) must be below plausible_max ({high:g}) "
                             f"in {q.unit}")
        for name, value in (("plausible_min", self.plausible_min),
                            ("plausible_max", self.plausible_max)):
            if value is not None and not q.low <= value <= q.high:
                raise ValueError(f"{name} {value:g} is outside the physical range of "
                                 f"{self.quantity} ({q.low:g}..{q.high:g} {q.unit})")
        return self

    @property
    def canonical_unit(self) -> str:
        return QUANTITIES[self.quantity].unit


class PointConfig(PointBase):
    """One explicit topic for one space (or for the site's outdoor points)."""

    topic: str

    @field_validator("topic")
    @classmethod
    def _topic(cls, v: str) -> str:
        if not v or any(c in v for c in "+#\0") or "{" in v:
            raise ValueError("an explicit topic has no wildcards (+, #) or placeholders; "
                             "use templates for patterns")
        return v


class TemplateConfig(PointBase):
    """A topic template binding one quantity for many spaces.

    Placeholders: ``{space}`` (required, the space id), and optionally ``{side}`` (the side
    a radiant sensor faces) and ``{sensor}`` (tells redundant sensors apart). ``spaces``
    restricts the template to some spaces; by default it applies to every space.
    """

    topic: str
    spaces: list[str] | None = None

    @field_validator("topic")
    @classmethod
    def _topic(cls, v: str) -> str:
        try:
            t = TopicTemplate.parse(v)
        except TemplateError as exc:
            raise ValueError(str(exc)) from None
        if "space" not in t.placeholders:
            raise ValueError("a template needs a {space} placeholder")
        return v
