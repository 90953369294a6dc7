"""Checks of a whole loaded site that its models alone cannot make: the rule packs it names
exist, and its windows have what the sun-on-the-facade forecast needs. Each issue carries
its position in the site file."""

from __future__ import annotations

import difflib
import os
import pathlib
from typing import Any

from thermowarden.config.errors import ConfigIssue
from thermowarden.config.positions import SourceMap
from thermowarden.config.site import SiteConfig


def rule_pack_name_issues(config: SiteConfig, smap: SourceMap, site_path: pathlib.Path
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
    inherited: set[tuple[str, ...]] = set()
    for b_no, b in enumerate(config.buildings):
        levels: list[tuple[tuple[str | int, ...], Any]] = [(("buildings", b_no), b)]
        levels += [(("buildings", b_no, kind, f_no), f) for kind in ("floors", "areas")
                   for f_no, f in enumerate(getattr(b, kind))]
        for where, level in levels:
            if level.rule_packs is not None:
                check(level.rule_packs, (*where, "rule_packs"))
                inherited.add(tuple(level.rule_packs))
    for a_no, a in enumerate(config.areas):
        if a.rule_packs is not None:
            check(a.rule_packs, ("areas", a_no, "rule_packs"))
            inherited.add(tuple(a.rule_packs))
    for i, space in enumerate(config.spaces):
        if space.rule_packs is not None and tuple(space.rule_packs) not in inherited:
            check(space.rule_packs, (*config.origin(i), "rule_packs"))
    return issues


def window_issues(config: SiteConfig, smap: SourceMap) -> list[ConfigIssue]:
    """What the models alone cannot see: windows need the site's latitude and longitude,
    and a window's ``shading_point`` must be the topic of a ``shading_position`` point of
    its space (each issue at its position in the file)."""
    issues: list[ConfigIssue] = []
    site = config.site
    for k, space in enumerate(config.spaces):
        if not space.windows:
            continue
        if site.latitude is None or site.longitude is None:
            issues.append(ConfigIssue(
                smap.find(("spaces", k, "windows"), key=True),
                f"spaces.{k}.windows: windows need the site's position: set site.latitude "
                "and site.longitude (degrees, north and east positive)"))
        shading = [p.topic for p in space.points if p.quantity == "shading_position"]
        for w, window in enumerate(space.windows):
            if window.shading_point is not None and window.shading_point not in shading:
                where = f"spaces.{k}.windows.{w}.shading_point"
                known = ", ".join(repr(t) for t in shading) or "none"
                issues.append(ConfigIssue(
                    smap.find(("spaces", k, "windows", w, "shading_point")),
                    f"{where}: {window.shading_point!r} is not a shading_position point of "
                    f"space {space.id!r} (its shading_position points: {known})"))
    return issues
