"""The composition root: one function that builds the running service from a site file."""

from __future__ import annotations

import logging
import os
import pathlib
import queue
import re
import socket
import zlib
from collections.abc import Mapping
from dataclasses import dataclass
from http.server import ThreadingHTTPServer

from pydantic import ValidationError

from thermowarden import __version__
from thermowarden.config import (
    BrokerConfig,
    ConfigError,
    ConfigIssue,
    GroupConfig,
    NatsStoreConfig,
    SiteConfig,
    load_site,
)
from thermowarden.engine import Engine, iso
from thermowarden.rules import CompiledPack, load_rule_packs
from thermowarden.shell.clock import Clock
from thermowarden.shell.delivery import Delivery
from thermowarden.shell.group.instance import Group
from thermowarden.shell.http_ops import start_http
from thermowarden.shell.inbox import Control, Inbox
from thermowarden.shell.lease_keeper import lease_clock
from thermowarden.shell.leases import LeaseStore
from thermowarden.shell.metrics import Metrics
from thermowarden.shell.mqtt_link import MqttLink
from thermowarden.shell.reloading import prepare_reload
from thermowarden.shell.service import Service
from thermowarden.shell.store import (
    MOVE_ASIDE_HINT,
    OUTBOX_COUNT,
    Store,
    StoreError,
    count_rows,
    move_aside,
)
from thermowarden.shell.wall_offset import wall_clock
from thermowarden.shell.warmup import warm_up
from thermowarden.shell.web import WebServer, build_web
from thermowarden.site_model import build_site_model

log = logging.getLogger("thermowarden")

INBOX_SIZE = 100_000
PACKET_OVERHEAD = 4096
"""Room for the topic and properties on top of the largest payload we accept (MQTT 5
maximum packet size sent to the broker)."""


@dataclass
class Running:
    service: Service
    http: ThreadingHTTPServer | None
    web: WebServer | None = None


def shard_spaces(config: SiteConfig, index: int, count: int) -> SiteConfig:
    """Keep the spaces of shard ``index`` of ``count`` (a stable hash of the space id)."""
    keep = [s for s in config.spaces if zlib.crc32(s.id.encode()) % count == index]
    return config.model_copy(update={"spaces": keep})


def only_spaces(config: SiteConfig, ids: list[str]) -> SiteConfig:
    wanted = set(ids)
    unknown = wanted - {s.id for s in config.spaces}
    if unknown:
        raise ValueError(f"--spaces names unknown space(s): {', '.join(sorted(unknown))}")
    return config.model_copy(update={"spaces": [s for s in config.spaces if s.id in wanted]})


def lease_store(cfg: GroupConfig, group: str) -> LeaseStore:
    """The lease store the group section names (not yet connected)."""
    store = cfg.store
    if isinstance(store, NatsStoreConfig):
        from thermowarden.shell.leases.nats_kv import NatsLeaseStore

        return NatsLeaseStore(store.servers, store.bucket or f"thermowarden-{group}",
                              cfg.lease_ttl_s, stream_replicas=store.stream_replicas,
                              mono=lease_clock)
    from thermowarden.shell.leases.postgres import PostgresLeaseStore

    return PostgresLeaseStore(store.dsn, group, cfg.lease_ttl_s, schema=store.table_schema,
                              mono=lease_clock)


def load_configuration(config_path: str, *, broker_url: str | None = None,
                       protocol: str | None = None, shard: tuple[int, int] | None = None,
                       spaces: list[str] | None = None, overrides: dict[str, str] | None = None
                       ) -> tuple[SiteConfig, Mapping[str, CompiledPack]]:
    """The site (with the command line's overrides and this instance's spaces) and its rule
    packs, validated as ``check`` does; at start and at every reload. Raises
    :class:`ConfigError` (or ValueError for ``--spaces`` naming an unknown space)."""
    config = load_site(config_path, {**os.environ, **(overrides or {})})
    if broker_url or protocol:
        urls = [u.strip() for u in broker_url.split(",") if u.strip()] if broker_url else []
        override: dict[str, object] = {k: v for k, v in (
            ("url", urls[0] if urls else None), ("protocol", protocol)) if v}
        if len(urls) > 1:
            override["fallback_urls"] = urls[1:]
        try:
            broker = BrokerConfig.model_validate({**config.broker.model_dump(), **override})
        except ValidationError as exc:
            raise ConfigError([
                ConfigIssue(None, "--broker: " + str(e["msg"]).removeprefix("Value error, "))
                for e in exc.errors()]) from None
        config = config.model_copy(update={"broker": broker})
    if shard is not None:
        config = shard_spaces(config, *shard)
    if spaces:
        config = only_spaces(config, spaces)
    names = {n for s in config.spaces for n in config.rule_packs(s)}
    return config, load_rule_packs(names, config.rule_dirs, base=config_path)


def delivery_site(config: SiteConfig) -> tuple[dict[str, tuple[str | None, str]],
                                                str | None]:
    """For delivery: space id -> (building or area id, its place as people read it), and
    the web page's address for links in messages."""
    places: dict[str, tuple[str | None, str]] = {}
    for s in config.spaces:
        b = config.level_name("building", None, s.building)
        lv = config.level_name("floor" if s.floor is not None else "area", s.building,
                               s.floor or s.area)
        places[s.id] = (s.building or s.area, " · ".join(x for x in (b, lv) if x))
    web = config.web
    url = web.public_url or (f"http://{web.host}:{web.port}" if web.enabled else None)
    return places, url


def bootstrap(config_path: str, *, broker_url: str | None = None, http_port: int | None = None,
              state_dir: str | None = None, shard: tuple[int, int] | None = None,
              spaces: list[str] | None = None, protocol: str | None = None,
              clock: Clock | None = None, http_host: str = "127.0.0.1",
              overrides: dict[str, str] | None = None,
              move_damaged_store: bool = False, group: str | None = None,
              instance: str | None = None) -> Running:
    """Load, check and wire everything; returns the service ready to :meth:`Service.run`.

    Raises :class:`ConfigError` (the caller prints it and exits non-zero) for a bad site,
    :class:`StoreError` (one line: the file and what to do) for a store that cannot be used.
    ``overrides`` are extra THERMOWARDEN_... settings on top of the environment.
    ``move_damaged_store``: a store that fails its check is renamed aside and a new one
    begins (live advisories are raised again from fresh readings).
    ``group``: share the spaces with the other instances of this group (``instance``: this
    one's name in it); see :mod:`thermowarden.shell.group`.
    """
    if group and (shard or spaces):
        raise ValueError("--group shares every space of the site: not with --shard or "
                         "--spaces")
    def load() -> tuple[SiteConfig, Mapping[str, CompiledPack]]:
        return load_configuration(config_path, broker_url=broker_url, protocol=protocol,
                                  shard=shard, spaces=spaces, overrides=overrides)

    config, packs = load()
    if config.group is not None and config.group.name and not group:
        group = config.group.name
    if group and config.group is None:
        raise ConfigError([ConfigIssue(None, f"--group {group}: the site file has no group "
                                       "section (the lease store: nats or postgres)")])
    model = build_site_model(config)
    clock = clock or Clock(wall=wall_clock())
    state = pathlib.Path(state_dir or os.environ.get("STATE_DIRECTORY") or "state")
    site_id = config.site.id
    instance = (instance or config.broker.client_id
                or (f"{site_id}-{socket.gethostname()}" if group else f"thermowarden-{site_id}"))
    if group and not re.fullmatch(r"[A-Za-z0-9_\-]{1,64}", instance):
        raise ValueError(f"instance name {instance!r}: letters, digits, - and _ only (it is "
                         "a topic level)")
    suffix = (f"-shard{shard[0]}of{shard[1]}" if shard else
              f"-{instance}" if group else "")
    store_path = state / f"{config.site.id}{suffix}.sqlite3"

    def open_store() -> tuple[Store, Engine, list[str]]:
        """The store, checked record by record, and the engine with its live advisories
        (before the comfort models are loaded: a bad store is refused at once)."""
        store = Store(store_path)
        try:
            store.check_records()
            engine = Engine(config, model, packs, start=clock.now())
            # a group member continues advisories from their retained messages, not its
            # store
            malformed: list[str] = []
            notes = engine.restore([] if group else store.advisories(), malformed)
            if malformed:
                more = f" (and {len(malformed) - 1} more)" if len(malformed) > 1 else ""
                raise StoreError(f"store {store_path}: table advisories, row "
                                 f"{malformed[0]}{more}; {MOVE_ASIDE_HINT}", damaged=True)
        except BaseException:
            store.close()
            raise
        return store, engine, notes

    try:
        store, engine, notes = open_store()
    except StoreError as exc:
        if not (move_damaged_store and exc.damaged):
            raise
        log.error("%s", exc)
        moved = move_aside(store_path, clock.now())
        log.warning("the damaged store was moved aside to %s (kept, not deleted); starting "
                    "with an empty store: live advisories are raised again from fresh "
                    "readings, unsent events and deliveries of the old store are not sent",
                    moved)
        store, engine, notes = open_store()
    warm_up(log.info)
    for note in notes:
        log.warning(note)
    restored = len(engine.live_advisories())
    if restored:
        log.info("restored %d live advisory(ies) from %s", restored, store.path)
    stored_means = store.daily_means()
    if stored_means:
        seeds = list(config.site.outdoor_daily_means)
        engine.state.daily_means = (list(stored_means) + seeds[len(stored_means):])[:30]
    metrics = Metrics()
    # counted in the table when asked, so the gauge never drifts from it
    metrics.outbox_depth.set_function(lambda: count_rows(store_path, OUTBOX_COUNT))
    inbox = Inbox(INBOX_SIZE)
    control: queue.Queue[Control] = queue.Queue()
    prefix = config.output.prefix
    since = iso(clock.now())
    if shard:
        instance += f"-{shard[0]}of{shard[1]}"
    status = {"schema": "thermowarden.status/1", "site": config.site.id, "instance": instance,
              "since": since, "version": __version__, "spaces": model.n_spaces,
              "advisory_only": True}
    status_topic = f"{prefix}/status" + (f"/{instance}" if shard or group else "")
    subs = model.subscriptions(per_space=shard is not None or bool(spaces))
    subs.append(f"{prefix}/commands/#")
    v311 = config.broker.protocol == "3.1.1"
    link = MqttLink(config.broker, subs, status_topic, {**status, "state": "online"},
                    {**status, "state": "offline"}, inbox, control, metrics, instance,
                    command_prefix=f"{prefix}/commands/", now=clock.now,
                    max_packet_bytes=max(config.ingest.max_payload_bytes,
                                         config.commands.max_body_bytes) + PACKET_OVERHEAD,
                    max_command_bytes=config.commands.max_body_bytes,
                    identity_property=config.commands.identity_property,
                    echo_prefix=f"{prefix}/events/" if v311 else None)
    # always there, so a reload can turn delivery on; idle without audiences
    delivery = Delivery(config.delivery, config.site.timezone, store.path,
                        registry=metrics.registry, now=clock.now)
    delivery.set_site(*delivery_site(config))
    service = Service(engine, link, store, metrics, inbox, control, f"{prefix}/commands/",
                      f"{prefix}/replies", clock, delivery=delivery,
                      reloader=lambda old: prepare_reload(old, load),
                      per_space_subscriptions=shard is not None or bool(spaces))
    service.reload_observers.append(lambda e: delivery.set_site(*delivery_site(e.config)))
    if group:
        assert config.group is not None
        service.group = Group(group, instance, config.group, lease_store(config.group, group),
                              prefix)
        link.watch = service.group.watch_prefixes()
        link.resend_filter = service.group.allows_bytes
        service.group.attach(service)
    web = None
    if config.web.enabled:
        view, web, follow = build_web(config, config_path, packs, inbox, store.path,
                                      clock.now)
        service.observers.append(view.observe)
        service.reload_observers.append(follow)
        web.start()
    http = None
    if http_port is not None:
        http = start_http(http_port, metrics, service.alive, service.ready, host=http_host)
    log.info("thermowarden %s: site %s, %d space(s), %d point(s), %d rule pack(s), broker %s",
             __version__, config.site.id, model.n_spaces, len(model.points), len(packs),
             config.broker.url)
    return Running(service, http, web)

