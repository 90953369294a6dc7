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
class Prepared:
    """A new engine built from the reloaded configuration, not yet holding any state."""

    engine: Engine
    model: SiteModel


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


def prepare_reload(old: Engine, load: Loader) -> Prepared:
    """Load, validate and build the new engine: the slow part, which may run beside the
    engine thread (it only reads ``old``'s frozen configuration). Raises
    :class:`ReloadRefused` when the configuration cannot be taken."""
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
                    start=old.start, sample_every_s=old.sample_every_s,
                    advisory_refresh_s=old.advisories.refresh_s)
    return Prepared(engine, model)


def finish_reload(old: Engine, prepared: Prepared) -> Reloaded:
    """Carry ``old``'s state into the prepared engine (on the engine thread)."""
    effects, notes = carry_over(old, prepared.engine)
    return Reloaded(prepared.engine, prepared.model, effects, notes)


def reload_engine(old: Engine, load: Loader) -> Reloaded:
    """Both steps at once (replay, tests, the bench)."""
    return finish_reload(old, prepare_reload(old, load))
