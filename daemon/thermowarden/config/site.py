"""The site file's own models: the site, its spaces (people, occupancy, assumptions,
identifiers in other systems), the defaults every space gets, and :class:`SiteConfig`, the
whole file."""

from __future__ import annotations

import datetime as dt
import re
import zoneinfo
from typing import Annotated, Literal

from pydantic import Field, field_validator, model_validator

from thermowarden.config.base import Strict
from thermowarden.config.broker import BrokerConfig, CommandsConfig, OutboxConfig, OutputConfig
from thermowarden.config.delivery import DeliveryConfig
from thermowarden.config.group import SHARD_NAME, GroupConfig
from thermowarden.config.points import PointConfig, TemplateConfig
from thermowarden.config.service import (
    EvaluationConfig,
    IngestConfig,
    RetentionConfig,
    WebConfig,
)
from thermowarden.core import heat_stress

SLUG = r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$"
OUTDOOR_QUANTITIES = frozenset({"outdoor_air_temperature", "outdoor_relative_humidity",
                                "solar_irradiance", "wind_speed", "barometric_pressure"})
WEEKDAYS = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")
WorkClass = Literal["rest", "low", "moderate", "high", "very_high"]
ClothingEnsemble = Literal["work_clothes", "cloth_coveralls", "double_layer_woven",
                           "sms_polypropylene_coveralls", "polyolefin_coveralls",
                           "limited_use_vapour_barrier_coveralls"]


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
    building: str | None = Field(None, pattern=SHARD_NAME)
    area: str | None = Field(None, pattern=SHARD_NAME)
    """The area (else the building) is the space's shard in a group of instances; names
    are site-wide. A space with neither goes to a hash bucket."""
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
    group: GroupConfig | None = None

    @model_validator(mode="after")
    def _check(self) -> SiteConfig:
        seen: set[str] = set()
        for space in self.spaces:
            for declared in (space.area, space.building):
                if declared is not None and declared.startswith("bucket-"):
                    raise ValueError(f"space {space.id!r}: area and building names starting "
                                     "with bucket- are kept for the hash buckets")
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
