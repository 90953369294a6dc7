"""The resolved site: spaces, points and topic routes, built once from the configuration.

Points are rows of flat arrays (structure of arrays), not objects, so a site of thousands
of spaces costs a few kilobytes per space. Templates whose placeholders name only levels of
the tree (``{building}``, ``{floor}``, ``{area}``, ``{space}``) create their points up front;
templates with ``{side}`` or ``{sensor}`` create points on the first message (at most
:data:`MAX_SENSORS_PER_SLOT` per space and slot). A topic finds its space through the
values of the tree placeholders (``north``, ``f1``, ``101``), not through the space id.
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
from thermowarden.core.topics import TREE_PLACEHOLDERS, TopicTemplate
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
    side_as_configured: str | None = None
    """The side as the site names it (``window``); :attr:`side` is its ISO 7726 direction
    (``front``), which the computations use."""


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
    template_keys: list[dict[tuple[str, ...], int]] = field(default_factory=list)
    """Per template: the values of its tree placeholders -> the space they name."""

    def template_space(self, k: int, values: dict[str, str]) -> int | None:
        """The space a match of template ``k`` names, or None."""
        tmpl = self.templates[k][0]
        return self.template_keys[k].get(tuple(values[p] for p in tmpl.tree_placeholders))

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
        change = spec.max_change_per_min
        stuck = spec.stuck_after_s
        if space != SITE:
            trust = self.config.trust(self.space(space)).get(spec.quantity)
            if trust is not None:
                if spec.plausible_min is None and trust.plausible_min is not None:
                    low = trust.plausible_min
                if spec.plausible_max is None and trust.plausible_max is not None:
                    high = trust.plausible_max
                change = change or trust.max_change_per_min
                stuck = stuck or trust.stuck_after_s
        rate = change / 60.0 if change else float("inf")
        self.points.append(PointSpec(key, space, spec.quantity, canonical, spec.height,
                                     sensor if sensor is not None else spec.sensor, unit,
                                     converter(q.kind, unit), low, high, spec.interval_s,
                                     spec.format, topic, spec.offset, spec.scale, rate,
                                     stuck or DEFAULT_STUCK_AFTER_S,
                                     spec.height_m, spec.globe_diameter_m,
                                     spec.globe_emissivity, side))
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
            tree = tmpl.tree_placeholders
            for i in range(len(self.space_ids)):
                if (allowed is None or i in allowed) and (spaces is None or i in keep):
                    values = self.space(i).tree_values()
                    subs.add(tmpl.render_filter(**{p: values[p] for p in tree}))
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
    message twice (once per matching subscription).

    A filter without wildcards covers only itself, so each filter is compared with the
    kept wildcard filters only: linear in the number of topics (one instance of a group
    subscribes to every topic of its spaces, tens of thousands at a large site), where
    comparing every pair took seconds at 1,500 spaces and grows with the square."""
    kept = sorted(filters, key=lambda f: (f.count("#"), f.count("+")), reverse=True)
    out: list[str] = []
    wide: list[str] = []
    for f in kept:
        if not any(filter_covers(g, f) for g in wide):
            out.append(f)
            if "+" in f or "#" in f:
                wide.append(f)
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
    values = [s.tree_values() for s in config.spaces]
    for t in config.templates:
        tmpl = TopicTemplate.parse(t.topic)
        tree = tmpl.tree_placeholders
        allowed: frozenset[int] | None = (
            frozenset(model.space_index[s] for s in t.spaces) if t.spaces else None)
        if any(p != "space" for p in tree):
            # a template naming a level applies only to spaces that have that level
            allowed = frozenset(i for i in (allowed if allowed is not None else range(len(ids)))
                                if all(p in values[i] for p in tree))
        keys: dict[tuple[str, ...], int] = {}
        for i in (allowed if allowed is not None else range(len(ids))):
            keys[tuple(values[i][p] for p in tree)] = i
        model.templates.append((tmpl, t, allowed))
        model.template_keys.append(keys)
        if tmpl.placeholders <= TREE_PLACEHOLDERS:
            for i in sorted(keys.values()):
                if (i, t.quantity) not in model.explicit_quantities:
                    model.add_point(i, t, tmpl.render(**values[i]))
    return model


def template_applies(model: SiteModel, allowed: frozenset[int] | None, space: int,
                     quantity: str) -> bool:
    """Whether a template binds ``quantity`` for ``space`` (explicit points override)."""
    return (allowed is None or space in allowed) and (space, quantity) not in \
        model.explicit_quantities

