"""The resolved site: spaces, points and topic routes, built once from the configuration.

Points are rows of flat arrays (structure of arrays), not objects, so a site of thousands
of spaces costs a few kilobytes per space. Templates whose only placeholder is ``{space}``
create their points up front; templates with ``{side}`` or ``{sensor}`` create points on
the first message (at most :data:`MAX_SENSORS_PER_SLOT` per space and slot).
"""

from __future__ import annotations

from collections.abc import Callable, Collection
from dataclasses import dataclass, field
from typing import Final

from thermowarden.config.points import (
    JsonFormat,
    NumberFormat,
    PointBase,
    SenmlFormat,
    StateFormat,
    TemplateConfig,
)
from thermowarden.config.site import SiteConfig, SpaceConfig
from thermowarden.core import radiation
from thermowarden.core.quantities import QUANTITIES
from thermowarden.core.topics import TopicTemplate
from thermowarden.core.units import converter

MAX_SENSORS_PER_SLOT: Final = 8
DEFAULT_STUCK_AFTER_S: Final = 3 * 3600.0
"""A fresh measured point whose value has not changed for this long is stuck (common
practice, no source); ``stuck_after_s`` per point overrides it."""
SITE: Final = -1
"""Space index of the site's outdoor points."""
HEIGHT_WEIGHTS: Final = {"ankle": 1.0, "abdomen": 2.0, "head": 1.0, None: 2.0}
"""ISO 7726:1998 / ISO 7243:2017 weighting of ankle, abdomen and head for heterogeneous
spaces: (ankle + 2 abdomen + head) / 4; a sensor without a height counts as abdomen."""


@dataclass(frozen=True)
class PointSpec:
    """One point: which space, what it measures, how to read it."""

    key: str
    space: int
    quantity: str
    side: str | None
    height: str | None
    sensor: str | None
    unit: str
    convert: Callable[[float], float]
    low: float
    high: float
    interval_s: float
    fmt: NumberFormat | JsonFormat | SenmlFormat | StateFormat
    topic: str
    offset: float = 0.0
    """Calibration, canonical unit: ``value * scale + offset`` after conversion."""
    scale: float = 1.0
    max_change_per_s: float = float("inf")
    """Largest believable change per second between accepted readings (canonical unit)."""
    stuck_after_s: float = DEFAULT_STUCK_AFTER_S
    height_m: float | None = None
    """Height above ground of an air_speed or wind_speed sensor (m), from its own point."""
    globe_diameter_m: float | None = None
    globe_emissivity: float | None = None


def _point_key(space_id: str, quantity: str, side: str | None, height: str | None,
               sensor: str | None, surface: str | None) -> str:
    parts = [space_id, quantity]
    parts += [p for p in (side, height, surface, sensor) if p]
    return "/".join(parts)


@dataclass
class SiteModel:
    """Spaces, points and routes of one site."""

    config: SiteConfig
    space_ids: list[str]
    space_index: dict[str, int]
    points: list[PointSpec] = field(default_factory=list)
    point_by_key: dict[str, int] = field(default_factory=dict)
    routes: dict[str, list[int]] = field(default_factory=dict)
    """Explicit topic -> point ids (several for a SenML pack of several records)."""
    templates: list[tuple[TopicTemplate, TemplateConfig, frozenset[int] | None]] = field(
        default_factory=list)
    explicit_quantities: set[tuple[int, str]] = field(default_factory=set)
    """(space, quantity) pairs bound by explicit topics: templates do not apply to them."""
    listeners: list[Callable[[int], None]] = field(default_factory=list)
    """Called with the id of every point added after construction."""

    @property
    def n_spaces(self) -> int:
        return len(self.space_ids)

    def space(self, i: int) -> SpaceConfig:
        return self.config.spaces[i]

    def add_point(self, space: int, spec: PointBase, topic: str, side: str | None = None,
                  sensor: str | None = None) -> int:
        """Register a point (or return the existing one with the same key)."""
        side = side if side is not None else spec.side
        canonical = radiation.canonical_side(side) if side else None
        space_id = self.space_ids[space] if space != SITE else "site"
        key = _point_key(space_id, spec.quantity, canonical, spec.height,
                         sensor if sensor is not None else spec.sensor, spec.surface)
        if key in self.point_by_key:
            return self.point_by_key[key]
        q = QUANTITIES[spec.quantity]
        unit = spec.unit or q.unit
        pid = len(self.points)
        low = q.low if spec.plausible_min is None else spec.plausible_min
        high = q.high if spec.plausible_max is None else spec.plausible_max
        rate = spec.max_change_per_min / 60.0 if spec.max_change_per_min else float("inf")
        self.points.append(PointSpec(key, space, spec.quantity, canonical, spec.height,
                                     sensor if sensor is not None else spec.sensor, unit,
                                     converter(q.kind, unit), low, high, spec.interval_s,
                                     spec.format, topic, spec.offset, spec.scale, rate,
                                     spec.stuck_after_s or DEFAULT_STUCK_AFTER_S,
                                     spec.height_m, spec.globe_diameter_m,
                                     spec.globe_emissivity))
        self.point_by_key[key] = pid
        for listener in self.listeners:
            listener(pid)
        return pid

    def subscriptions(self, per_space: bool = False,
                      spaces: Collection[int] | None = None) -> list[str]:
        """MQTT subscription filters covering every configured topic.

        ``per_space`` renders each template for each of this model's spaces (a shard
        subscribes only to its own spaces' topics) instead of one wildcard per template.
        ``spaces`` (with ``per_space``): only the topics of these spaces and the site's
        (one instance of a group: the spaces it owns).
        """
        if spaces is None:
            subs = set(self.routes)
        else:
            keep = set(spaces)
            subs = {t for t, pids in self.routes.items()
                    if any(self.points[pid].space in keep or self.points[pid].space == SITE
                           for pid in pids)}
        for tmpl, _, allowed in self.templates:
            if not per_space:
                subs.add(tmpl.subscription)
                continue
            others = {p: "+" for p in tmpl.placeholders if p != "space"}
            for i, sid in enumerate(self.space_ids):
                if (allowed is None or i in allowed) and (spaces is None or i in keep):
                    subs.add(tmpl.render(space=sid, **others))
        return minimal_filters(subs)


def filter_covers(wide: str, narrow: str) -> bool:
    """Whether every topic matched by MQTT filter ``narrow`` is matched by ``wide``
    (MQTT 3.1.1 / 5.0 section 4.7: ``+`` one level, ``#`` any remaining levels)."""
    w, n = wide.split("/"), narrow.split("/")
    for k, part in enumerate(w):
        if part == "#":
            return True
        if k >= len(n):
            return False
        if n[k] == "#":
            return False
        if part != "+" and (part != n[k] or n[k] == "+"):
            return False
    return len(w) == len(n)


def minimal_filters(filters: set[str]) -> list[str]:
    """One subscription per topic: drop every filter another one already covers, so
    that overlapping template and explicit topics do not make the broker deliver a
    message twice (once per matching subscription)."""
    kept = sorted(filters, key=lambda f: (f.count("#"), f.count("+")), reverse=True)
    out: list[str] = []
    for f in kept:
        if not any(filter_covers(g, f) for g in out):
            out.append(f)
    return sorted(out)


def build_site_model(config: SiteConfig) -> SiteModel:
    """Resolve a validated configuration into spaces, points and routes."""
    ids = [s.id for s in config.spaces]
    model = SiteModel(config, ids, {sid: i for i, sid in enumerate(ids)})
    for p in config.site.outdoor_points:
        pid = model.add_point(SITE, p, p.topic)
        model.routes.setdefault(p.topic, []).append(pid)
    for i, space in enumerate(config.spaces):
        for p in space.points:
            pid = model.add_point(i, p, p.topic)
            model.routes.setdefault(p.topic, []).append(pid)
            model.explicit_quantities.add((i, p.quantity))
    for t in config.templates:
        tmpl = TopicTemplate.parse(t.topic)
        allowed = frozenset(model.space_index[s] for s in t.spaces) if t.spaces else None
        model.templates.append((tmpl, t, allowed))
        if tmpl.placeholders == {"space"}:
            for i, sid in enumerate(ids):
                if (allowed is None or i in allowed) and (i, t.quantity) not in \
                        model.explicit_quantities:
                    model.add_point(i, t, tmpl.render(space=sid))
    return model


def template_applies(model: SiteModel, allowed: frozenset[int] | None, space: int,
                     quantity: str) -> bool:
    """Whether a template binds ``quantity`` for ``space`` (explicit points override)."""
    return (allowed is None or space in allowed) and (space, quantity) not in \
        model.explicit_quantities

