"""``thermowarden check``: validate a site file and describe what it resolves to."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

from thermowarden.config import ConfigError, ConfigIssue, SiteConfig
from thermowarden.config.loading import load_site_with_positions
from thermowarden.core.quantities import QUANTITIES
from thermowarden.core.topics import TREE_PLACEHOLDERS
from thermowarden.site_model import (
    DEFAULT_STUCK_AFTER_S,
    SITE,
    PointSpec,
    SiteModel,
    build_site_model,
)

HOT_WORK_UNWATCHED = "HOT WORK WITHOUT A HEAT-STRESS EVALUATION"


@dataclass
class CheckReport:
    """The outcome of checking a site: the model when valid, issues, and warnings."""

    config: SiteConfig | None = None
    model: SiteModel | None = None
    issues: list[ConfigIssue] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    space_positions: dict[str, str] = field(default_factory=dict)
    """Where each space is written (``file:line:column``), for the warnings that name it."""

    @property
    def ok(self) -> bool:
        return not self.issues


def check_site(path: str, prepare: Callable[[], None] | None = None) -> CheckReport:
    """Validate the site file, the CSV it refers to, and the rule packs it names."""
    report = CheckReport()
    try:
        config, smap = load_site_with_positions(path)
    except ConfigError as exc:
        report.issues = exc.issues
        return report
    report.config = config
    for i, space in enumerate(config.spaces):
        where = smap.find(("spaces", i))
        if where is not None:
            report.space_positions[space.id] = str(where)
    report.model = build_site_model(config)
    if config.web.users_file is not None:
        report.issues.extend(users_file_issues(config, path))
    from thermowarden.rules import (
        MEASURED_MARK,
        RulePackError,
        load_rule_packs,
        missing_inputs,
        provided_inputs,
    )

    names = sorted({n for s in config.spaces for n in config.rule_packs(s)})
    try:
        packs = load_rule_packs(names, config.rule_dirs, base=path)
    except RulePackError as exc:
        report.issues = exc.issues
        return report
    for tmpl, spec, allowed in report.model.templates:
        if allowed is None or not set(tmpl.tree_placeholders) - {"space"}:
            continue
        named = {config.spaces[i].id for i in allowed}
        own = {config.spaces[i].id for i, q in report.model.explicit_quantities
               if q == spec.quantity}
        left = [s for s in (spec.spaces if spec.spaces is not None
                            else [s.id for s in config.spaces])
                if s not in named and s not in own]
        if left:
            levels = ", ".join("{" + p + "}" for p in tmpl.tree_placeholders if p != "space")
            more = f" and {len(left) - 3} more" if len(left) > 3 else ""
            report.warnings.append(
                f"template {tmpl.text}: {len(left)} space(s) ({', '.join(left[:3])}{more}) "
                f"have no value for {levels} and get no {spec.quantity} from it")
    from thermowarden.rules import rule_applies

    provided = provided_inputs(report.model)
    lacking: set[tuple[str, str]] = set()
    for i, space in enumerate(config.spaces):
        for name in config.rule_packs(space):
            if not any(rule_applies(r.config, space) for r in packs[name].rules):
                report.warnings.append(
                    f"space {space.id}: rule pack {name} can never apply here: "
                    f"{_applies_text(packs[name], space)}; take {name} off this space's "
                    "rule_packs, or change the space")
                continue
            for rule, missing in missing_inputs(packs[name], report.model, i, provided):
                lacking.add((space.id, f"{name}.{rule}"))
                if space.hot_work and "wbgt" in missing:
                    continue  # said below, louder, with what to add
                report.warnings.append(
                    f"space {space.id}: rule {name}.{rule} needs "
                    f"{', '.join(m.removeprefix(MEASURED_MARK) for m in missing)}, which no "
                    f"point provides, so it never runs there: {_remedy(missing)}")
    report.warnings.extend(hot_work_warnings(config, report.model, packs, provided))
    report.warnings.extend(unused_windows_warnings(config, packs))
    from thermowarden.engine.finishing import unfinishable_rules

    if prepare is not None:
        prepare()  # the comfort models load (or compile, once) only for a valid site
    for u in unfinishable_rules(report.model, packs):
        if (u.space, u.rule) in lacking:
            continue
        because = f"{', '.join(u.missing)} can never be known there" if u.missing else \
            "its expression can never be true"
        i = report.model.space_index[u.space]
        remedy = _index_remedy(u.missing, provided[i])
        if u.which == "clear":
            report.warnings.append(
                f"space {u.space}: rule {u.rule} could raise but never clear on its own: "
                f"its clear condition reads {because} ({remedy or 'add the point'}, or write "
                "the clear condition with the same inputs as the raise condition)")
        else:
            report.warnings.append(
                f"space {u.space}: rule {u.rule} can never raise: its condition reads "
                f"{because}" + (f": {remedy}" if remedy else ""))
    return report


def users_file_issues(config: SiteConfig, path: str) -> list[ConfigIssue]:
    """The web page's users file read exactly as ``run`` reads it: what is wrong, if
    anything (a missing file too)."""
    from thermowarden.shell.web import site_users, users_path

    users = users_path(config, path)
    assert users is not None
    if not users.exists():
        return [ConfigIssue(None, f"{users}: the users file named by web.users_file does not "
                            "exist (create it with `thermowarden web-user NAME --audience "
                            f"AUDIENCE --file {users}`)")]
    try:
        site_users(config, path)
    except ConfigError as exc:
        return list(exc.issues)
    return []


def hot_work_warnings(config: SiteConfig, model: SiteModel, packs: Mapping[str, object],
                      provided: list[set[str]]) -> list[str]:
    """A warning for each hot-work space that gets no heat-stress evaluation, with what to
    add: a pack with a rule that reads the WBGT, the inputs of a WBGT, the work done (the
    reference value rests on it)."""
    from thermowarden.rules import CompiledPack, rule_applies, wbgt_bases

    bases = wbgt_bases(model, provided)
    out = []
    for i, space in enumerate(config.spaces):
        if not space.hot_work:
            continue
        heat_rules = [f"{name}.{r.config.id}" for name in config.rule_packs(space)
                      if isinstance(pack := packs.get(name), CompiledPack)
                      for r in pack.rules
                      if "wbgt" in r.needs and rule_applies(r.config, space)]
        to_add = []
        if not heat_rules:
            to_add.append("heat_stress to its rule_packs")
        if not bases[i].known:
            to_add.extend(bases[i].to_add)
        people = config.people(space)
        if people.met is None and people.work_class is None:
            to_add.append("the work done, people: {work_class: moderate} (rest, low, moderate, "
                          "high, very_high) or met (the WBGT reference value rests on it; "
                          "none is assumed)")
        if to_add:
            name = space.name or space.id
            out.append(f"space {space.id}: {HOT_WORK_UNWATCHED}: the "
                       f"safety lead will never be alerted for {name}: add "
                       + "; ".join(to_add))
    return out


def unused_windows_warnings(config: SiteConfig, packs: Mapping[str, object]) -> list[str]:
    """A warning for each space that declares windows but has no rule pack with a rule for
    spaces with windows (the sun on a facade, pack ``ahead``): its windows are read for
    nothing."""
    from thermowarden.rules import CompiledPack

    out = []
    for space in config.spaces:
        if not space.windows:
            continue
        if any(isinstance(pack := packs.get(name), CompiledPack)
               and any(r.config.applies_to.windows for r in pack.rules)
               for name in config.rule_packs(space)):
            continue
        out.append(f"space {space.id}: declares windows, but none of its rule packs has a "
                   "rule for them, so no advice to lower the blinds before the sun reaches "
                   "them is given: add ahead to its rule_packs, or remove the windows")
    return out


def unsafe_warnings(warnings: list[str]) -> list[str]:
    """The warnings that leave people unprotected: a hot-work space without a heat-stress
    evaluation (``check`` exits 3 on them)."""
    return [w for w in warnings if HOT_WORK_UNWATCHED in w]


def grouped_warnings(warnings: list[str], shown: int = 3,
                     where: Mapping[str, str] | None = None) -> list[str]:
    """Warnings that differ only in the space they name, as one line each:
    ``5000 spaces (a, b, c and 4997 more): rule ... needs ...``; with ``where`` (space id
    to ``file:line:column``) each line starts with where its first space is written."""
    groups: dict[str, list[str]] = {}
    order: list[str] = []
    for w in warnings:
        space, sep, rest = w.partition(": ")
        if not sep or not space.startswith("space "):
            key, who = w, ""
        else:
            key, who = rest, space.removeprefix("space ")
        if key not in groups:
            groups[key] = []
            order.append(key)
        if who:
            groups[key].append(who)
    lines = []
    for key in order:
        ids = groups[key]
        at = f"{where[ids[0]]}: " if ids and where and ids[0] in where else ""
        if not ids:
            lines.append(key)
        elif len(ids) == 1:
            lines.append(f"{at}space {ids[0]}: {key}")
        else:
            more = f" and {len(ids) - shown} more" if len(ids) > shown else ""
            lines.append(f"{at}{len(ids)} spaces ({', '.join(ids[:shown])}{more}): {key}")
    return lines


def resolved_map(model: SiteModel) -> list[str]:
    """space -> quantity -> topic, unit, format, as lines for a person."""
    from thermowarden.rules import provided_inputs, wbgt_bases

    bases = wbgt_bases(model, provided_inputs(model))
    lines: list[str] = []
    by_space: dict[int, list[str]] = {}
    for p in model.points:
        tags = ", ".join(f"{k} {v}" for k, v in (("side", p.side_as_configured or p.side),
                                                  ("height", p.height),
                                                  ("sensor", p.sensor)) if v)
        fmt = p.fmt.type
        line = f"    {p.quantity:<26} {p.topic}  [{p.unit or '-'}, {fmt}, every {p.interval_s:g} s"
        line += f", {tags}]" if tags else "]"
        line += _trust(p)
        by_space.setdefault(p.space, []).append(line)
    if SITE in by_space:
        lines.append(f"site {model.config.site.id} (outdoor, shared)")
        lines.extend(by_space[SITE])
    for i, sid in enumerate(model.space_ids):
        space = model.space(i)
        flags: list[str] = [space.kind]
        if space.hot_work:
            flags.append("hot work")
        if space.ventilation == "natural":
            flags.append("naturally ventilated")
        where = "/".join(v for v in (space.building, space.floor, space.area) if v)
        if where:
            flags.insert(0, where)
        lines.append(f"space {sid} ({', '.join(flags)}): "
                     f"rules {', '.join(model.config.rule_packs(space)) or '-'}")
        lines.extend(by_space.get(i, ["    (no points yet)"]))
        if space.hot_work:
            lines.append(f"    WBGT rests on {bases[i].description}")
    for tmpl, spec, _ in model.templates:
        if not tmpl.placeholders <= TREE_PLACEHOLDERS:
            lines.append(f"template {tmpl.text}: {spec.quantity}, points created as topics "
                         "appear")
    return lines


def _trust(p: PointSpec) -> str:
    """The point's own calibration and limits, when it has any, for the resolved map."""
    q = QUANTITIES[p.quantity]
    parts = []
    if p.scale != 1.0 or p.offset != 0.0:
        parts.append(f"x {p.scale:g} {p.offset:+g} {q.unit}")
    if (p.low, p.high) != (q.low, q.high):
        parts.append(f"plausible {p.low:g}..{p.high:g} {q.unit}")
    if p.max_change_per_s != float("inf"):
        parts.append(f"at most {p.max_change_per_s * 60:g} {q.unit}/min")
    if p.stuck_after_s != DEFAULT_STUCK_AFTER_S:
        parts.append(f"stuck after {p.stuck_after_s:g} s")
    return f" ({'; '.join(parts)})" if parts else ""


ASSUMABLE_EXAMPLES = {"relative_humidity": "relative_humidity: 50", "air_speed": "air_speed: 0.1",
                      "mean_radiant_temperature": "mean_radiant_temperature: air"}
"""Inputs a space may assume (``assume``), with the line that says so."""


def _remedy(missing: list[str]) -> str:
    """What to add to the site file so that a rule gets the inputs it lacks."""
    from thermowarden.rules import MEASURED_MARK

    parts = []
    for m in missing:
        q = m.removeprefix(MEASURED_MARK)
        if m.startswith(MEASURED_MARK):
            parts.append(f"add {_a(q)} {q} point to the space (this rule is about the {q} "
                         "itself: an assumption does not count)")
        elif q in ASSUMABLE_EXAMPLES:
            parts.append(f"add `assume: {{{ASSUMABLE_EXAMPLES[q]}}}` to the space (or "
                         f"to defaults), or {_a(q)} {q} point")
        elif q.startswith("plane_radiant_temperature_"):
            side = q.removeprefix("plane_radiant_temperature_")
            parts.append(f"add a plane_radiant_temperature (or radiant_flux) point with side: "
                         f"{side} to the space")
        elif q.startswith("outdoor_") or q in ("solar_irradiance", "wind_speed"):
            parts.append(f"add {_a(q)} {q} point to site.outdoor_points")
        else:
            parts.append(f"add {_a(q)} {q} point to the space")
    return "; ".join(parts)


def _applies_text(pack: object, space: object) -> str:
    """Why no rule of ``pack`` applies to ``space``, in words."""
    from thermowarden.config import SpaceConfig
    from thermowarden.rules import CompiledPack

    assert isinstance(pack, CompiledPack) and isinstance(space, SpaceConfig)
    wants = set()
    for r in pack.rules:
        a = r.config.applies_to
        words = [w for w in (
            a.kind and f"{a.kind} spaces",
            a.hot_work is True and "hot work", a.hot_work is False and "not hot work",
            a.ventilation and f"{a.ventilation} ventilation") if w]
        wants.add(", ".join(words) or "every space")
    here = [space.kind, "hot work" if space.hot_work else "not hot work",
            f"{space.ventilation} ventilation"]
    return f"its rules are for {' or '.join(sorted(wants))}; this space is {', '.join(here)}"


_COMFORT_INPUTS = ("air_temperature", "relative_humidity", "air_speed", "mean_radiant_temperature")
INDEX_INPUTS: dict[str, tuple[str, ...]] = {
    **{name: _COMFORT_INPUTS for name in (
        "pmv_iso", "ppd_iso", "comfort_category_iso", "pmv_ashrae", "ppd_ashrae",
        "cooling_effect", "set", "cooling_air_speed_needed", "set_at_cooling_air_speed",
        "utci")},
    "operative_temperature": ("air_temperature", "air_speed", "mean_radiant_temperature"),
    "mean_radiant_temperature": ("mean_radiant_temperature",),
    "draught_rate": ("air_temperature", "air_speed"),
    "dew_point": ("air_temperature", "relative_humidity"),
    "condensation_margin": ("surface_temperature", "relative_humidity"),
    "heat_index": ("air_temperature", "relative_humidity"),
    "humidex": ("air_temperature", "relative_humidity"),
}
"""The inputs each index rests on, for saying what to add when it can never be known."""


def _index_remedy(names: tuple[str, ...], have: set[str]) -> str:
    """The lines to add so that the inputs behind ``names`` exist in a space, or ''."""
    radiant = ("globe_temperature" in have
               or any(h.startswith("plane_radiant_temperature") for h in have))
    lacking: list[str] = []
    for name in names:
        for q in INDEX_INPUTS.get(name, (name,) if name in QUANTITIES else ()):
            if q in have or q in lacking or (q == "mean_radiant_temperature" and radiant):
                continue
            lacking.append(q)
    return _remedy(lacking) if lacking else ""


def _a(word: str) -> str:
    """The indefinite article before ``word`` (a globe_temperature, an air_speed)."""
    return "an" if word[:1] in "aeiou" else "a"
