"""Rule packs: loading, checking and compiling rules into expressions over arrays.

A pack is a YAML file validated by :class:`thermowarden.config.rule_packs.RulePackConfig`. Each
rule's expressions are parsed once against the table of names a rule may read
(:func:`name_table`); a bad expression is refused with the file, line, rule id and the
column of the error.
"""

from __future__ import annotations

import dataclasses
import functools
import importlib.resources
import os
import pathlib
import re
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np

from thermowarden.config.errors import ConfigError, ConfigIssue
from thermowarden.config.loading import load_rule_pack_file
from thermowarden.config.positions import Position, SourceMap
from thermowarden.config.rule_packs import PRIORITIES, RuleConfig, RulePackConfig
from thermowarden.core import radiation
from thermowarden.core.expressions import Expression, ExpressionError, Kind, parse_expression
from thermowarden.core.forecast import FORESIGHT_COLUMNS
from thermowarden.core.indices import SpaceInputs, compute_indices
from thermowarden.core.topics import TREE_PLACEHOLDERS
from thermowarden.wbgt_basis import WbgtBasis, wbgt_basis

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
                 "rules_unknown_long", "points_total", "failed_phs", "failed_indices")
TEXT_NAMES: Final = ("space_name", "space_id", "site_name", "stale_detail", "stuck_detail",
                      "implausible_detail", "disagreement_detail", "rules_unknown_detail",
                      "wbgt_basis", "acted_minutes_ago", "effect_predicted",
                      "wbgt_action_at", "wbgt_limit_at", "wbgt_ease_at", "sun_on_windows_at",
                      "windows_name", "clear_in_min")
"""Fields a message may insert besides numbers: names, sensor descriptions, the basis of a
WBGT, and minutes since the advice was acted on."""
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
    names.update({n: "number" for n in INPUTS + STATES + HEALTH + FORESIGHT_COLUMNS})
    names.update({n: "bool" for n in FLAGS})
    for p in parameters:
        names.setdefault(p, "number")
    return names


class RulePackError(ConfigError):
    """A rule pack that cannot be loaded."""


@dataclass(frozen=True)
class TemplatePart:
    """A piece of a message: plain text, or an optional ``[[...]]`` segment (left out when
    a number in it is not known) or ``[[when EXPR: ...]]`` (kept only while EXPR is true)."""

    text: str
    fields: tuple[tuple[str, str | None], ...]
    optional: bool = False
    when: Expression | None = None

    @functools.cached_property
    def sentences(self) -> tuple[tuple[str, tuple[str, ...]], ...]:
        """The plain text's sentences with the names each inserts (split once, not at every
        rendering)."""
        return tuple((sentence, tuple(m.group(1) for m in _TEMPLATE_FIELD.finditer(sentence)))
                     for sentence in _SENTENCE_END.split(self.text))


def _known(v: object) -> bool:
    return v is not None and not (isinstance(v, float) and not np.isfinite(v))


def _format(v: object, spec: str | None) -> str:
    if isinstance(v, str):
        return v
    spec = spec or ".1f"
    return format(float(v) if spec != "d" else int(float(v)), spec)  # type: ignore[arg-type]


def _fill(text: str, values: Mapping[str, object]) -> str:
    return _TEMPLATE_FIELD.sub(lambda m: _format(values.get(m.group(1)), m.group(2)), text)


_SENTENCE_END: Final = re.compile(r"(?<=[.!?])\s+")


@dataclass(frozen=True)
class MessageTemplate:
    """A message with ``{name}`` / ``{name:.1f}`` fields checked against the names.

    A message a person reads never says "unknown": a sentence whose number is not known is
    left out, an optional segment ``[[...]]`` is left out when a number in it is not known,
    and ``[[when EXPR: ...]]`` is kept only while the rule expression EXPR is true.
    """

    text: str
    fields: tuple[tuple[str, str | None], ...]
    parts: tuple[TemplatePart, ...] = ()

    def render(self, values: Mapping[str, object],
               holds: Callable[[Expression], bool] | None = None) -> str:
        """The message for ``values``; ``holds(expr)`` says whether a ``when`` holds."""
        parts = self.parts or (TemplatePart(self.text, self.fields),)
        out: list[str] = []
        for part in parts:
            if part.optional:
                if part.when is not None and (holds is None or not holds(part.when)):
                    continue
                if all(_known(values.get(name)) for name, _ in part.fields):
                    out.append(_fill(part.text, values))
                continue
            kept = []
            for sentence, names in part.sentences:
                if all(_known(values.get(name)) for name in names):
                    kept.append(_fill(sentence, values))
            lead = " " if part.text[:1].isspace() else ""
            trail = " " if part.text[-1:].isspace() else ""
            out.append(lead + " ".join(kept) + trail)
        text = " ".join("".join(out).split())
        if not any(c.isalnum() for c in text):
            return ""  # every sentence left out: not a lone "." (the caller falls back)
        return _SPACE_BEFORE_PUNCTUATION.sub(r"\1", text)


_SPACE_BEFORE_PUNCTUATION: Final = re.compile(r"\s+([,;.)])")


@dataclass(frozen=True)
class CompiledEasing:
    """A rule's easing (see :class:`thermowarden.config.rule_packs.RuleEasing`), compiled."""

    quantity: Expression
    clears_at: Expression
    falling: bool
    """The quantity falls as the hazard eases (``direction: down``)."""
    title: MessageTemplate
    advice: MessageTemplate
    cleared_title: MessageTemplate
    cleared_advice: MessageTemplate
    rearm_s: float
    rearm_rise: float


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
    level_texts: Mapping[int, tuple[MessageTemplate | None, MessageTemplate | None]] = \
        dataclasses.field(default_factory=dict)
    """priority index -> (title, advice) of that level, where the level has its own."""
    no_effect: MessageTemplate | None = None
    effect_quantity: Expression | None = None
    level_leave: Mapping[int, Expression] = dataclasses.field(default_factory=dict)
    """priority index -> the condition for lowering the advisory below that level."""
    easing: CompiledEasing | None = None
    health: bool = False
    """Of a health pack (``RulePackConfig.health``): evaluated after the other rules, and not
    counted in ``rules_unknown_long``."""

    @property
    def lowest_level(self) -> int:
        """The priority index of the lowest level (the base priority without levels)."""
        return self.levels[0][0] if self.levels else self.base_priority

    @property
    def key(self) -> str:
        return f"{self.pack}.{self.config.id}"

    def texts_at(self, level: int) -> tuple[MessageTemplate, MessageTemplate]:
        """Title and advice at priority index ``level``."""
        title, advice = self.level_texts.get(level, (None, None))
        return title or self.title, advice or self.advice

    def renotify_at(self, level: int) -> float | None:
        """Seconds between reminders at priority index ``level`` (None: no reminders)."""
        for lv in self.config.levels:
            if PRIORITIES.index(lv.priority) == level and lv.renotify_s is not None:
                return lv.renotify_s
        return self.config.renotify_s

    @functools.cached_property
    def templates(self) -> tuple[MessageTemplate, ...]:
        """Every message template of the rule."""
        templates = [self.title, self.advice, self.rationale]
        templates += [t for pair in self.level_texts.values() for t in pair if t is not None]
        if self.no_effect is not None:
            templates.append(self.no_effect)
        if self.easing is not None:
            e = self.easing
            templates += [e.title, e.advice, e.cleared_title, e.cleared_advice]
        return tuple(templates)

    @functools.cached_property
    def template_names(self) -> frozenset[str]:
        """Names the message templates insert."""
        return frozenset(name for t in self.templates for name, _ in t.fields)

    @functools.cached_property
    def render_names(self) -> frozenset[str]:
        """Every name rendering the advisory reads: the names the templates insert, the
        numbers and their thresholds, the benefit and the ``when`` conditions of the
        templates."""
        templates = self.templates
        names = set(self.template_names)
        for name, threshold in self.numbers:
            names.add(name)
            if threshold is not None:
                names |= threshold.names
        for _, expr in self.benefit:
            names |= expr.names
        for t in templates:
            for part in t.parts:
                if part.when is not None:
                    names |= part.when.names
        return frozenset(names)

    @property
    def base_priority(self) -> int:
        return PRIORITIES.index(self.config.priority)


@dataclass(frozen=True)
class CompiledPack:
    name: str
    description: str
    rules: tuple[CompiledRule, ...]
    source: str


_SEGMENT: Final = re.compile(r"\[\[(?:when\s+(?P<when>[^:\]]+):)?(?P<body>.*?)\]\]", re.S)


def _fields(text: str, allowed: set[str], offset: int, whole: str
            ) -> tuple[tuple[str, str | None], ...]:
    fields = []
    for m in _TEMPLATE_FIELD.finditer(text):
        if m.group(1) not in allowed:
            raise ExpressionError(f"unknown name {m.group(1)!r} in message", offset + m.start(),
                                  whole)
        fields.append((m.group(1), m.group(2)))
    stray = _TEMPLATE_FIELD.sub("", text)
    if "{" in stray or "}" in stray:
        pos = min(i for i in (stray.find("{"), stray.find("}")) if i >= 0)
        raise ExpressionError("a message field is {name} or {name:.1f}", offset + pos, whole)
    return tuple(fields)


def _template(text: str, allowed: set[str], names: Mapping[str, Kind] | None = None
              ) -> MessageTemplate:
    parts: list[TemplatePart] = []
    pos = 0
    for m in _SEGMENT.finditer(text):
        if m.start() > pos:
            parts.append(TemplatePart(text[pos:m.start()],
                                      _fields(text[pos:m.start()], allowed, pos, text)))
        body = m.group("body")
        when = None
        if m.group("when") is not None:
            if names is None:
                raise ExpressionError("[[when ...]] is not allowed here", m.start(), text)
            when = parse_expression(m.group("when").strip(), names, "bool")
        parts.append(TemplatePart(body, _fields(body, allowed, m.start("body"), text),
                                  optional=True, when=when))
        pos = m.end()
    if pos < len(text):
        parts.append(TemplatePart(text[pos:], _fields(text[pos:], allowed, pos, text)))
    rest = _SEGMENT.sub("", text)
    if "[[" in rest or "]]" in rest:
        raise ExpressionError("an optional segment is [[...]] or [[when EXPR: ...]]",
                              max(rest.find("[["), rest.find("]]")), text)
    fields = tuple(f for p in parts for f in p.fields)
    return MessageTemplate(text, fields, tuple(parts))


def compile_rule(pack: str, rule: RuleConfig, smap: SourceMap | None = None,
                 path: tuple[str | int, ...] = (), health: bool = False) -> CompiledRule:
    """Compile one rule (of a health pack when ``health``); raises :class:`RulePackError`
    pointing at the bad expression."""
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

    def template(field_path: tuple[str | int, ...], text: str) -> MessageTemplate:
        try:
            return _template(text, allowed, names)
        except ExpressionError as exc:
            pos = smap.find(path + field_path) if smap else None
            label = ".".join(str(p) for p in field_path)
            raise RulePackError([ConfigIssue(pos, f"rule {rule.id}: {label}: {exc}")]) from None

    templates = [template(("messages", f), getattr(rule.messages, f))
                 for f in ("title", "advice", "rationale")]
    level_texts = {
        PRIORITIES.index(lv.priority): (
            template(("levels", i, "title"), lv.title) if lv.title else None,
            template(("levels", i, "advice"), lv.advice) if lv.advice else None)
        for i, lv in enumerate(rule.levels) if lv.title or lv.advice}
    no_effect = (template(("messages", "no_effect"), rule.messages.no_effect)
                 if rule.messages.no_effect else None)
    effect_quantity = None
    if rule.effect is not None:
        effect_quantity = expr(("effect", "quantity"), rule.effect.quantity, "number")
        if rule.effect.predicted is not None and rule.effect.predicted not in dict(benefit):
            pos = smap.find(path + ("effect", "predicted")) if smap else None
            raise RulePackError([ConfigIssue(pos, f"rule {rule.id}: effect.predicted: "
                                                  f"{rule.effect.predicted!r} is not a "
                                                  "benefit of this rule")])
    for n in rule.needs:
        if n not in names:
            expr(("needs",), n, "number")
    level_leave = {PRIORITIES.index(lv.priority): expr(("levels", i, "leave_when"),
                                                        lv.leave_when, "bool")
                   for i, lv in enumerate(rule.levels) if lv.leave_when}
    easing = None
    if rule.easing is not None:
        e = rule.easing
        easing = CompiledEasing(
            expr(("easing", "quantity"), e.quantity, "number"),
            expr(("easing", "clears_at"), e.clears_at, "number"), e.direction == "down",
            template(("easing", "title"), e.title), template(("easing", "advice"), e.advice),
            template(("easing", "cleared_title"), e.cleared_title),
            template(("easing", "cleared_advice"), e.cleared_advice), e.rearm_s, e.rearm_rise)
    if not health:
        conditions = [("condition", condition), ("clear", clear), ("hold_back", hold_back),
                      ("acted_on", acted_on)] + [(f"levels.{i}.when", x)
                                                 for i, (_, x) in enumerate(levels)]
        for label, cond in conditions:
            if cond is not None and "rules_unknown_long" in cond.names:
                where = tuple(int(x) if x.isdigit() else x for x in label.split("."))
                pos = smap.find(path + where) if smap else None
                raise RulePackError([ConfigIssue(pos, (
                    f"rule {rule.id}: {label}: rules_unknown_long is known only to the rules "
                    "of a pack with 'health: true' (evaluated after the other rules)"))])
    used: set[str] = set(rule.needs)
    return CompiledRule(pack, rule, condition, levels, clear, hold_back, acted_on, benefit,
                        tuple(numbers), templates[0], templates[1], templates[2],
                        frozenset(used), level_texts, no_effect, effect_quantity,
                        level_leave, easing, health)


def compile_pack(config: RulePackConfig, smap: SourceMap | None, source: str) -> CompiledPack:
    rules = tuple(compile_rule(config.pack, r, smap, ("rules", i), health=config.health)
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
        if tmpl.placeholders <= TREE_PLACEHOLDERS:
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
        # a declared assumption stands in for a quantity the space does not measure
        assumed = set(model.config.assumptions(model.space(i)).notes())
        provided[i] |= {f"{ASSUMED_MARK}{q}" for q in assumed - provided[i]} | assumed
    for allowed, names in lazy_some:
        for i in allowed:
            provided[i] |= names
            provided[i] -= {f"{ASSUMED_MARK}{q}" for q in names}
    # derived: a WBGT wherever its inputs are there, whichever sensor gives them
    for i, basis in enumerate(wbgt_bases(model, provided)):
        if basis.known:
            provided[i].add("wbgt")
    return provided


ASSUMED_MARK: Final = "assumed:"
"""In :func:`provided_inputs`, ``assumed:<quantity>``: only a declared assumption gives it."""
MEASURED_MARK: Final = "measured "
"""In :func:`missing_inputs`, ``measured <quantity>``: the rule needs a point for it, and the
space has only an assumption."""


def wbgt_bases(model: object, provided: list[set[str]]) -> list[WbgtBasis]:
    """Per space, what its WBGT rests on (see :mod:`thermowarden.wbgt_basis`)."""
    from thermowarden.site_model import SITE, SiteModel

    assert isinstance(model, SiteModel)
    site = model.config.site
    site_sun = site.latitude is not None and any(
        p.space == SITE and p.quantity == "solar_irradiance" for p in model.points)
    out = []
    for i in range(model.n_spaces):
        space = model.space(i)
        solar = space.solar_load if space.solar_load is not None else space.kind == "outdoor"
        out.append(wbgt_basis(provided[i], space.kind == "outdoor", solar, site_sun))
    return out


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
        measured = set(rule.config.measured)
        missing = [f"{MEASURED_MARK}{n}" if n in measured else n
                   for n in sorted(rule.needs) if n not in have]
        missing += [f"{MEASURED_MARK}{n}" for n in sorted(measured)
                    if n in have and f"{ASSUMED_MARK}{n}" in have]
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
            and (a.ventilation is None or a.ventilation == space.ventilation)
            and (a.windows is None or a.windows == bool(space.windows)))
