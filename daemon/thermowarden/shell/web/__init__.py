"""The web page and HTTP API: off unless ``web.enabled``; see :mod:`.app`."""

from __future__ import annotations

import os
import pathlib
from collections.abc import Callable, Mapping

from thermowarden.config import SiteConfig
from thermowarden.engine import Engine
from thermowarden.rules import CompiledPack
from thermowarden.shell.inbox import Inbox
from thermowarden.shell.web.app import WebServer, create_app
from thermowarden.shell.web.context import CommandBridge, WebContext
from thermowarden.shell.web.history import StoreReader
from thermowarden.shell.web.live import LiveView, SiteDirectory
from thermowarden.shell.web.users import Sessions, UserEntry, load_users

__all__ = ["LiveView", "WebServer", "build_web"]


def users_path(config: SiteConfig, config_path: str | os.PathLike[str]) -> pathlib.Path | None:
    name = config.web.users_file
    if name is None:
        return None
    p = pathlib.Path(name)
    return p if p.is_absolute() else pathlib.Path(config_path).parent / p


def site_users(config: SiteConfig, config_path: str | os.PathLike[str]
               ) -> dict[str, UserEntry] | None:
    """The users of the site's users file as ``run`` takes them (``check`` reads them through
    this too): None without a users file; a bad file, or a user who names a building or area
    the site does not have, raises :class:`thermowarden.config.ConfigError`."""
    path = users_path(config, config_path)
    if path is None:
        return None
    users = load_users(path)
    places = {x for s in config.spaces for x in (s.building, s.area) if x}
    wrong = [f"{path}: user {u.name!r} names building {b!r}, which the site does not have"
             f" (known: {', '.join(sorted(places)) or 'none'})"
             for u in users.values() for b in (u.buildings or []) if b not in places]
    if wrong:
        from thermowarden.config import ConfigError, ConfigIssue

        raise ConfigError([ConfigIssue(None, w) for w in wrong])
    return users


def build_web(config: SiteConfig, config_path: str | os.PathLike[str],
              packs: Mapping[str, CompiledPack], inbox: Inbox, store_path: pathlib.Path,
              now: Callable[[], float]
              ) -> tuple[LiveView, WebServer, Callable[[Engine], None]]:
    """The live view (for the engine thread to feed), the server (not yet started) and
    what a reload calls with the new engine (the page then follows the new site).
    A bad users file raises :class:`thermowarden.config.ConfigError`."""
    users = site_users(config, config_path)
    sessions = None
    if users is not None:
        sessions = Sessions(users, config.web.session_lifetime_s, store=store_path)
    limits = {rule.key: float(rule.config.max_shelve_s) for pack in packs.values()
              for rule in pack.rules}
    followed = frozenset(rule.key for pack in packs.values() for rule in pack.rules
                         if rule.config.acted_on)
    directory = SiteDirectory.build(config, limits, followed)
    view = LiveView(config.output.prefix)
    ctx = WebContext(directory, view, StoreReader(store_path), sessions,
                     CommandBridge(inbox, f"{config.output.prefix}/commands/", now), now,
                     read_needs_sign_in=config.web.sign_in_to_read)

    def follow(engine: Engine) -> None:
        ctx.follow(SiteDirectory.build(engine.config, {
            rt.rule.key: float(rt.rule.config.max_shelve_s) for rt in engine.rules},
            frozenset(rt.rule.key for rt in engine.rules if rt.rule.config.acted_on)))

    return view, WebServer(create_app(ctx), config.web.host, config.web.port), follow
