"""Hot reload (SIGHUP, ``systemctl reload``): read the site and rule packs again, refuse an
invalid configuration with the same messages as ``thermowarden check`` while the old one
keeps running, and carry every unchanged space's and rule's state into the new engine
(:mod:`thermowarden.engine.reload`).

In the running service (:class:`Reloads`) the new configuration is loaded and built on a
thread of its own while the engine thread goes on evaluating; the engine thread then carries
the state over and swaps the new engine in. systemd hears ``RELOADING=1`` and, after either
outcome, ``READY=1``.

Some settings are bound to the running process and need a restart: the broker, the output
prefix, the site id and time zone, and the evaluation interval. A reload that changes them is
refused and says so.
"""

from __future__ import annotations

import logging
import queue
import threading
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Protocol

from thermowarden.config import ConfigError, SiteConfig
from thermowarden.effects import Effect
from thermowarden.engine import Engine
from thermowarden.engine.reload import carry_over
from thermowarden.rules import CompiledPack
from thermowarden.shell.heap import freeze_heap
from thermowarden.site_model import SiteModel, build_site_model

if TYPE_CHECKING:
    from thermowarden.shell.delivery import Delivery
    from thermowarden.shell.group.instance import Group
    from thermowarden.shell.mqtt_link import MqttLink

log = logging.getLogger("thermowarden.service")

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


class ReloadHost(Protocol):
    """What a reload uses of the service that runs it."""

    engine: Engine
    """Replaced by the new engine."""
    group: Group | None
    dirty: bool
    reload_observers: list[Callable[[Engine], None]]
    """Called with the new engine after every reload (the web page's site directory)."""

    def execute(self, effects: list[Effect]) -> None:
        """Store, then publish."""
        ...


class Reloads:
    """Reloads in the running service (see the module docstring). ``reloader`` loads and
    builds a new engine (run beside the engine thread)."""

    def __init__(self, host: ReloadHost, reloader: Callable[[Engine], Prepared] | None,
                 notify: Callable[[str], bool], link: MqttLink, command_prefix: str,
                 per_space_subscriptions: bool, delivery: Delivery | None) -> None:
        self.host = host
        self.reloader = reloader
        self.notify = notify
        self.link = link
        self.command_prefix = command_prefix
        self.per_space_subscriptions = per_space_subscriptions
        self.delivery = delivery
        self.prepared: queue.Queue[Prepared] = queue.Queue()
        self.reloading = threading.Event()

    def start(self) -> None:
        """Load and build the new configuration beside the engine thread, which goes on
        evaluating meanwhile; :meth:`finish_prepared` swaps it in."""
        if self.reloader is None:
            log.warning("reload requested but not available here")
            return
        if self.reloading.is_set():
            log.info("a reload is already in progress")
            return
        self.reloading.set()
        self.notify(f"RELOADING=1\nMONOTONIC_USEC={time.monotonic_ns() // 1000}")
        old = self.host.engine
        reloader = self.reloader

        def prepare() -> None:
            try:
                self.prepared.put(reloader(old))
                return
            except ReloadRefused as exc:
                for line in exc.lines:
                    log.error("reload refused: %s", line)
                log.error("reload refused: %d problem(s); still running the previous "
                          "configuration", len(exc.lines))
            except Exception:  # noqa: BLE001 - a failed reload must not stop the service
                log.exception("reload failed; still running the previous configuration")
            self.reloading.clear()
            self.notify("READY=1")

        threading.Thread(target=prepare, name="thermowarden-reload", daemon=True).start()

    def finish_prepared(self) -> None:
        """Swap in a new engine when one was prepared (engine thread)."""
        try:
            prepared = self.prepared.get_nowait()
        except queue.Empty:
            return
        self._finish(prepared)

    def _finish(self, prepared: Prepared) -> None:
        """Carry the running state into the new engine and swap it in (engine thread)."""
        host = self.host
        try:
            try:
                result = finish_reload(host.engine, prepared)
            except Exception:  # noqa: BLE001 - the old engine is intact: keep running it
                log.exception("reload failed; still running the previous configuration")
                return
            host.engine = result.engine
            for note in result.notes:
                log.info("%s", note)
            for observer in host.reload_observers:
                observer(result.engine)
            host.execute(result.effects)
            config = result.engine.config
            if host.group is not None:
                host.group.reapplied()
            else:
                subs = result.model.subscriptions(per_space=self.per_space_subscriptions)
                self.link.set_subscriptions(subs + [f"{self.command_prefix}#"])
            if self.delivery is not None:
                self.delivery.reconfigure(config.delivery, config.site.timezone)
            host.dirty = True
            freeze_heap()
            log.info("reloaded: %d space(s), %d point(s), %d rule(s)",
                     result.model.n_spaces, len(result.model.points), len(result.engine.rules))
        finally:
            self.reloading.clear()
            self.notify("READY=1")
