"""Leases on shards of a site, held in a store that offers compare-and-set and expiry.

A **lease** gives one instance (its *holder*) the right to publish for one shard until it
expires. Its **epoch** grows with every change of holder and never goes back, so a reader
that has seen epoch 7 of a shard ignores anything published under epoch 6. Two stores
implement :class:`LeaseStore`: a JetStream key-value bucket on nats-server
(:mod:`.nats_kv`) and a PostgreSQL table (:mod:`.postgres`).

Time: ``expires_mono`` is on the *caller's* monotonic clock (``time.monotonic``, s). For a
lease this instance took or renewed it is ``t0 + ttl_s``, where ``t0`` was read *before* the
request went out: the store's own expiry counts from when it received the request, later,
so the caller's deadline comes first (less any difference between the two clocks' rates,
which is what the fencing margin covers). For a lease read from the store and held by
another instance it is an estimate and only informs coverage, never publication.

Every method may block up to the store's timeout and raises :class:`LeaseStoreError` when
the store cannot be reached or answers something unexpected: the caller then holds
nothing once its own leases run out.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Protocol


class LeaseStoreError(Exception):
    """The lease store could not be reached or refused the request in an unexpected way."""


@dataclass(frozen=True)
class Lease:
    """One shard's lease, as far as this instance knows."""

    shard: str
    holder: str
    epoch: int
    """Grows with every change of holder (the KV revision of the take, or the table's
    counter); never reused for the shard."""
    expires_mono: float
    """When it expires, on the caller's monotonic clock (s); see the module docstring."""


class LeaseStore(Protocol):
    """Shard leases and instance presence. Blocking calls; used from one thread."""

    ttl_s: float
    """A lease or presence entry not renewed for this long expires (s)."""

    def open(self) -> None:
        """Connect and create what is missing (bucket, tables)."""

    def close(self) -> None:
        """Disconnect (leases held stay until they expire or are released)."""

    def take(self, shard: str, holder: str) -> Lease | None:
        """Take ``shard`` if it has no live lease; ``None`` when another holds it."""

    def renew(self, lease: Lease) -> Lease | None:
        """Extend a lease this instance holds; ``None`` when it is no longer held (expired,
        taken by another)."""

    def release(self, lease: Lease) -> None:
        """Give a held lease up at once (its shard can be taken straight away)."""

    def read(self, shards: Iterable[str]) -> dict[str, Lease]:
        """The live leases among ``shards`` (shard -> lease); a shard without one is
        missing."""

    def announce(self, instance: str) -> None:
        """Say ``instance`` is present for another ``ttl_s``."""

    def withdraw(self, instance: str) -> None:
        """Say ``instance`` is gone (an orderly stop)."""

    def present(self) -> set[str]:
        """The instances whose presence has not expired."""
