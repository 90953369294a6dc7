"""Shard leases in a JetStream key-value bucket on nats-server (client: nats-py).

One bucket per group (``group.store.bucket``), created with ``history: 1`` and a bucket TTL
(``max_age``) of ``lease_ttl_s``: an entry not written again within the TTL is removed by
the server. Keys:

- ``lease.<shard>``: the shard's lease. *Take* creates the key only if it is absent
  (``kv.create``: a publish that expects the subject's last sequence to be 0, or the
  revision of its delete marker); the take's revision (the stream sequence, which only
  grows) is the lease's **epoch** and goes into the value. *Renew* writes the same value
  only at the revision last written (``kv.update(last=...)``), which restarts the TTL.
  *Release* deletes the key at that revision.
- ``presence.<instance>``: written at every renewal round; its TTL is the liveness.

Shard and instance names are written into keys in URL-safe base64 (a key may hold only
``[-/_=.a-zA-Z0-9]``); the value (JSON) carries them in clear.

With a nats-server cluster, create the bucket with ``stream_replicas: 3``: a write is then
acknowledged only after a majority of the nodes stored it (JetStream's Raft), so a lease
survives one node's end and two instances cannot both create the same key.

nats-py is asyncio: the client runs on an event loop in a thread of its own; the blocking
methods of :class:`NatsLeaseStore` hand their coroutine to that loop and wait at most
``timeout_s`` for it.
"""

from __future__ import annotations

import asyncio
import base64
import contextlib
import json
import logging
import threading
import time
from collections.abc import Callable, Coroutine, Iterable
from typing import Any, TypeVar

import nats
import nats.errors
import nats.js.errors
from nats.js.api import KeyValueConfig

from thermowarden.shell.leases.base import Lease, LeaseStoreError

log = logging.getLogger("thermowarden.leases")

T = TypeVar("T")

LEASE = "lease."
PRESENCE = "presence."


def _key(prefix: str, name: str) -> str:
    return prefix + base64.urlsafe_b64encode(name.encode("utf-8")).decode("ascii")


def _name(key: str, prefix: str) -> str | None:
    try:
        return base64.urlsafe_b64decode(key[len(prefix):].encode("ascii")).decode("utf-8")
    except (ValueError, UnicodeError):
        return None


class NatsLeaseStore:
    """See the module docstring. ``servers``: ``nats://host:port`` URLs of the cluster's
    nodes (the client moves to the next one when its node goes)."""

    def __init__(self, servers: list[str], bucket: str, ttl_s: float, *,
                 stream_replicas: int = 1, timeout_s: float | None = None,
                 mono: Callable[[], float] = time.monotonic) -> None:
        self.servers = servers
        self.bucket = bucket
        self.ttl_s = float(ttl_s)
        self.stream_replicas = stream_replicas
        self.timeout_s = timeout_s if timeout_s is not None else max(0.5, min(2.0,
                                                                              ttl_s / 5))
        self.mono = mono
        self._loop: asyncio.AbstractEventLoop | None = None
        self._thread: threading.Thread | None = None
        self._nc: Any = None
        self._kv: Any = None
        self._revision: dict[str, int] = {}
        """shard -> revision of this instance's latest write of its lease."""

    # ------------------------------------------------------------------ the loop
    def _run(self, coro: Coroutine[Any, Any, T], timeout: float | None = None) -> T:
        if self._loop is None:
            coro.close()
            raise LeaseStoreError("the lease store is not open")
        future = asyncio.run_coroutine_threadsafe(coro, self._loop)
        try:
            return future.result(timeout if timeout is not None else self.timeout_s)
        except TimeoutError as exc:
            future.cancel()
            raise LeaseStoreError(f"nats-server did not answer within {self.timeout_s:g} s"
                                  ) from exc
        except LeaseStoreError:
            raise
        except (nats.errors.Error, OSError) as exc:
            raise LeaseStoreError(f"nats-server: {type(exc).__name__}: {exc}") from exc

    def open(self) -> None:
        if self._loop is None:
            loop = asyncio.new_event_loop()
            self._loop = loop
            self._thread = threading.Thread(target=loop.run_forever, name="thermowarden-nats",
                                            daemon=True)
            self._thread.start()
        if self._kv is None:
            self._run(self._open(), timeout=self.open_timeout_s + 1.0)

    @property
    def open_timeout_s(self) -> float:
        """How long opening the bucket may take, s: a cluster that was just started (or lost
        a node) answers JetStream requests only once it has elected its leaders, so a
        request that times out is sent again until this is over."""
        return max(10.0, 3 * self.timeout_s)

    async def _open(self) -> None:
        async def quiet(exc: Exception) -> None:
            log.debug("nats client: %s", exc)

        if self._nc is None:
            self._nc = await nats.connect(
                servers=self.servers, connect_timeout=max(1, round(self.timeout_s)),
                reconnect_time_wait=0.25, max_reconnect_attempts=-1, allow_reconnect=True,
                ping_interval=max(1, round(self.ttl_s / 3)), max_outstanding_pings=2,
                error_cb=quiet, name="thermowarden-leases")
        js = self._nc.jetstream(timeout=self.timeout_s)
        deadline = time.monotonic() + self.open_timeout_s - self.timeout_s
        while True:
            try:
                kv = await self._create_or_bind(js)
                break
            except (nats.errors.TimeoutError, nats.js.errors.ServiceUnavailableError):
                if time.monotonic() >= deadline:
                    raise
                log.info("nats-server: JetStream not answering yet; asking again")
                await asyncio.sleep(0.25)
        self._kv = kv

    async def _create_or_bind(self, js: Any) -> Any:
        """The group's bucket, created with its TTL and replicas, or the existing one when
        its TTL is the group's."""
        try:
            return await js.create_key_value(KeyValueConfig(
                bucket=self.bucket, history=1, ttl=self.ttl_s,
                replicas=self.stream_replicas))
        except nats.js.errors.BadRequestError:
            # it exists with another configuration: use it only if its TTL is ours (a
            # shorter one would end leases before their holders stop publishing)
            kv = await js.key_value(self.bucket)
            status = await kv.status()
            ttl = status.ttl
            if ttl is None or abs(ttl - self.ttl_s) > 1e-3:
                raise LeaseStoreError(
                    f"the key-value bucket {self.bucket!r} exists with a TTL of "
                    f"{ttl if ttl is not None else 'none'} s, not the group's lease_ttl_s of "
                    f"{self.ttl_s:g} s: delete the bucket or use another name") from None
            return kv

    def close(self) -> None:
        loop, nc = self._loop, self._nc
        self._kv = None
        self._nc = None
        if loop is None:
            return
        if nc is not None:
            with contextlib.suppress(Exception):
                asyncio.run_coroutine_threadsafe(nc.close(), loop).result(5.0)

        async def finish() -> None:
            tasks = [t for t in asyncio.all_tasks() if t is not asyncio.current_task()]
            for t in tasks:
                t.cancel()
            await asyncio.gather(*tasks, return_exceptions=True)

        with contextlib.suppress(Exception):
            asyncio.run_coroutine_threadsafe(finish(), loop).result(5.0)
        loop.call_soon_threadsafe(loop.stop)
        if self._thread is not None:
            self._thread.join(5.0)
        loop.close()
        self._loop = None
        self._thread = None

    # ------------------------------------------------------------------ leases
    def _value(self, shard: str, holder: str, epoch: int | None) -> bytes:
        return json.dumps({"shard": shard, "holder": holder, "epoch": epoch}).encode()

    def take(self, shard: str, holder: str) -> Lease | None:
        t0 = self.mono()
        return self._run(self._take(shard, holder, t0))

    async def _take(self, shard: str, holder: str, t0: float) -> Lease | None:
        kv = self._bucket()
        key = _key(LEASE, shard)
        try:
            revision = await kv.create(key, self._value(shard, holder, None))
        except nats.js.errors.KeyWrongLastSequenceError:
            return None
        # the value's epoch stays null until the first renewal writes it: a reader takes
        # the entry's revision, which is then the take's
        self._revision[shard] = revision
        return Lease(shard, holder, revision, t0 + self.ttl_s)

    def renew(self, lease: Lease) -> Lease | None:
        t0 = self.mono()
        return self._run(self._renew(lease, t0))

    async def _renew(self, lease: Lease, t0: float) -> Lease | None:
        kv = self._bucket()
        key = _key(LEASE, lease.shard)
        value = self._value(lease.shard, lease.holder, lease.epoch)
        for _ in range(2):
            last = self._revision.get(lease.shard)
            if last is None:
                break
            try:
                self._revision[lease.shard] = await kv.update(key, value, last=last)
                return Lease(lease.shard, lease.holder, lease.epoch, t0 + self.ttl_s)
            except nats.js.errors.KeyWrongLastSequenceError:
                # an earlier renewal may have landed without its answer reaching us: carry
                # on from the stored revision if the lease is still ours, else it is lost
                current = await self._get(lease.shard)
                if current is None or current[0] != lease.holder or current[1] != lease.epoch:
                    self._revision.pop(lease.shard, None)
                    return None
                self._revision[lease.shard] = current[2]
        return None

    def release(self, lease: Lease) -> None:
        self._run(self._release(lease))

    async def _release(self, lease: Lease) -> None:
        last = self._revision.pop(lease.shard, None)
        if last is None:
            return
        with contextlib.suppress(nats.js.errors.KeyWrongLastSequenceError):
            await self._bucket().delete(_key(LEASE, lease.shard), last=last)

    async def _get(self, shard: str) -> tuple[str, int, int] | None:
        """(holder, epoch, revision) of the shard's live lease, or None."""
        try:
            entry = await self._bucket().get(_key(LEASE, shard))
        except nats.js.errors.KeyNotFoundError:
            return None
        try:
            data = json.loads(entry.value)
            holder, epoch = data["holder"], data["epoch"]
        except (ValueError, TypeError, KeyError):
            return None
        if epoch is None:
            epoch = entry.revision  # the moment between a take and its first write
        if not isinstance(holder, str) or not isinstance(epoch, int):
            return None
        return holder, epoch, int(entry.revision)

    def read(self, shards: Iterable[str]) -> dict[str, Lease]:
        wanted = list(shards)
        t0 = self.mono()
        got = self._run(self._read(wanted), timeout=self.timeout_s * 2)
        return {s: Lease(s, h, e, t0 + self.ttl_s) for s, (h, e) in got.items()}

    async def _read(self, shards: list[str]) -> dict[str, tuple[str, int]]:
        found = await asyncio.gather(*(self._get(s) for s in shards))
        return {s: (g[0], g[1]) for s, g in zip(shards, found, strict=True) if g is not None}

    # ------------------------------------------------------------------ presence
    def announce(self, instance: str) -> None:
        self._run(self._bucket().put(_key(PRESENCE, instance),
                                     json.dumps({"instance": instance}).encode()))

    def withdraw(self, instance: str) -> None:
        self._run(self._bucket().delete(_key(PRESENCE, instance)))

    def present(self) -> set[str]:
        return self._run(self._present(), timeout=self.timeout_s * 2)

    async def _present(self) -> set[str]:
        # the stream's subjects under presence. (one request to the stream, no consumer to
        # create: a consumer is slow to make while a cluster's stream elects a leader),
        # then each key, skipping those withdrawn (a delete marker stays until the TTL)
        subject = f"$KV.{self.bucket}."
        info = await self._nc.jetstream(timeout=self.timeout_s).stream_info(
            f"KV_{self.bucket}", subjects_filter=f"{subject}{PRESENCE}>")
        keys = [k[len(subject):] for k in (info.state.subjects or {})]
        found = await asyncio.gather(*(self._exists(k) for k in keys))
        names = (_name(k, PRESENCE) for k, ok in zip(keys, found, strict=True) if ok)
        return {n for n in names if n is not None}

    async def _exists(self, key: str) -> bool:
        try:
            await self._bucket().get(key)
            return True
        except nats.js.errors.KeyNotFoundError:
            return False

    def _bucket(self) -> Any:
        if self._kv is None:
            raise LeaseStoreError("the lease store is not open")
        return self._kv
