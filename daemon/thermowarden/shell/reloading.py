"""Hot reload (SIGHUP, ``systemctl reload``): read the site and rule packs again, refuse an
invalid configuration with the same messages as ``thermowarden check`` while the old one
keeps running, and carry every unchanged space's and rule's state into the new engine
(:mod:`thermowarden.engine.reload`).

Some settings are bound to the running process and need a restart: the broker, the output
prefix, the site id and time zone, and the evaluation interval. A reload that changes them is
refused and says so.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

from thermowarden.config import ConfigError, SiteConfig
from thermowarden.effects import Effect
from thermowarden.engine import Engine
from thermowarden.engine.reload import carry_over
from thermowarden.rules import CompiledPack
from thermowarden.site_model import SiteModel, build_site_model

Loader = Callable[[], tuple[SiteConfig, Mapping[str, CompiledPack]]]
RESTART_ONLY = ("broker", "output", "site.id", "site.timezone", "evaluation.tick_s")


class ReloadRefused(Exception):
    """The new configuration was not taken; ``lines`` say why (as ``check`` prints them)."""

    def __init__(self, lines: list[str]) -> None:
        super().__init__("\n".join(lines))
        self.lines = lines


@dataclass
class Reloaded:
    engine: Engine
    model: SiteModel
    effects: list[Effect]
    notes: list[str]


def _get(config: SiteConfig, dotted: str) -> object:
    node: object = config
    for part in dotted.split("."):
        node = getattr(node, part)
    return node


def restart_only_changes(old: SiteConfig, new: SiteConfig) -> list[str]:
    """Settings that differ and cannot change without a restart."""
    return [name for name in RESTART_ONLY if _get(old, name) != _get(new, name)]


def reload_engine(old: Engine, load: Loader) -> Reloaded:
    """Build an engine from the configuration ``load`` returns and carry ``old``'s state
    into it; raises :class:`ReloadRefused` and changes nothing when it cannot."""
    try:
        config, packs = load()
    except ConfigError as exc:
        raise ReloadRefused([str(i) for i in exc.issues]) from None
    except (OSError, ValueError) as exc:
        raise ReloadRefused([str(exc)]) from None
    changed = restart_only_changes(old.config, config)
    if changed:
        raise ReloadRefused([f"{', '.join(changed)} changed: that needs a restart "
                             "(systemctl restart thermowarden)"])
    model = build_site_model(config)
    engine = Engine(config, model, packs, conditions_every_s=old.publication.conditions_every_s,
                    start=old.start, sample_every_s=old.sample_every_s)
    effects, notes = carry_over(old, engine)
    return Reloaded(engine, model, effects, notes)
