"""Rule packs: loading, checking and compiling rules into expressions over arrays.

A pack is a YAML file validated by :class:`thermowarden.config.RulePackConfig`. Each
rule's expressions are parsed once against the table of names a rule may read
(:func:`name_table`); a bad expression is refused with the file, line, rule id and the
column of the error.
"""

from __future__ import annotations

import functools
import importlib.resources
import os
import pathlib
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np

from thermowarden.config import (
    PRIORITIES,
    ConfigError,
    ConfigIssue,
    RuleConfig,
    RulePackConfig,
    load_rule_pack_file,
)
from thermowarden.core import radiation
from thermowarden.core.expressions import Expression, ExpressionError, Kind, parse_expression
from thermowarden.core.indices import SpaceInputs, compute_indices
from thermowarden.yaml_positions import Position, SourceMap

FLAGS: Final = ("occupied", "hot_work", "indoor", "outdoor", "naturally_ventilated",
                "acclimatised", "solar_load")
INPUTS: Final = ("air_temperature", "relative_humidity", "globe_temperature",
                 "mean_radiant_temperature_measured", "air_speed", "turbulence_intensity",
                 "natural_wet_bulb", "psychrometric_wet_bulb", "floor_temperature",
                 "surface_temperature", "outdoor_air_temperature", "solar_irradiance",
                 "wind_speed", "met", "clo", "target_pmv") + tuple(
    f"plane_radiant_temperature_{s}" for s in radiation.SIDES)
STATES: Final = ("shading_position", "fan_state", "occupancy")
HEALTH: Final = ("stale_points", "stuck_points", "implausible_recent", "max_disagreement",
                 "rules_unknown_long", "points_total")
TEXT_NAMES: Final = ("space_name", "space_id", "site_name")
HEAT_STRESS_CAUTIONS: Final = (
    "WBGT and its reference values are a screening method for a standard person, not a "
    "diagnosis.",
    "Individual factors change the risk: acclimatisation, hydration, fitness, illness, "
    "medication, age and clothing.",
    "Workers new to the heat (or back from a break) are not acclimatised: build up exposure "
    "over one to two weeks.",
    "Provide cool drinking water and make sure people drink regularly, before they are "
    "thirsty.",
    "Anyone with symptoms of heat illness (dizziness, confusion, nausea, stopping sweating) "
    "must stop work, cool down and get medical advice; call emergency services for confusion "
    "or collapse.",
    "This advice does not replace local regulations or a qualified occupational hygienist's "
    "assessment.",
)
_TEMPLATE_FIELD: Final = re.compile(r"\{([A-Za-z_][A-Za-z0-9_]*)(?::(\.\d[fg]|d))?\}")
BUILTIN_PACKAGE: Final = "thermowarden.rulepacks"


@functools.cache
def index_names() -> tuple[str, ...]:
    """Names of every index the core computes (read off one evaluation)."""
    return tuple(compute_indices(SpaceInputs.create(1), with_phs=True))


def name_table(parameters: Iterable[str] = ()) -> dict[str, Kind]:
    """Every name a rule expression may read, with its kind."""
    names: dict[str, Kind] = {n: "number" for n in index_names()}
    names.update({n: "number" for n in INPUTS + STATES + HEALTH})
    names.update({n: "bool" for n in FLAGS})
    for p in parameters:
        names.setdefault(p, "number")
    return names


class RulePackError(ConfigError):
    """A rule pack that cannot be loaded."""


@dataclass(frozen=True)
class MessageTemplate:
    """A message with ``{name}`` / ``{name:.1f}`` fields checked against the names."""

    text: str
    fields: tuple[tuple[str, str | None], ...]

    def render(self, values: Mapping[str, object]) -> str:
        def sub(m: re.Match[str]) -> str:
            v = values.get(m.group(1))
            if v is None or (isinstance(v, float) and not np.isfinite(v)):
                return "unknown"
            if isinstance(v, str):
                return v
            spec = m.group(2) or ".1f"
            return format(float(v) if spec != "d" else int(float(v)), spec)  # type: ignore[arg-type]

        return _TEMPLATE_FIELD.sub(sub, self.text)


@dataclass(frozen=True)
class CompiledRule:
    """A rule ready to evaluate on arrays."""

    pack: str
    config: RuleConfig
    condition: Expression | None
    levels: tuple[tuple[int, Expression], ...]
    clear: Expression | None
    hold_back: Expression | None
    acted_on: Expression | None
    benefit: tuple[tuple[str, Expression], ...]
    numbers: tuple[tuple[str, Expression | None], ...]
    title: MessageTemplate
    advice: MessageTemplate
    rationale: MessageTemplate
    needs: frozenset[str]

    @property
    def key(self) -> str:
        return f"{self.pack}.{self.config.id}"

    @functools.cached_property
    def template_names(self) -> frozenset[str]:
        """Names the three message templates insert."""
        return frozenset(name for t in (self.title, self.advice, self.rationale)
                         for name, _ in t.fields)

    @property
    def base_priority(self) -> int:
        return PRIORITIES.index(self.config.priority)


@dataclass(frozen=True)
class CompiledPack:
    name: str
    description: str
    rules: tuple[CompiledRule, ...]
    source: str


def _template(text: str, allowed: set[str]) -> MessageTemplate:
    fields = []
    for m in _TEMPLATE_FIELD.finditer(text):
        if m.group(1) not in allowed:
            raise ExpressionError(f"unknown name {m.group(1)!r} in message", m.start(), text)
        fields.append((m.group(1), m.group(2)))
    stray = _TEMPLATE_FIELD.sub("", text)
    if "{" in stray or "}" in stray:
        pos = min(i for i in (stray.find("{"), stray.find("}")) if i >= 0)
        raise ExpressionError("a message field is {name} or {name:.1f}", pos, text)
    return MessageTemplate(text, tuple(fields))


def compile_rule(pack: str, rule: RuleConfig, smap: SourceMap | None = None,
                 path: tuple[str | int, ...] = ()) -> CompiledRule:
    """Compile one rule; raises :class:`RulePackError` pointing at the bad expression."""
    names = name_table(rule.parameters)

    def expr(field_path: tuple[str | int, ...], text: str, want: Kind) -> Expression:
        try:
            return parse_expression(text, names, want)
        except ExpressionError as exc:
            pos = smap.find(path + field_path) if smap else None
            label = ".".join(str(p) for p in field_path)
            raise RulePackError([ConfigIssue(pos, f"rule {rule.id}: {label}: {exc}")]) from None

    condition = expr(("condition",), rule.condition, "bool") if rule.condition else None
    levels = tuple((PRIORITIES.index(lv.priority), expr(("levels", i, "when"), lv.when, "bool"))
                   for i, lv in enumerate(rule.levels))
    clear = expr(("clear",), rule.clear, "bool") if rule.clear else None
    hold_back = expr(("hold_back",), rule.hold_back, "bool") if rule.hold_back else None
    acted_on = expr(("acted_on",), rule.acted_on, "bool") if rule.acted_on else None
    benefit = tuple((k, expr(("benefit", k), v, "number")) for k, v in rule.benefit.items())
    numbers = []
    for i, num in enumerate(rule.numbers):
        if num.name not in names:
            expr(("numbers", i, "name"), num.name, "number")  # raises with a suggestion
        th = expr(("numbers", i, "threshold"), num.threshold, "number") if num.threshold else None
        numbers.append((num.name, th))
    allowed = set(names) | {k for k, _ in benefit} | set(TEXT_NAMES)
    templates = []
    for field in ("title", "advice", "rationale"):
        text = getattr(rule.messages, field)
        try:
            templates.append(_template(text, allowed))
        except ExpressionError as exc:
            pos = smap.find(path + ("messages", field)) if smap else None
            raise RulePackError([ConfigIssue(pos, f"rule {rule.id}: messages.{field}: "
                                                  f"{exc}")]) from None
    for n in rule.needs:
        if n not in names:
            expr(("needs",), n, "number")
    used: set[str] = set(rule.needs)
    return CompiledRule(pack, rule, condition, levels, clear, hold_back, acted_on, benefit,
                        tuple(numbers), templates[0], templates[1], templates[2],
                        frozenset(used))


def compile_pack(config: RulePackConfig, smap: SourceMap | None, source: str) -> CompiledPack:
    rules = tuple(compile_rule(config.pack, r, smap, ("rules", i))
                  for i, r in enumerate(config.rules))
    return CompiledPack(config.pack, config.description, rules, source)


def builtin_pack_dir() -> pathlib.Path:
    return pathlib.Path(str(importlib.resources.files(BUILTIN_PACKAGE)))


def find_pack(name: str, dirs: Iterable[str], base: str | os.PathLike[str] | None = None
              ) -> pathlib.Path | None:
    """The file of pack ``name``: site rule directories first, then the built-in packs."""
    root = pathlib.Path(base).parent if base else pathlib.Path.cwd()
    for d in dirs:
        p = pathlib.Path(d)
        p = p if p.is_absolute() else root / p
        if (p / f"{name}.yaml").is_file():
            return p / f"{name}.yaml"
    builtin = builtin_pack_dir() / f"{name}.yaml"
    return builtin if builtin.is_file() else None


def load_rule_packs(names: Iterable[str], dirs: Iterable[str] = (),
                    base: str | os.PathLike[str] | None = None) -> dict[str, CompiledPack]:
    """Load and compile the named packs; every problem is reported with its position."""
    dirs = list(dirs)
    packs: dict[str, CompiledPack] = {}
    issues: list[ConfigIssue] = []
    for name in sorted(set(names)):
        path = find_pack(name, dirs, base)
        if path is None:
            available = sorted(p.stem for p in builtin_pack_dir().glob("*.yaml"))
            issues.append(ConfigIssue(None, f"rule pack {name!r} not found (built-in packs: "
                                            f"{', '.join(available)})"))
            continue
        try:
            config, smap = load_rule_pack_file(path)
            if config.pack != name:
                issues.append(ConfigIssue(Position(str(path), 1, 1),
                                          f"the file declares pack {config.pack!r}, not "
                                          f"{name!r}"))
                continue
            packs[name] = compile_pack(config, smap, str(path))
        except ConfigError as exc:
            issues.extend(exc.issues)
    if issues:
        raise RulePackError(issues)
    return packs


def builtin_pack_names() -> list[str]:
    return sorted(p.stem for p in builtin_pack_dir().glob("*.yaml"))


def provided_inputs(model: object) -> list[set[str]]:
    """Per space, the input names its points provide (one pass over all points)."""
    from thermowarden.site_model import SITE, SiteModel

    assert isinstance(model, SiteModel)
    n = model.n_spaces
    provided: list[set[str]] = [set() for _ in range(n)]
    site_wide: set[str] = set()
    outdoor_extra: set[str] = set()
    for p in model.points:
        if p.space == SITE:
            site_wide.add(p.quantity)
            alias = {"outdoor_air_temperature": "air_temperature",
                     "outdoor_relative_humidity": "relative_humidity",
                     "wind_speed": "air_speed"}.get(p.quantity)
            if alias:
                outdoor_extra.add(alias)
            continue
        provided[p.space].add(p.quantity)
        if p.side:
            provided[p.space].add(f"plane_radiant_temperature_{p.side}")
    lazy_all: set[str] = set()
    lazy_some: list[tuple[frozenset[int], set[str]]] = []
    for tmpl, spec, allowed in model.templates:
        if tmpl.placeholders == {"space"}:
            continue
        names: set[str] = {spec.quantity}
        if "side" in tmpl.placeholders:
            names.update(f"plane_radiant_temperature_{s}" for s in radiation.SIDES)
        if allowed is None:
            lazy_all |= names
        else:
            lazy_some.append((allowed, names))
    for i in range(n):
        provided[i] |= site_wide | lazy_all
        if model.space(i).kind == "outdoor":
            provided[i] |= outdoor_extra
    for allowed, names in lazy_some:
        for i in allowed:
            provided[i] |= names
    return provided


def missing_inputs(pack: CompiledPack, model: object, space: int,
                   provided: list[set[str]] | None = None) -> list[tuple[str, list[str]]]:
    """Rules of ``pack`` that apply to ``space`` and the inputs (``needs``) no point gives.

    The engine does not evaluate such a rule for that space (it could only ever be
    unknown); ``thermowarden check`` warns about each one. Pass ``provided`` (from
    :func:`provided_inputs`) when asking for many spaces.
    """
    from thermowarden.site_model import SiteModel

    assert isinstance(model, SiteModel)
    have = (provided or provided_inputs(model))[space]
    cfg = model.space(space)
    out = []
    for rule in pack.rules:
        if not rule_applies(rule.config, cfg):
            continue
        missing = sorted(n for n in rule.needs if n not in have)
        if missing:
            out.append((rule.config.id, missing))
    return out


def rule_applies(rule: RuleConfig, space: object) -> bool:
    """Whether a rule's ``applies_to`` matches a space."""
    from thermowarden.config import SpaceConfig

    assert isinstance(space, SpaceConfig)
    a = rule.applies_to
    return ((a.kind is None or a.kind == space.kind)
            and (a.hot_work is None or a.hot_work == space.hot_work)
            and (a.ventilation is None or a.ventilation == space.ventilation))
