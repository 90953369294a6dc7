"""The lease stores for tests: nats-server JetStream on 127.0.0.1:4222, a three-node
cluster started by the test, PostgreSQL on 127.0.0.1:5432 (trust auth, database ``test``).
Every test gets a bucket or schema of its own and removes it afterwards."""

from __future__ import annotations

import asyncio
import uuid
from collections.abc import Callable

import pytest

from tests.shell.conftest import port_open
from thermowarden.shell.leases.nats_kv import NatsLeaseStore
from thermowarden.shell.leases.postgres import PostgresLeaseStore

NATS_URL = "nats://127.0.0.1:4222"
PG_DSN = "host=127.0.0.1 port=5432 dbname=test user=postgres"


def need_nats() -> None:
    if not port_open(4222):
        pytest.skip("nats-server with JetStream is not listening on 127.0.0.1:4222")


def need_postgres() -> None:
    if not port_open(5432):
        pytest.skip("PostgreSQL is not listening on 127.0.0.1:5432")


def drop_bucket(servers: list[str], bucket: str) -> None:
    import nats

    async def run() -> None:
        nc = await nats.connect(servers=servers, connect_timeout=2)
        try:
            await nc.jetstream(timeout=5).delete_key_value(bucket)
        except Exception:  # noqa: BLE001 - already gone
            pass
        await nc.close()

    asyncio.run(run())


def drop_schema(schema: str) -> None:
    import psycopg
    from psycopg import sql

    with psycopg.connect(PG_DSN, autocommit=True) as conn:
        conn.execute(sql.SQL("DROP SCHEMA IF EXISTS {} CASCADE").format(sql.Identifier(schema)))


class StoreFactory:
    """Makes stores of one kind sharing one bucket or schema (each its own connection, as
    separate instances have), and removes them all with the bucket or schema."""

    def __init__(self, kind: str, servers: list[str] | None = None,
                 stream_replicas: int = 1) -> None:
        self.kind = kind
        self.servers = servers or [NATS_URL]
        self.stream_replicas = stream_replicas
        self.name = f"tw_{uuid.uuid4().hex[:10]}"
        self.made: list[NatsLeaseStore | PostgresLeaseStore] = []

    def __call__(self, ttl_s: float = 3.0, servers: list[str] | None = None,
                 mono: Callable[[], float] | None = None) -> NatsLeaseStore | PostgresLeaseStore:
        kw = {} if mono is None else {"mono": mono}
        store: NatsLeaseStore | PostgresLeaseStore
        if self.kind == "nats":
            store = NatsLeaseStore(servers or self.servers, self.name, ttl_s,
                                   stream_replicas=self.stream_replicas, **kw)
        else:
            store = PostgresLeaseStore(PG_DSN, "g1", ttl_s, schema=self.name, **kw)
        store.open()
        self.made.append(store)
        return store

    def cleanup(self) -> None:
        for s in self.made:
            s.close()
        if self.kind == "nats":
            drop_bucket(self.servers, self.name)
        else:
            drop_schema(self.name)
