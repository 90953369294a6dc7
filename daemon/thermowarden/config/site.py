"""The site file's own models: the site, its spaces (people, occupancy, assumptions,
identifiers in other systems), the defaults every space gets, and :class:`SiteConfig`, the
whole file."""

from __future__ import annotations

import datetime as dt
import re
import zoneinfo
from collections.abc import Mapping
from typing import Annotated, Literal

from pydantic import Field, PrivateAttr, field_validator, model_validator

from thermowarden.config.base import Strict
from thermowarden.config.broker import BrokerConfig, CommandsConfig, OutboxConfig, OutputConfig
from thermowarden.config.delivery import DeliveryConfig
from thermowarden.config.group import SHARD_NAME, GroupConfig
from thermowarden.config.points import PointConfig, Quantity, TemplateConfig
from thermowarden.config.service import (
    EvaluationConfig,
    IngestConfig,
    RetentionConfig,
    WebConfig,
)
from thermowarden.config.windows import WindowConfig
from thermowarden.core import heat_stress
from thermowarden.core.quantities import QUANTITIES, STATE_QUANTITIES
from thermowarden.core.topics import TREE_PLACEHOLDERS, TopicTemplate

SLUG = SHARD_NAME
"""Ids of buildings, floors and areas: also the names of shards (no dots: they stand
between the dots of event ids)."""
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
    relative_humidity: float | None = Field(None, ge=5.0, le=95.0)
    """%; for a zone that measures only air temperature (PMV depends little on humidity
    between 30 and 70 %). Rules about humidity itself (too humid, too dry, condensation)
    never rest on an assumption."""
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
        if self.relative_humidity is not None:
            out["relative_humidity"] = f"assumed: {self.relative_humidity:g} %"
        return out


class PointTrust(Strict):
    """How far the readings of one quantity are believed, for every point of that quantity
    in the spaces below (a point's own settings win): see PointBase for each field."""

    plausible_min: float | None = None
    plausible_max: float | None = None
    max_change_per_min: float | None = Field(None, gt=0.0)
    stuck_after_s: float | None = Field(None, ge=60.0, le=30 * 86_400)


TrustTable = dict[Quantity, PointTrust]


def _check_trust(trust: TrustTable) -> TrustTable:
    for quantity, t in trust.items():
        if quantity in STATE_QUANTITIES:
            raise ValueError(f"trust.{quantity}: trust settings apply to measured quantities, "
                             "not to states")
        q = QUANTITIES[quantity]
        for name, value in (("plausible_min", t.plausible_min),
                            ("plausible_max", t.plausible_max)):
            if value is not None and not q.low <= value <= q.high:
                raise ValueError(f"trust.{quantity}.{name} {value:g} is outside the physical "
                                 f"range ({q.low:g}..{q.high:g} {q.unit})")
        low = q.low if t.plausible_min is None else t.plausible_min
        high = q.high if t.plausible_max is None else t.plausible_max
        if low >= high:
            raise ValueError(f"trust.{quantity}: plausible_min ({low:g}) must be below "
                             f"plausible_max ({high:g}) in {q.unit}")
    return trust


def merge_trust(outer: TrustTable, inner: TrustTable) -> TrustTable:
    """``inner``'s settings over ``outer``'s, field by field per quantity."""
    out = dict(outer)
    for quantity, t in inner.items():
        base = out.get(quantity)
        if base is None:
            out[quantity] = t
        else:
            out[quantity] = base.model_copy(update=t.model_dump(exclude_unset=True))
    return out


class SpaceConfig(Strict):
    """One space: what it is, who is in it, which rules apply, and its points."""

    id: str = Field(pattern=SLUG)
    name: str | None = None
    building: str | None = Field(None, pattern=SLUG)
    """The building the space is in (set by the tree, or given in a flat list or CSV)."""
    floor: str | None = Field(None, pattern=SLUG)
    """The floor of ``building`` the space is on."""
    area: str | None = Field(None, pattern=SLUG)
    """An area instead of a floor: of ``building``, or of the site (a yard, a campus). The
    area (else the building) is the space's shard in a group of instances; names are
    site-wide. A space with neither goes to a hash bucket."""
    topic_name: str | None = Field(None, pattern=r"^[^/+#{}\x00]{1,128}$")
    """The word that stands for the space in topic templates' ``{space}`` (default: its
    id), so that rooms with the same number on different floors can keep it."""
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
    trust: TrustTable = Field(default_factory=dict)
    points: list[PointConfig] = Field(default_factory=list)
    windows: list[WindowConfig] = Field(default_factory=list)
    """Glazing of the space, for the sun-on-the-facade forecast (config/windows.py)."""

    _trust = field_validator("trust")(_check_trust)

    @model_validator(mode="after")
    def _levels(self) -> SpaceConfig:
        if self.floor is not None and self.building is None:
            raise ValueError("floor needs the building it is in")
        if self.floor is not None and self.area is not None:
            raise ValueError("give either floor or area, not both")
        return self

    @property
    def topic_word(self) -> str:
        """What ``{space}`` stands for in topic templates."""
        return self.topic_name or self.id

    def tree_values(self) -> dict[str, str]:
        """The values of the tree placeholders for this space (levels it has)."""
        out = {"space": self.topic_word}
        for level in ("building", "floor", "area"):
            value = getattr(self, level)
            if value is not None:
                out[level] = value
        return out

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
    trust: TrustTable = Field(default_factory=dict)

    _trust = field_validator("trust")(_check_trust)


# ----------------------------------------------------------------------------- tree

class LevelSettings(Strict):
    """What a building, floor or area passes down to the spaces below it (a space's own
    settings win; ``parameters``, ``assume`` and ``trust`` merge key by key)."""

    id: str = Field(pattern=SLUG)
    name: str | None = None
    people: PeopleConfig | None = None
    occupancy: OccupancyConfig | None = None
    rule_packs: list[str] | None = None
    parameters: dict[str, ParameterValue] = Field(default_factory=dict)
    assume: Assumptions | None = None
    trust: TrustTable = Field(default_factory=dict)
    spaces: list[SpaceConfig] = Field(default_factory=list)

    _trust = field_validator("trust")(_check_trust)


class FloorConfig(LevelSettings):
    """A floor of a building, or an area (of a building or of the site)."""


class BuildingConfig(LevelSettings):
    """A building: its floors and areas, and spaces directly in it."""

    floors: list[FloorConfig] = Field(default_factory=list)
    areas: list[FloorConfig] = Field(default_factory=list)

    @model_validator(mode="after")
    def _unique(self) -> BuildingConfig:
        seen: set[str] = set()
        for level in (*self.floors, *self.areas):
            if level.id in seen:
                raise ValueError(f"floor or area id {level.id!r} appears twice in building "
                                 f"{self.id!r}")
            seen.add(level.id)
        return self


class TreeIssues(Exception):  # noqa: N818 - carried out of pydantic on purpose
    """Problems of the site's tree, each with the path of the offending value: raised
    through pydantic (which wraps only ValueError) so that the loader can give each its
    file, line and column."""

    def __init__(self, issues: list[tuple[tuple[str | int, ...], str]]) -> None:
        super().__init__("; ".join(f"{'.'.join(map(str, p))}: {m}" for p, m in issues))
        self.issues = issues


def _inherit(space: SpaceConfig, levels: list[LevelSettings]) -> SpaceConfig:
    """The space with what its levels pass down filled in (``levels`` outermost first)."""
    update: dict[str, object] = {}
    for attr in ("people", "occupancy", "rule_packs"):
        if getattr(space, attr) is None:
            for level in reversed(levels):
                if getattr(level, attr) is not None:
                    update[attr] = getattr(level, attr)
                    break
    params: dict[str, ParameterValue] = {}
    trust: TrustTable = {}
    assume: dict[str, object] = {}
    nodes: list[LevelSettings | SpaceConfig] = [*levels, space]
    for node in nodes:
        params.update(node.parameters)
        trust = merge_trust(trust, node.trust)
        if node.assume is not None:
            assume.update(node.assume.model_dump(exclude_none=True))
    if params != space.parameters:
        update["parameters"] = params
    if trust != space.trust:
        update["trust"] = trust
    if assume and (space.assume is None
                   or assume != space.assume.model_dump(exclude_none=True)):
        update["assume"] = Assumptions.model_validate(assume)
    return space.model_copy(update=update) if update else space


def _named(values: Mapping[str, str], names: tuple[str, ...]) -> str:
    return ", ".join(f"{p} {values[p]!r}" for p in names)


def _closest(word: str, known: Mapping[str, object]) -> str:
    import difflib

    close = difflib.get_close_matches(word, list(known), n=1)
    return f"; did you mean {close[0]!r}?" if close else f" (known: {', '.join(sorted(known))})"


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
    buildings: list[BuildingConfig] = Field(default_factory=list)
    areas: list[FloorConfig] = Field(default_factory=list)
    """Areas of the site that are in no building (a yard, a campus's grounds)."""
    spaces: list[SpaceConfig] = Field(default_factory=list)
    spaces_csv: str | None = None
    rule_dirs: list[str] = Field(default_factory=list)
    retention: RetentionConfig = Field(default_factory=RetentionConfig)
    delivery: DeliveryConfig = Field(default_factory=DeliveryConfig)
    web: WebConfig = Field(default_factory=WebConfig)
    group: GroupConfig | None = None

    @model_validator(mode="after")
    def _check(self) -> SiteConfig:
        issues: list[tuple[tuple[str | int, ...], str]] = []
        flat, origins = self._flatten(issues)
        # the tree's spaces move to the flat list (idempotent: validating a dump again
        # gives the same spaces); origins keep where each came from, for messages
        object.__setattr__(self, "spaces", flat)
        object.__setattr__(self, "buildings", [
            b.model_copy(update={"spaces": [], "floors": [f.model_copy(update={"spaces": []})
                                                          for f in b.floors],
                                 "areas": [a.model_copy(update={"spaces": []})
                                           for a in b.areas]})
            for b in self.buildings])
        object.__setattr__(self, "areas", [a.model_copy(update={"spaces": []})
                                           for a in self.areas])
        self.__pydantic_private__ = {**(self.__pydantic_private__ or {}),
                                     "_origins": origins}
        seen: dict[str, int] = {}
        for i, space in enumerate(flat):
            for field_name in ("area", "building"):
                declared = getattr(space, field_name)
                if declared is not None and declared.startswith("bucket-"):
                    issues.append((origins[i] + (field_name,),
                                   "area and building names starting with bucket- are kept "
                                   "for the hash buckets of a group of instances"))
            if space.id in seen:
                issues.append((origins[i] + ("id",),
                               f"space id {space.id!r} appears twice (first at "
                               f"{'.'.join(map(str, origins[seen[space.id]]))})"))
            else:
                seen[space.id] = i
        for k, t in enumerate(self.templates):
            for j, s in enumerate(t.spaces or []):
                if s not in seen:
                    issues.append((("templates", k, "spaces", j),
                                   f"template {t.topic!r} names unknown space {s!r}"))
        places = ({b.id for b in self.buildings} | {a.id for a in self.areas}
                  | {x for s in flat for x in (s.building, s.area) if x})
        for audience, aud in self.delivery.audiences.items():
            for b in aud.buildings:
                if b not in places:
                    issues.append((("delivery", "audiences", audience, "buildings", b),
                                   f"no building or area {b!r} in the site"
                                   f"{_closest(b, dict.fromkeys(places))}"))
        if not issues:
            issues.extend(self._template_issues(flat, origins))
        if issues:
            raise TreeIssues(issues)
        return self

    _origins: list[tuple[str | int, ...]] = PrivateAttr(default_factory=list)

    def origin(self, i: int) -> tuple[str | int, ...]:
        """Where space ``i`` was written (``spaces.3``, ``buildings.0.floors.1.spaces.2``)."""
        origins = self._origins
        return origins[i] if i < len(origins) else ("spaces", i)

    def _flatten(self, issues: list[tuple[tuple[str | int, ...], str]]
                 ) -> tuple[list[SpaceConfig], list[tuple[str | int, ...]]]:
        buildings = {b.id: b for b in self.buildings}
        site_areas = {a.id: a for a in self.areas}
        if len(buildings) != len(self.buildings):
            issues.append((("buildings",), "a building id appears twice"))
        if len(site_areas) != len(self.areas):
            issues.append((("areas",), "an area id appears twice"))
        flat: list[SpaceConfig] = []
        origins: list[tuple[str | int, ...]] = []

        def place(space: SpaceConfig, where: tuple[str | int, ...],
                  **levels: str | None) -> None:
            for key, value in levels.items():
                own = getattr(space, key)
                if own is not None and own != value:
                    issues.append((where + (key,), f"the space is in {key} {value!r} of the "
                                                   f"tree but says {key} {own!r}"))
            space = space.model_copy(update=levels)
            flat.append(space)
            origins.append(where)

        for i, space in enumerate(self.spaces):
            flat.append(space)
            origins.append(("spaces", i))
        for b_no, b in enumerate(self.buildings):
            for k, space in enumerate(b.spaces):
                place(space, ("buildings", b_no, "spaces", k), building=b.id)
            for kind in ("floors", "areas"):
                for f_no, f in enumerate(getattr(b, kind)):
                    for k, space in enumerate(f.spaces):
                        place(space, ("buildings", b_no, kind, f_no, "spaces", k),
                              building=b.id, **{kind[:-1]: f.id})
        for a_no, a in enumerate(self.areas):
            for k, space in enumerate(a.spaces):
                place(space, ("areas", a_no, "spaces", k), area=a.id)
        # every space: its levels exist (where the site declares any) and pass settings down
        out: list[SpaceConfig] = []
        for space, where in zip(flat, origins, strict=True):
            chain: list[LevelSettings] = []
            if space.building is not None:
                bld = buildings.get(space.building)
                if bld is None and buildings:
                    issues.append((where + ("building",),
                                   f"no building {space.building!r} in the site"
                                   f"{_closest(space.building, buildings)}"))
                elif bld is not None:
                    chain.append(bld)
                    for attr, table in (("floor", bld.floors), ("area", bld.areas)):
                        name = getattr(space, attr)
                        if name is None:
                            continue
                        found = next((f for f in table if f.id == name), None)
                        if found is None and table:
                            ids = {f.id: f for f in table}
                            issues.append((where + (attr,),
                                           f"no {attr} {name!r} in building {bld.id!r}"
                                           f"{_closest(name, ids)}"))
                        elif found is not None:
                            chain.append(found)
            elif space.area is not None:
                site_area = site_areas.get(space.area)
                if site_area is None and site_areas:
                    issues.append((where + ("area",), f"no area {space.area!r} in the site"
                                                      f"{_closest(space.area, site_areas)}"))
                elif site_area is not None:
                    chain.append(site_area)
            out.append(_inherit(space, chain) if chain else space)
        return out, origins

    def _template_issues(self, flat: list[SpaceConfig],
                         origins: list[tuple[str | int, ...]]
                         ) -> list[tuple[tuple[str | int, ...], str]]:
        """Each template must give each space it applies to a topic of its own, and read
        that topic back to the same space."""
        issues: list[tuple[tuple[str | int, ...], str]] = []
        for k, t in enumerate(self.templates):
            tmpl = TopicTemplate.parse(t.topic)
            tree = tmpl.tree_placeholders
            wanted = set(t.spaces) if t.spaces else None
            first: dict[str, str] = {}
            for space in flat:
                if wanted is not None and space.id not in wanted:
                    continue
                values = space.tree_values()
                if any(p not in values for p in tree):
                    continue
                topic = tmpl.render_partial(**{p: values[p] for p in tree})
                other = first.setdefault(topic, space.id)
                if other != space.id:
                    issues.append((("templates", k, "topic"),
                                   f"template {t.topic!r} gives spaces {other!r} and "
                                   f"{space.id!r} the same topic {topic!r}: add the levels "
                                   "that tell them apart ({building}, {floor}, {area}) or "
                                   "give them distinct topic_name"))
                    break
                if len(tmpl.segments) != sum(1 for parts in tmpl.segments
                                             if len(parts) == 1):
                    probe = {p: "x" for p in tmpl.placeholders - TREE_PLACEHOLDERS}
                    back = tmpl.match(tmpl.render(**{**probe, **values}).split("/"))
                    if back is None or any(back[p] != values[p] for p in tree):
                        issues.append((("templates", k, "topic"),
                                       f"template {t.topic!r} cannot be read back for space "
                                       f"{space.id!r} ({_named(values, tree)}): "
                                       "separate the placeholders by text their values do "
                                       "not contain"))
                        break
        return issues

    def people(self, space: SpaceConfig) -> PeopleConfig:
        return space.people or self.defaults.people

    def occupancy(self, space: SpaceConfig) -> OccupancyConfig:
        return space.occupancy or self.defaults.occupancy

    def assumptions(self, space: SpaceConfig) -> Assumptions:
        """The space's assumptions, each one falling back to ``defaults.assume``."""
        base = self.defaults.assume or Assumptions()
        own = space.assume or Assumptions()
        return Assumptions(**{
            name: getattr(own, name) if getattr(own, name) is not None else getattr(base, name)
            for name in Assumptions.model_fields})

    def rule_packs(self, space: SpaceConfig) -> list[str]:
        return space.rule_packs if space.rule_packs is not None else self.defaults.rule_packs

    def parameters(self, space: SpaceConfig) -> dict[str, ParameterValue]:
        return {**self.defaults.parameters, **space.parameters}

    def trust(self, space: SpaceConfig) -> TrustTable:
        """The space's trust settings per quantity, over ``defaults.trust``."""
        return merge_trust(self.defaults.trust, space.trust)

    def building_of(self, space: SpaceConfig) -> BuildingConfig | None:
        return next((b for b in self.buildings if b.id == space.building), None)

    def level_name(self, level: str, building: str | None, value: str | None) -> str | None:
        """The display name of a building, floor or area (its id when it has no name)."""
        if value is None:
            return None
        if level == "building":
            b = next((b for b in self.buildings if b.id == value), None)
            return (b.name or b.id) if b is not None else value
        if building is not None:
            b = next((b for b in self.buildings if b.id == building), None)
            table = (b.floors if level == "floor" else b.areas) if b is not None else []
        else:
            table = self.areas
        f = next((f for f in table if f.id == value), None)
        return (f.name or f.id) if f is not None else value
