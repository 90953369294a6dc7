"""A group of instances sharing a site (``thermowarden run --group NAME``): the lease store,
the lease TTL, the standbys per shard and the shards of spaces that declare no area or
building."""

from __future__ import annotations

import re
from typing import Annotated, Literal

from pydantic import Field, field_validator, model_validator

from thermowarden.config.base import Strict

SHARD_NAME = r"^[A-Za-z0-9][A-Za-z0-9_-]{0,63}$"
"""An area or building name (it is part of event ids, which use ``.`` as separator)."""
GROUP_NAME = r"^[A-Za-z0-9_-]{1,64}$"


class NatsStoreConfig(Strict):
    """Leases in a JetStream key-value bucket of a nats-server (cluster)."""

    kind: Literal["nats"]
    servers: list[str] = Field(min_length=1)
    """``nats://host:port`` of each node (the client moves to the next when one goes)."""
    bucket: str | None = Field(None, pattern=r"^[A-Za-z0-9_-]{1,64}$")
    """The key-value bucket (default ``thermowarden-<group>``), created if missing with the
    group's lease TTL."""
    stream_replicas: int = Field(1, ge=1, le=5)
    """Copies of the bucket on the cluster's nodes: 3 on a three-node cluster (a lease then
    survives one node's end). The bucket is created with it (and the TTL) if missing."""

    @field_validator("servers")
    @classmethod
    def _urls(cls, v: list[str]) -> list[str]:
        for url in v:
            if not re.fullmatch(r"(nats|tls)://[^\s/]+:\d{1,5}", url):
                raise ValueError(f"{url!r} is not a nats://host:port URL")
        return v


class PostgresStoreConfig(Strict):
    """Leases in a PostgreSQL table (for sites whose broker is not nats-server). The
    password goes in the DSN's ``passfile`` or the PGPASSWORD environment variable, not
    here."""

    kind: Literal["postgres"]
    dsn: str = Field(min_length=1)
    """A libpq connection string or URL, e.g. ``host=db1 dbname=thermowarden user=tw``."""
    table_schema: str = Field("thermowarden", pattern=r"^[a-z_][a-z0-9_]{0,62}$")
    """The schema holding the ``leases`` and ``presence`` tables (created if missing)."""

    @field_validator("dsn")
    @classmethod
    def _no_password(cls, v: str) -> str:
        if re.search(r"(^|\s)password\s*=", v) or re.search(r"://[^/@\s]*:[^/@\s]*@", v):
            raise ValueError("the DSN holds a password: put it in a passfile or the "
                             "PGPASSWORD environment variable instead")
        return v


class GroupConfig(Strict):
    """Failover and scale-out by shard leases (README: "Scale-out: a group of instances")."""

    name: str | None = Field(None, pattern=GROUP_NAME)
    """The group's name; ``run --group NAME`` gives or overrides it."""
    store: Annotated[NatsStoreConfig | PostgresStoreConfig, Field(discriminator="kind")]
    lease_ttl_s: float = Field(10.0, ge=2.0, le=600.0)
    """A holder that stops renewing loses its shards after this long; a standby takes
    them then. The bound on a space going unevaluated is this plus one tick."""
    margin_s: float | None = Field(None, gt=0)
    """A holder stops publishing this long before its lease could expire by its own
    clock; default a fifth of ``lease_ttl_s``."""
    replicas: int = Field(1, ge=0, le=4)
    """Warm standbys per shard (each ingests and evaluates the shard without publishing)."""
    shard_buckets: int = Field(16, ge=1, le=4096)
    """Hash buckets for the spaces that declare no ``area`` or ``building``."""
    rebalance_after_s: float = Field(3660.0, ge=0)
    """An instance above its fair share hands shards over (one per lease round) only after
    the group's membership has been steady this long (damping), and only to a standby that
    has stood by for the shard for ``standby_warm_s``."""
    standby_warm_s: float | None = Field(None, ge=0)
    """A held shard is handed over (rebalancing) only to a standby that has stood by for it
    this long; default the site's WBGT window (``ingest.wbgt_window_s``) plus one
    ``lease_ttl_s``, so its 60-minute WBGT is whole when it takes the shard; or to one that
    has stood by for it since the holder began to evaluate it (within one ``lease_ttl_s``:
    its windows are as whole as the holder's). Shorter only for a site whose rules use no
    window. (A standby taking the shard of a holder that died or stopped takes it at once,
    whatever this is.)"""

    @model_validator(mode="after")
    def _check(self) -> GroupConfig:
        if self.margin_s is not None and self.margin_s >= self.lease_ttl_s * 2 / 3:
            raise ValueError("margin_s must be shorter than two thirds of lease_ttl_s (the "
                             "lease is renewed every third of it)")
        return self

    @property
    def margin(self) -> float:
        return self.margin_s if self.margin_s is not None else self.lease_ttl_s / 5
