"""Configuration models, all in one place: the site file, its spaces and points, and (in
:mod:`thermowarden.rules`) the rule packs, which are validated by models defined here too.

Load a site with :func:`load_site`. Every problem comes back as a :class:`ConfigIssue`
with the file, line and column, the offending value and what was expected; a misspelt key
gets the closest valid one suggested. Environment variables override any setting:
``THERMOWARDEN_BROKER__URL=mqtt://10.0.0.5:1883`` (``__`` separates levels). Secrets (the
broker password) come from the environment or a file, never from the site file itself.
"""

from __future__ import annotations

import csv
import datetime as dt
import difflib
import json
import os
import pathlib
import re
import zoneinfo
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Annotated, Any, Literal

import yaml
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    SecretStr,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

from thermowarden.core import heat_stress, radiation
from thermowarden.core.quantities import QUANTITIES, STATE_QUANTITIES
from thermowarden.core.topics import TemplateError, TopicTemplate
from thermowarden.core.units import UnitError, converter
from thermowarden.yaml_positions import (
    Path,
    Position,
    SourceMap,
    YamlSourceError,
    load_yaml_with_positions,
)

ENV_PREFIX = "THERMOWARDEN_"
SLUG = r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$"
OUTDOOR_QUANTITIES = frozenset({"outdoor_air_temperature", "outdoor_relative_humidity",
                                "solar_irradiance", "wind_speed", "barometric_pressure"})
SIDED_QUANTITIES = frozenset({"plane_radiant_temperature", "radiant_flux"})
WEEKDAYS = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")

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
WorkClass = Literal["rest", "low", "moderate", "high", "very_high"]
ClothingEnsemble = Literal["work_clothes", "cloth_coveralls", "double_layer_woven",
                           "sms_polypropylene_coveralls", "polyolefin_coveralls",
                           "limited_use_vapour_barrier_coveralls"]


class Strict(BaseModel):
    """Base of every configuration model: unknown keys are errors, values are frozen."""

    model_config = ConfigDict(extra="forbid", frozen=True)


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


# ----------------------------------------------------------------------------- spaces

class PeopleConfig(Strict):
    """The people in a space: metabolic rate, clothing, acclimatisation, posture."""

    met: float | None = Field(None, ge=0.7, le=8.0)
    work_class: WorkClass | None = None
    clo: float | None = Field(None, ge=0.0, le=3.0)
    clothing_model: Literal["fixed", "outdoor"] = "fixed"
    acclimatised: bool = False
    clothing: ClothingEnsemble | None = None
    clothing_adjustment_k: float | None = Field(None, ge=0.0, le=20.0)
    posture: Literal["standing", "seated", "crouching"] = "standing"

    @field_validator("posture", mode="before")
    @classmethod
    def _posture(cls, v: object) -> object:
        """Accept the common spellings (sitting, sit, stand, crouch, squatting...)."""
        return heat_stress.canonical_posture(v) or v

    @model_validator(mode="after")
    def _check(self) -> PeopleConfig:
        if self.met is not None and self.work_class is not None:
            raise ValueError("give either met or work_class, not both")
        if self.clothing is not None and self.clothing_adjustment_k is not None:
            raise ValueError("give either clothing or clothing_adjustment_k, not both")
        if self.clothing_model == "fixed" and self.clo is None:
            raise ValueError("clothing_model fixed needs clo (or use clothing_model: outdoor)")
        return self

    @property
    def met_value(self) -> float:
        """met, from met or work_class; NaN when neither is given (no heat-stress reference
        value is then computed; the comfort indices assume 1.2 met and say so)."""
        if self.met is not None:
            return self.met
        if self.work_class is not None:
            return heat_stress.WORK_CLASSES_W_M2[self.work_class] / 58.15
        return float("nan")

    @property
    def adjustment_k(self) -> float:
        if self.clothing is not None:
            return heat_stress.CLOTHING_ADJUSTMENTS_K[self.clothing]
        return self.clothing_adjustment_k or 0.0


_HOURS = re.compile(r"^([01]\d|2[0-3]):([0-5]\d)-([01]\d|2[0-4]):([0-5]\d)$")


class OccupancyConfig(Strict):
    """When a space is occupied: weekly hours in the site's time zone, holidays, and/or an
    occupancy point (which wins while it is fresh)."""

    hours: dict[Literal["mon", "tue", "wed", "thu", "fri", "sat", "sun"], list[str]] = Field(
        default_factory=dict)
    holidays: list[dt.date] = Field(default_factory=list)
    always: bool = False

    @field_validator("hours")
    @classmethod
    def _hours(cls, v: dict[str, list[str]]) -> dict[str, list[str]]:
        for day, spans in v.items():
            for span in spans:
                m = _HOURS.match(span)
                if not m:
                    raise ValueError(f"{day}: {span!r} is not HH:MM-HH:MM")
                if (m.group(3), m.group(4)) <= (m.group(1), m.group(2)):
                    raise ValueError(f"{day}: {span!r} ends before it starts")
        return v


class ExternalIds(Strict):
    """Identifiers of the space in other systems, echoed in everything published about it."""

    brick_class: str | None = None
    brick_uri: str | None = None
    haystack_id: str | None = None
    haystack_tags: list[str] = Field(default_factory=list)


ParameterValue = float | bool | str


MRT_ASSUMPTION = re.compile(r"^air(?:\s*([+-])\s*(\d+(?:\.\d+)?))?$")


class Assumptions(Strict):
    """What a space assumes for quantities it does not measure (a zone with only a
    thermostat reports air temperature and humidity). An assumption fills in only while no
    fresh reading of the quantity exists, is used by every index, and is shown beside the
    numbers in conditions and advisories. Clothing and activity are ``people``."""

    air_speed: float | None = Field(None, ge=0.0, le=1.0)
    """m/s; 0.1 is still air (ASHRAE 55's still-air speed)."""
    mean_radiant_temperature: str | None = None
    """``air`` (equal to the air temperature: no warm or cold surfaces) or ``air+2`` /
    ``air-1.5`` (offset in K from it)."""

    @field_validator("mean_radiant_temperature")
    @classmethod
    def _mrt(cls, v: str | None) -> str | None:
        if v is not None and not MRT_ASSUMPTION.match(v.strip()):
            raise ValueError("expected 'air' or 'air+K' / 'air-K' (an offset in kelvin), "
                             f"got {v!r}")
        return v

    @property
    def mrt_offset_k(self) -> float | None:
        """The assumed mean radiant temperature minus the air temperature (K), or None."""
        if self.mean_radiant_temperature is None:
            return None
        m = MRT_ASSUMPTION.match(self.mean_radiant_temperature.strip())
        assert m is not None
        if m.group(1) is None:
            return 0.0
        return float(m.group(2)) * (1.0 if m.group(1) == "+" else -1.0)

    def notes(self) -> dict[str, str]:
        """quantity -> how it is shown ("assumed: still air (0.1 m/s)")."""
        out: dict[str, str] = {}
        if self.air_speed is not None:
            still = "still air, " if self.air_speed <= 0.1 else ""
            out["air_speed"] = f"assumed: {still}{self.air_speed:g} m/s"
        off = self.mrt_offset_k
        if off is not None:
            out["mean_radiant_temperature"] = (
                "assumed: equal to the air temperature" if off == 0.0 else
                f"assumed: air temperature {off:+g} K")
        return out


class SpaceConfig(Strict):
    """One space: what it is, who is in it, which rules apply, and its points."""

    id: str = Field(pattern=SLUG)
    name: str | None = None
    kind: Literal["indoor", "outdoor"] = "indoor"
    hot_work: bool = False
    ventilation: Literal["mechanical", "natural"] = "mechanical"
    people: PeopleConfig | None = None
    occupancy: OccupancyConfig | None = None
    rule_packs: list[str] | None = None
    parameters: dict[str, ParameterValue] = Field(default_factory=dict)
    external: ExternalIds | None = None
    combine: Literal["mean", "height_weighted"] = "mean"
    solar_load: bool | None = None
    phs_edition: Literal["2023", "2004"] = "2023"
    assume: Assumptions | None = None
    points: list[PointConfig] = Field(default_factory=list)

    @field_validator("points")
    @classmethod
    def _no_outdoor(cls, v: list[PointConfig]) -> list[PointConfig]:
        for p in v:
            if p.quantity in OUTDOOR_QUANTITIES:
                raise ValueError(f"{p.quantity} is a site-wide outdoor point: put it under "
                                 "site.outdoor_points")
        return v


class SpaceDefaults(Strict):
    """Settings every space gets unless it says otherwise."""

    people: PeopleConfig = Field(default_factory=lambda: PeopleConfig(clo=0.7))
    occupancy: OccupancyConfig = Field(default_factory=lambda: OccupancyConfig(always=True))
    rule_packs: list[str] = Field(default_factory=list)
    parameters: dict[str, ParameterValue] = Field(default_factory=dict)
    assume: Assumptions | None = None


# ----------------------------------------------------------------------------- site

class SiteInfo(Strict):
    """The site: identifier, time zone, altitude or pressure, shared outdoor points."""

    id: str = Field(pattern=SLUG)
    name: str | None = None
    timezone: str = "UTC"
    altitude_m: float | None = Field(None, ge=-500, le=9000)
    barometric_pressure_pa: float | None = Field(None, ge=30_000, le=110_000)
    latitude: float | None = Field(None, ge=-90, le=90)
    """Degrees, north positive: with ``longitude``, the sun's position for the natural
    wet-bulb estimate outdoors from solar_irradiance where a space has no globe."""
    longitude: float | None = Field(None, ge=-180, le=180)
    """Degrees, east positive (west of Greenwich negative)."""
    outdoor_points: list[PointConfig] = Field(default_factory=list)
    outdoor_daily_means: list[Annotated[float, Field(ge=-60, le=60)]] = Field(
        default_factory=list, max_length=30)
    """Recent daily mean outdoor temperatures (°C, yesterday first) to start the running
    mean with until the service has measured seven days of its own."""

    @field_validator("timezone")
    @classmethod
    def _tz(cls, v: str) -> str:
        try:
            zoneinfo.ZoneInfo(v)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError):
            raise ValueError(f"unknown time zone {v!r} (expected an IANA name such as "
                             "Europe/Berlin)") from None
        return v

    @model_validator(mode="after")
    def _check(self) -> SiteInfo:
        if self.altitude_m is not None and self.barometric_pressure_pa is not None:
            raise ValueError("give either altitude_m or barometric_pressure_pa, not both")
        if (self.latitude is None) != (self.longitude is None):
            raise ValueError("give latitude and longitude together")
        for p in self.outdoor_points:
            if p.quantity not in OUTDOOR_QUANTITIES:
                allowed = ", ".join(sorted(OUTDOOR_QUANTITIES))
                raise ValueError(f"outdoor_points carry only {allowed}; {p.quantity} belongs "
                                 "to a space")
        return self


class TlsConfig(Strict):
    ca_file: str | None = None
    cert_file: str | None = None
    key_file: str | None = None

    @model_validator(mode="after")
    def _pair(self) -> TlsConfig:
        if (self.cert_file is None) != (self.key_file is None):
            raise ValueError("cert_file and key_file go together")
        return self


class BrokerConfig(Strict):
    """The MQTT broker. The password comes from THERMOWARDEN_BROKER__PASSWORD or
    ``password_file``, never from the site file."""

    url: str = "mqtt://127.0.0.1:1883"
    client_id: str | None = None
    protocol: Literal["5", "3.1.1"] = "5"
    keepalive_s: int = Field(30, ge=5, le=3600)
    username: str | None = None
    password: SecretStr | None = None
    password_file: str | None = None
    tls: TlsConfig | None = None

    @field_validator("url")
    @classmethod
    def _url(cls, v: str) -> str:
        if not re.match(r"^(mqtt|mqtts)://[^/:\s]+(:\d{1,5})?/?$", v):
            raise ValueError(f"{v!r} is not mqtt://host[:port] or mqtts://host[:port]")
        return v

    @field_validator("protocol", mode="before")
    @classmethod
    def _proto(cls, v: object) -> object:
        return str(v) if isinstance(v, int | float) else v


class OutputConfig(Strict):
    prefix: str = "thermowarden"

    @field_validator("prefix")
    @classmethod
    def _prefix(cls, v: str) -> str:
        if not v or any(c in v for c in "+#\0") or v.startswith("/") or v.endswith("/"):
            raise ValueError("the prefix is a topic without wildcards or leading/trailing /")
        return v


class IngestConfig(Strict):
    """Limits applied to every message."""

    max_payload_bytes: int = Field(4096, ge=16, le=1_048_576)
    max_age_s: float = Field(900.0, gt=0)
    future_skew_s: float = Field(30.0, ge=0)
    stale_after_intervals: float = Field(3.0, ge=1.0)
    air_speed_window_s: float = Field(180.0, gt=0)
    wbgt_window_s: float = Field(3600.0, ge=600, le=3600)
    disagreement_k: float = Field(2.0, gt=0)
    silence_limit_s: float | None = Field(600.0, gt=0)
    """/readyz answers 503 when no sensor message arrived for this long (null: never)."""


class EvaluationConfig(Strict):
    """How often spaces are evaluated, and the notification-flood guard (ISA-18.2 practice:
    about 10 notifications in 10 minutes per audience; urgent ones always go out)."""

    tick_s: float = Field(10.0, ge=0.5, le=3600)
    flood_limit: int = Field(10, ge=1, le=100_000)
    flood_window_s: float = Field(600.0, ge=10, le=86_400)


class RetentionConfig(Strict):
    """How long the store keeps the event history and the report samples (the 5-minute
    conditions behind reports and ``thermowarden export``), in days."""

    events_days: float = Field(90.0, ge=1, le=3660)
    samples_days: float = Field(90.0, ge=1, le=3660)


# ----------------------------------------------------------------------------- delivery

DeliveredEvent = Literal["raised", "escalated", "deescalated", "renotified", "acknowledged",
                         "shelved", "unshelved", "cleared", "summary"]


class WebhookConfig(Strict):
    """POST each event as JSON to ``url``, signed with HMAC-SHA256 over ``<timestamp>.<body>``
    with a shared secret (from the environment, e.g.
    THERMOWARDEN_DELIVERY__AUDIENCES__SAFETY__WEBHOOK__SECRET, or ``secret_file``)."""

    url: str
    secret: SecretStr | None = None
    secret_file: str | None = None
    timeout_s: float = Field(10.0, gt=0, le=300)

    @field_validator("url")
    @classmethod
    def _url(cls, v: str) -> str:
        if not re.match(r"^https?://[^/\s]+(/\S*)?$", v):
            raise ValueError(f"{v!r} is not an http:// or https:// URL")
        return v

    @model_validator(mode="after")
    def _secret(self) -> WebhookConfig:
        if self.secret is None and self.secret_file is None:
            raise ValueError("a webhook needs a shared secret: secret_file, or the environment "
                             "variable ..._WEBHOOK__SECRET")
        return self


class SmtpConfig(Strict):
    """The SMTP relay. ``tls``: ``starttls`` (default), ``ssl`` (implicit TLS) or ``none``
    (a relay on the same host only). The password comes from the environment or
    ``password_file``, never from the site file."""

    host: str
    port: int = Field(587, ge=1, le=65535)
    tls: Literal["starttls", "ssl", "none"] = "starttls"
    username: str | None = None
    password: SecretStr | None = None
    password_file: str | None = None
    timeout_s: float = Field(30.0, gt=0, le=300)


class EmailConfig(Strict):
    """Send each event (or digest) as a plain-text e-mail through an SMTP relay."""

    smtp: SmtpConfig
    sender: str = Field(alias="from", pattern=r"^[^@\s]+@[^@\s]+$")
    to: list[Annotated[str, Field(pattern=r"^[^@\s]+@[^@\s]+$")]] = Field(min_length=1)
    subject_prefix: str = "[thermowarden]"

    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


def _default_events() -> list[DeliveredEvent]:
    return ["raised", "escalated", "renotified", "cleared", "summary"]


_QUIET = re.compile(r"^([01]\d|2[0-3]):([0-5]\d)-([01]\d|2[0-3]):([0-5]\d)$")


class AudienceDelivery(Strict):
    """How one audience is reached besides MQTT. ``quiet_hours`` (site time zone,
    ``HH:MM-HH:MM``, may span midnight): events other than urgent ones wait and go out as one
    digest when the quiet hours end; urgent ones always go out at once. Low-priority events
    are collected into one digest every ``low_priority_digest_s`` (0: sent one by one)."""

    webhook: WebhookConfig | None = None
    email: EmailConfig | None = None
    events: list[DeliveredEvent] = Field(default_factory=_default_events)
    quiet_hours: str | None = None
    low_priority_digest_s: float = Field(3600.0, ge=0, le=7 * 86_400)

    @field_validator("quiet_hours")
    @classmethod
    def _quiet(cls, v: str | None) -> str | None:
        if v is not None:
            m = _QUIET.match(v)
            if not m:
                raise ValueError(f"{v!r} is not HH:MM-HH:MM (site time zone)")
            if (m.group(1), m.group(2)) == (m.group(3), m.group(4)):
                raise ValueError(f"{v!r} starts and ends at the same time")
        return v

    @model_validator(mode="after")
    def _some_channel(self) -> AudienceDelivery:
        if self.webhook is None and self.email is None:
            raise ValueError("give a webhook, an email, or both")
        return self


class RetryConfig(Strict):
    """Retries of a failed delivery: exponential backoff from ``first_s`` doubling up to
    ``max_s`` (with ±20 % jitter), at most ``max_attempts`` attempts in all."""

    first_s: float = Field(5.0, ge=0.01, le=3600)
    max_s: float = Field(900.0, ge=0.01, le=86_400)
    max_attempts: int = Field(12, ge=1, le=1000)


class DeliveryConfig(Strict):
    """Delivery of events to people by webhook and e-mail, per audience (optional)."""

    audiences: dict[Literal["facilities", "safety", "integrator"], AudienceDelivery] = Field(
        default_factory=dict)
    retry: RetryConfig = Field(default_factory=RetryConfig)
    queue_size: int = Field(10_000, ge=10, le=1_000_000)


class OutboxConfig(Strict):
    """Events kept for the broker until it acknowledges them: at most ``max_events``, none
    older than ``max_age_s``; what expires undelivered is counted and reported."""

    max_events: int = Field(10_000, ge=10, le=10_000_000)
    max_age_s: float = Field(86_400.0, ge=60, le=30 * 86_400)


class CommandsConfig(Strict):
    """Inbound commands: a body size limit, and the MQTT 5 user property that carries the
    sender's authenticated identity (set by a trusted gateway or broker plugin; a client
    cannot be trusted to set it itself)."""

    max_body_bytes: int = Field(2048, ge=256, le=65_536)
    identity_property: str | None = None
class WebConfig(Strict):
    """The web page and HTTP API (off unless enabled; loopback unless told otherwise).
    ``users_file`` (relative to the site file) lists who may sign in and act."""

    enabled: bool = False
    host: str = "127.0.0.1"
    port: int = Field(9480, ge=1, le=65535)
    users_file: str | None = None
    session_lifetime_s: float = Field(8 * 3600.0, ge=60, le=30 * 86_400)


class SiteConfig(Strict):
    """The whole site file."""

    site: SiteInfo
    broker: BrokerConfig = Field(default_factory=BrokerConfig)
    output: OutputConfig = Field(default_factory=OutputConfig)
    ingest: IngestConfig = Field(default_factory=IngestConfig)
    evaluation: EvaluationConfig = Field(default_factory=EvaluationConfig)
    outbox: OutboxConfig = Field(default_factory=OutboxConfig)
    commands: CommandsConfig = Field(default_factory=CommandsConfig)
    defaults: SpaceDefaults = Field(default_factory=SpaceDefaults)
    templates: list[TemplateConfig] = Field(default_factory=list)
    spaces: list[SpaceConfig] = Field(default_factory=list)
    spaces_csv: str | None = None
    rule_dirs: list[str] = Field(default_factory=list)
    retention: RetentionConfig = Field(default_factory=RetentionConfig)
    delivery: DeliveryConfig = Field(default_factory=DeliveryConfig)
    web: WebConfig = Field(default_factory=WebConfig)

    @model_validator(mode="after")
    def _check(self) -> SiteConfig:
        seen: set[str] = set()
        for space in self.spaces:
            if space.id in seen:
                raise ValueError(f"space id {space.id!r} appears twice")
            seen.add(space.id)
        for t in self.templates:
            for s in t.spaces or []:
                if s not in seen:
                    raise ValueError(f"template {t.topic!r} names unknown space {s!r}")
        return self

    def people(self, space: SpaceConfig) -> PeopleConfig:
        return space.people or self.defaults.people

    def occupancy(self, space: SpaceConfig) -> OccupancyConfig:
        return space.occupancy or self.defaults.occupancy

    def assumptions(self, space: SpaceConfig) -> Assumptions:
        """The space's assumptions, each one falling back to ``defaults.assume``."""
        base = self.defaults.assume or Assumptions()
        own = space.assume or Assumptions()
        return Assumptions(
            air_speed=own.air_speed if own.air_speed is not None else base.air_speed,
            mean_radiant_temperature=(own.mean_radiant_temperature
                                      if own.mean_radiant_temperature is not None
                                      else base.mean_radiant_temperature))

    def rule_packs(self, space: SpaceConfig) -> list[str]:
        return space.rule_packs if space.rule_packs is not None else self.defaults.rule_packs

    def parameters(self, space: SpaceConfig) -> dict[str, ParameterValue]:
        return {**self.defaults.parameters, **space.parameters}


# ----------------------------------------------------------------------------- loading

@dataclass(frozen=True)
class ConfigIssue:
    """One problem in a configuration: where, and what is wrong."""

    position: Position | None
    message: str

    def __str__(self) -> str:
        return f"{self.position}: {self.message}" if self.position else self.message


class ConfigError(Exception):
    """A configuration was refused; ``issues`` lists every problem found."""

    def __init__(self, issues: list[ConfigIssue]) -> None:
        super().__init__("\n".join(str(i) for i in issues))
        self.issues = issues


def _all_field_names() -> list[str]:
    names: set[str] = set()
    stack: list[type[BaseModel]] = [SiteConfig]
    seen: set[type[BaseModel]] = set()
    while stack:
        model = stack.pop()
        if model in seen:
            continue
        seen.add(model)
        names.update(model.model_fields)
        for sub in Strict.__subclasses__() + PointBase.__subclasses__():
            stack.append(sub)
    return sorted(names)


def _suggest(word: str) -> str:
    close = difflib.get_close_matches(word, _all_field_names(), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""


def _clip(value: object) -> str:
    text = json.dumps(value, default=str, ensure_ascii=False)
    return text if len(text) <= 60 else text[:57] + "..."


def _issues_from_validation(exc: ValidationError, smap: SourceMap,
                            env_paths: dict[Path, str]) -> list[ConfigIssue]:
    issues = []
    for err in exc.errors():
        # drop the union tags pydantic inserts for the discriminated payload formats
        loc: Path = tuple(p for p in err["loc"] if p not in ("number", "json", "senml",
                                                              "state"))
        where = ".".join(str(p) for p in loc) or "(top level)"
        if err["type"] == "extra_forbidden":
            key = str(loc[-1])
            pos = smap.find(loc, key=True)
            msg = f"{where}: unknown key {key!r}{_suggest(key)}"
        else:
            pos = smap.find(loc)
            text = str(err["msg"]).removeprefix("Value error, ")
            value = err.get("input")
            shown = "" if isinstance(value, dict | list) or err["type"] == "missing" else \
                f" (got {_clip(value)})"
            msg = f"{where}: {text}{shown}"
        env = next((v for k, v in env_paths.items() if loc[:len(k)] == k), None)
        if env is not None:
            msg += f" [set by environment variable {env}]"
        issues.append(ConfigIssue(pos, msg))
    return issues


def _set_path(data: dict[str, Any], path: list[str], value: Any) -> None:
    node = data
    for part in path[:-1]:
        nxt = node.get(part)
        if not isinstance(nxt, dict):
            nxt = {}
            node[part] = nxt
        node = nxt
    node[path[-1]] = value


def _apply_environment(data: dict[str, Any], environ: Mapping[str, str],
                       issues: list[ConfigIssue] | None = None) -> dict[Path, str]:
    """Override settings from THERMOWARDEN_SECTION__KEY variables, or THERMOWARDEN_KEY for a
    top-level key (``rule_dirs``, ``spaces_csv``, a whole section); values parse as YAML.

    A single-level name that is no top-level key is left alone (it may belong to something
    else), unless it is close to one: then it is refused with the likely name.
    """
    applied: dict[Path, str] = {}
    top = sorted(SiteConfig.model_fields)
    for name, raw in sorted(environ.items()):
        if not name.startswith(ENV_PREFIX):
            continue
        path = [p.lower() for p in name[len(ENV_PREFIX):].split("__") if p]
        if not path:
            continue
        if "__" not in name and path[0] not in top:
            close = difflib.get_close_matches(path[0], top, n=1, cutoff=0.8)
            if close and issues is not None:
                issues.append(ConfigIssue(None, f"environment variable {name}: no top-level "
                                                f"setting {path[0]!r}; did you mean "
                                                f"{ENV_PREFIX}{close[0].upper()}?"))
            continue
        try:
            value = yaml.safe_load(raw) if path[-1] != "password" else raw
        except yaml.YAMLError:
            value = raw
        _set_path(data, path, value)
        applied[tuple(path)] = name
    return applied


CSV_COLUMNS = ("id", "name", "kind", "hot_work", "ventilation", "met", "work_class", "clo",
               "acclimatised", "clothing", "posture", "rule_packs", "brick_class", "brick_uri",
               "haystack_id", "haystack_tags", "phs_edition")


def _spaces_from_csv(path: pathlib.Path, shown: str) -> tuple[list[dict[str, Any]], SourceMap,
                                                               list[ConfigIssue]]:
    """Spaces listed one per row. People columns (met, work_class, clo, acclimatised,
    clothing, posture) build the space's people; list columns use ``;``."""
    spaces: list[dict[str, Any]] = []
    smap = SourceMap()
    issues: list[ConfigIssue] = []
    with open(path, encoding="utf-8", newline="") as fh:
        reader = csv.DictReader(fh)
        header = reader.fieldnames or []
        for col_no, col in enumerate(header, start=1):
            if col not in CSV_COLUMNS:
                close = difflib.get_close_matches(col, CSV_COLUMNS, n=1)
                hint = f"; did you mean {close[0]!r}?" if close else ""
                issues.append(ConfigIssue(Position(shown, 1, col_no),
                                          f"unknown column {col!r}{hint}"))
        if "id" not in header:
            issues.append(ConfigIssue(Position(shown, 1, 1), "the table needs an id column"))
        if issues:
            return [], smap, issues
        for i, row in enumerate(reader):
            line = reader.line_num
            space: dict[str, Any] = {}
            people: dict[str, Any] = {}
            external: dict[str, Any] = {}
            for col_no, col in enumerate(header, start=1):
                raw = (row.get(col) or "").strip()
                if raw == "":
                    continue
                pos = Position(shown, line, col_no)
                key: Path
                if col in ("met", "work_class", "clo", "acclimatised", "clothing", "posture"):
                    people[col] = yaml.safe_load(raw) if col in ("met", "clo", "acclimatised") \
                        else raw
                    key = ("people", col)
                elif col in ("brick_class", "brick_uri", "haystack_id"):
                    external[col] = raw
                    key = ("external", col)
                elif col == "haystack_tags":
                    external[col] = [t.strip() for t in raw.split(";") if t.strip()]
                    key = ("external", col)
                elif col == "rule_packs":
                    space[col] = [t.strip() for t in raw.split(";") if t.strip()]
                    key = (col,)
                elif col == "hot_work":
                    space[col] = yaml.safe_load(raw)
                    key = (col,)
                else:
                    space[col] = raw
                    key = (col,)
                smap.values[(i,) + key] = pos
                smap.keys[(i,) + key] = pos
            if people:
                if "clo" not in people:
                    people.setdefault("clothing_model", "outdoor")
                space["people"] = people
            if external:
                space["external"] = external
            smap.values[(i,)] = Position(shown, line, 1)
            spaces.append(space)
    return spaces, smap, issues


def _read_yaml_file(path: str | os.PathLike[str]) -> tuple[Any, SourceMap]:
    """Read and parse a YAML file, keeping positions; problems become :class:`ConfigError`."""
    shown = str(path)
    try:
        text = pathlib.Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise ConfigError([ConfigIssue(None, f"{shown}: cannot read: {exc.strerror}")]) from None
    try:
        return load_yaml_with_positions(text, shown)
    except YamlSourceError as exc:
        raise ConfigError([ConfigIssue(exc.position, exc.message)]) from None


def _secrets_in_file(data: dict[str, Any], smap: SourceMap) -> list[ConfigIssue]:
    """Delivery secrets written into the site file are refused (like the broker password)."""
    issues: list[ConfigIssue] = []
    delivery = data.get("delivery")
    audiences = delivery.get("audiences") if isinstance(delivery, dict) else None
    if not isinstance(audiences, dict):
        return issues
    for name, aud in audiences.items():
        if not isinstance(aud, dict):
            continue
        for path in (("webhook", "secret"), ("email", "smtp", "password")):
            node: Any = aud
            for part in path[:-1]:
                node = node.get(part) if isinstance(node, dict) else None
            if isinstance(node, dict) and path[-1] in node:
                where = ("delivery", "audiences", name) + path
                env = ENV_PREFIX + "__".join(str(p).upper() for p in where)
                issues.append(ConfigIssue(smap.find(where, key=True),
                                          f"{'.'.join(map(str, where))}: secrets do not belong "
                                          f"in the site file; set {env} or "
                                          f"{path[-1]}_file"))
    return issues


def load_site(path: str | os.PathLike[str], environ: Mapping[str, str] | None = None
              ) -> SiteConfig:
    """Load and validate a site file (and the CSV it refers to).

    Raises :class:`ConfigError` listing every problem with its file, line and column.
    ``environ`` defaults to the process environment (the shell passes it; tests pass
    their own).
    """
    environ = os.environ if environ is None else environ
    p = pathlib.Path(path)
    shown = str(path)
    data, smap = _read_yaml_file(path)
    if not isinstance(data, dict):
        raise ConfigError([ConfigIssue(Position(shown, 1, 1), "the site file must be a "
                                       "mapping with at least a 'site' section")])
    issues: list[ConfigIssue] = []
    broker = data.get("broker")
    if isinstance(broker, dict) and "password" in broker:
        issues.append(ConfigIssue(smap.find(("broker", "password"), key=True),
                                  "broker.password: secrets do not belong in the site file; "
                                  "set THERMOWARDEN_BROKER__PASSWORD or broker.password_file"))
    issues.extend(_secrets_in_file(data, smap))
    env_paths = _apply_environment(data, environ, issues)
    csv_name = data.get("spaces_csv")
    if isinstance(csv_name, str):
        csv_path = (p.parent / csv_name) if not os.path.isabs(csv_name) else pathlib.Path(csv_name)
        try:
            rows, csv_map, csv_issues = _spaces_from_csv(csv_path, str(csv_path))
        except OSError as exc:
            issues.append(ConfigIssue(smap.find(("spaces_csv",)),
                                      f"spaces_csv: cannot read {csv_path}: {exc.strerror}"))
            rows, csv_map, csv_issues = [], SourceMap(), []
        issues.extend(csv_issues)
        spaces = data.get("spaces")
        if spaces is None:
            spaces = []
        if isinstance(spaces, list):
            offset = len(spaces)
            data["spaces"] = spaces + rows
            smap.update(csv_map, ("spaces",))
            # re-key CSV rows after the YAML spaces
            shifted = SourceMap()
            for k, v in csv_map.values.items():
                shifted.values[("spaces", offset + int(k[0])) + k[1:]] = v
            for k, v in csv_map.keys.items():
                shifted.keys[("spaces", offset + int(k[0])) + k[1:]] = v
            smap.update(shifted, ())
    try:
        config = SiteConfig.model_validate(data)
    except ValidationError as exc:
        issues.extend(_issues_from_validation(exc, smap, env_paths))
        raise ConfigError(issues) from None
    issues.extend(_rule_pack_name_issues(config, smap, p))
    if issues:
        raise ConfigError(issues)
    return config


def _rule_pack_name_issues(config: SiteConfig, smap: SourceMap, site_path: pathlib.Path
                           ) -> list[ConfigIssue]:
    """Every rule pack name that names no pack (in ``rule_dirs`` or built in), with its
    position and the closest existing name; ``defaults.rule_packs`` is checked even when
    every space names its own packs."""
    import importlib.resources

    dirs = [pathlib.Path(d) if os.path.isabs(d) else site_path.parent / d
            for d in config.rule_dirs]
    dirs.append(pathlib.Path(str(importlib.resources.files("thermowarden.rulepacks"))))
    available = sorted({f.stem for d in dirs if d.is_dir() for f in d.glob("*.yaml")})
    issues: list[ConfigIssue] = []

    def check(names: list[str], path: tuple[str | int, ...]) -> None:
        for k, name in enumerate(names):
            if name in available:
                continue
            close = difflib.get_close_matches(name, available, n=1)
            hint = (f"; did you mean {close[0]!r}?" if close
                    else f"; available: {', '.join(available)}")
            where = ".".join(str(x) for x in (*path, k))
            issues.append(ConfigIssue(smap.find((*path, k)),
                                      f"{where}: unknown rule pack {name!r}{hint}"))

    check(config.defaults.rule_packs, ("defaults", "rule_packs"))
    for i, space in enumerate(config.spaces):
        if space.rule_packs is not None:
            check(space.rule_packs, ("spaces", i, "rule_packs"))
    return issues


def read_password(broker: BrokerConfig) -> str | None:
    """The broker password: from the environment override, else from ``password_file``."""
    if broker.password is not None:
        return broker.password.get_secret_value()
    if broker.password_file:
        return pathlib.Path(broker.password_file).read_text(encoding="utf-8").strip()
    return None



# ----------------------------------------------------------------------------- rule packs

Audience = Literal["facilities", "safety", "integrator"]
Priority = Literal["low", "medium", "high", "urgent"]
PRIORITIES: tuple[str, ...] = ("low", "medium", "high", "urgent")
AUDIENCES: tuple[str, ...] = ("facilities", "safety", "integrator")
RULE_ID = r"^[a-z][a-z0-9_]{0,47}$"


class AppliesTo(Strict):
    """Which spaces a rule applies to (besides having its pack enabled)."""

    kind: Literal["indoor", "outdoor"] | None = None
    hot_work: bool | None = None
    ventilation: Literal["mechanical", "natural"] | None = None


class RuleLevel(Strict):
    """One priority level of an escalating rule: the priority while ``when`` holds, with
    its own title and advice (what "approaching" asks is not what "above the limit" asks)
    and its own renotification interval (None: the rule's)."""

    priority: Priority
    when: str
    title: str | None = None
    advice: str | None = None
    renotify_s: float | None = Field(None, ge=60, le=7 * 86_400)


class RuleMessages(Strict):
    """Message templates: ``{name}`` or ``{name:.1f}`` inserts a number (see the rule
    language in the README), ``{space_name}`` and ``{site_name}`` the names."""

    title: str
    advice: str
    rationale: str
    no_effect: str | None = None
    """Sent once when the advice was acted on (``acted_on``) but the condition has not
    cleared ``effect.wait_s`` later; it should name the numbers and what to check."""


class RuleEffect(Strict):
    """How to tell whether acting on the advice helped: ``quantity`` (a name) is recorded
    when the advice is acted on and at ``checks_s`` afterwards, and compared with
    ``predicted`` (a benefit name: the value expected after the action)."""

    quantity: str
    predicted: str | None = None
    wait_s: float = Field(1800.0, ge=60, le=86_400)
    """The advice helped when the advisory cleared within this time of being acted on."""
    checks_s: list[float] = Field(default_factory=lambda: [900.0, 1800.0, 3600.0])


class RuleNumber(Strict):
    """A number shown with an advisory, optionally with the threshold it is compared to."""

    name: str
    threshold: str | None = None


class RuleConfig(Strict):
    """One rule of a pack. See rules/*.yaml for the default packs."""

    id: str = Field(pattern=RULE_ID)
    title: str
    audience: Audience
    priority: Priority = "medium"
    applies_to: AppliesTo = Field(default_factory=AppliesTo)
    needs: list[str] = Field(default_factory=list)
    condition: str | None = None
    levels: list[RuleLevel] = Field(default_factory=list)
    clear: str | None = None
    on_delay_s: float = Field(0.0, ge=0, le=86_400)
    off_delay_s: float = Field(0.0, ge=0, le=86_400)
    renotify_s: float | None = Field(None, ge=60, le=7 * 86_400)
    occupied_only: bool = False
    hold_back: str | None = None
    acted_on: str | None = None
    parameters: dict[str, float | bool] = Field(default_factory=dict)
    numbers: list[RuleNumber] = Field(default_factory=list)
    benefit: dict[str, str] = Field(default_factory=dict)
    messages: RuleMessages
    max_shelve_s: float = Field(8 * 3600.0, ge=60, le=30 * 86_400)
    max_shelved_per_day_s: float | None = Field(None, ge=60, le=86_400)
    """Total time one advisory of this rule may spend shelved in any 24 hours, however
    often it is shelved (default: ``max_shelve_s``, at most a day)."""
    heat_stress_cautions: bool = False
    effect: RuleEffect | None = None

    @field_validator("numbers", mode="before")
    @classmethod
    def _numbers(cls, v: object) -> object:
        if isinstance(v, list):
            return [{"name": x} if isinstance(x, str) else x for x in v]
        return v

    @model_validator(mode="after")
    def _check(self) -> RuleConfig:
        if self.condition is None and not self.levels:
            raise ValueError("a rule needs a condition or levels")
        order = [PRIORITIES.index(level.priority) for level in self.levels]
        if order != sorted(order) or len(set(order)) != len(order):
            raise ValueError("levels go from the lowest priority to the highest, each once")
        return self


class RulePackConfig(Strict):
    """A rule pack file: a name, a description and its rules."""

    pack: str = Field(pattern=RULE_ID)
    description: str
    rules: list[RuleConfig]

    @model_validator(mode="after")
    def _unique(self) -> RulePackConfig:
        ids = [r.id for r in self.rules]
        dup = {i for i in ids if ids.count(i) > 1}
        if dup:
            raise ValueError(f"rule ids appear twice: {', '.join(sorted(dup))}")
        return self


def load_rule_pack_file(path: str | os.PathLike[str]) -> tuple[RulePackConfig, SourceMap]:
    """Load one rule pack file; raises :class:`ConfigError` with positions."""
    data, smap = _read_yaml_file(path)
    try:
        return RulePackConfig.model_validate(data), smap
    except ValidationError as exc:
        raise ConfigError(_issues_from_validation(exc, smap, {})) from None
