"""``thermowarden check``: validate a site file and describe what it resolves to."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from thermowarden.config import ConfigError, ConfigIssue, SiteConfig, load_site
from thermowarden.core.quantities import QUANTITIES
from thermowarden.core.topics import TREE_PLACEHOLDERS
from thermowarden.site_model import (
    DEFAULT_STUCK_AFTER_S,
    SITE,
    PointSpec,
    SiteModel,
    build_site_model,
)


@dataclass
class CheckReport:
    """The outcome of checking a site: the model when valid, issues, and warnings."""

    config: SiteConfig | None = None
    model: SiteModel | None = None
    issues: list[ConfigIssue] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.issues


def check_site(path: str, prepare: Callable[[], None] | None = None) -> CheckReport:
    """Validate the site file, the CSV it refers to, and the rule packs it names."""
    report = CheckReport()
    try:
        config = load_site(path)
    except ConfigError as exc:
        report.issues = exc.issues
        return report
    report.config = config
    report.model = build_site_model(config)
    from thermowarden.rules import (
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
    provided = provided_inputs(report.model)
    lacking: set[tuple[str, str]] = set()
    for i, space in enumerate(config.spaces):
        for name in config.rule_packs(space):
            for rule, missing in missing_inputs(packs[name], report.model, i, provided):
                lacking.add((space.id, f"{name}.{rule}"))
                report.warnings.append(
                    f"space {space.id}: rule {name}.{rule} needs {', '.join(missing)}, which "
                    "no point provides")
    from thermowarden.engine.finishing import unfinishable_rules

    if prepare is not None:
        prepare()  # the comfort models load (or compile, once) only for a valid site
    for u in unfinishable_rules(report.model, packs):
        if (u.space, u.rule) in lacking:
            continue
        because = f"{', '.join(u.missing)} can never be known there" if u.missing else \
            "its expression can never be true"
        if u.which == "clear":
            report.warnings.append(
                f"space {u.space}: rule {u.rule} could raise but never clear on its own: "
                f"its clear condition reads {because} (add the point, or write the clear "
                "condition with the same inputs as the raise condition)")
        else:
            report.warnings.append(
                f"space {u.space}: rule {u.rule} can never raise: its condition reads "
                f"{because}")
    return report


def grouped_warnings(warnings: list[str], shown: int = 3) -> list[str]:
    """Warnings that differ only in the space they name, as one line each:
    ``5000 spaces (a, b, c and 4997 more): rule ... needs ...``."""
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
        if not ids:
            lines.append(key)
        elif len(ids) == 1:
            lines.append(f"space {ids[0]}: {key}")
        else:
            more = f" and {len(ids) - shown} more" if len(ids) > shown else ""
            lines.append(f"{len(ids)} spaces ({', '.join(ids[:shown])}{more}): {key}")
    return lines


def resolved_map(model: SiteModel) -> list[str]:
    """space -> quantity -> topic, unit, format, as lines for a person."""
    lines: list[str] = []
    by_space: dict[int, list[str]] = {}
    for p in model.points:
        tags = ", ".join(f"{k} {v}" for k, v in (("side", p.side), ("height", p.height),
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
