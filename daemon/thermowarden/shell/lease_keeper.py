"""The lease keeper of one instance of a group (:mod:`thermowarden.shell.group`): a thread of
its own, with blocking calls to the lease store (:mod:`thermowarden.shell.leases`), that runs
a round every sixth of the lease TTL. A round says this instance is present, renews the
leases it holds (every other round: a third of the TTL), reads every shard's holder and the
live instances, and takes or gives up shards as :func:`thermowarden.core.shards.plan` says.
Each round's result goes to the engine thread as a :class:`Round` on a queue; the keeper
touches nothing else.
"""

from __future__ import annotations

import logging
import math
import queue
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

from thermowarden.config import GroupConfig
from thermowarden.core.shards import View, first_standbys, plan
from thermowarden.shell.leases import Lease, LeaseStore, LeaseStoreError

log = logging.getLogger("thermowarden.group")

GRACE_ROUNDS = 1.5
"""A free shard whose first taker did not take it is taken by others after this many
renewal periods (thirds of the TTL)."""
READS_PER_RENEWAL = 2
"""Rounds per renewal: the leases are read twice as often as they are renewed, so a
standby sees a lapsed lease within a sixth of the TTL."""
RETRY_S = 1.0
"""A round that could not reach the store is tried again after this long."""


def lease_clock() -> float:
    """Seconds that keep counting while the machine is suspended (CLOCK_BOOTTIME where
    there is one): a lease's deadline must not stand still while the store's clock runs."""
    boottime = getattr(time, "CLOCK_BOOTTIME", None)
    return time.clock_gettime(boottime) if boottime is not None else time.monotonic()


@dataclass(frozen=True)
class Round:
    """One round of the lease keeper, as the engine thread receives it."""

    started: float
    """Lease clock before the round's first store call."""
    ok: bool
    held: dict[str, Lease]
    standby: frozenset[str]
    holders: dict[str, str]
    """Shard -> holder, as read this round (or the last round that could read)."""
    live: frozenset[str]
    error: str | None = None


class LeaseKeeper:
    """The lease keeper's thread; see the module docstring."""

    def __init__(self, store: LeaseStore, me: str, shards: list[str], cfg: GroupConfig,
                 out: queue.Queue[Round], clock: Callable[[], float] = lease_clock) -> None:
        self.store = store
        self.me = me
        self.shards = sorted(set(shards))
        self.cfg = cfg
        self.out = out
        self.clock = clock
        self.renew_every = cfg.lease_ttl_s / 3
        self.period = self.renew_every / READS_PER_RENEWAL
        self.renewed_at = -math.inf
        self.held: dict[str, Lease] = {}
        self.holders: dict[str, str] = {}
        self.live: frozenset[str] = frozenset()
        self.standby: frozenset[str] = frozenset()
        self.free_since: dict[str, float] = {}
        self.last_holder: dict[str, str] = {}
        self.warm_s = 0.0
        """A shard is handed over only to a standby that has stood by this long (set by
        :class:`Group`: the site's WBGT window and one TTL)."""
        self.first_standby: dict[str, str] = {}
        self.standby_since: dict[str, float] = {}
        """Shard -> since when its first standby has been ``first_standby[shard]``."""
        self.evaluating_since: dict[str, float] = {}
        """Shard -> since when this instance has held it or stood by for it, without a
        break (its own windows of the shard are this old)."""
        self.live_since = clock()
        self.opened = False
        self.listen_until: float | None = None
        """Until when (monotonic) this instance only listens after it began: one lease
        TTL from its first round that reached the store."""
        self.failing: str | None = None
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name="thermowarden-leases",
                                        daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while not self._stop.is_set():
            began = self.clock()
            self.round()
            # after a failed round, try again soon: the held leases are running out
            period = self.period if self.failing is None else min(self.period, RETRY_S)
            self._stop.wait(max(0.0, period - (self.clock() - began)))

    def round(self) -> None:
        started = self.clock()
        try:
            if not self.opened:
                self.store.open()
                self.opened = True
            self.store.announce(self.me)
            if started - self.renewed_at >= self.renew_every - self.period / 2:
                self.renewed_at = started
                for shard, lease in list(self.held.items()):
                    renewed = self.store.renew(lease)
                    if renewed is None:
                        del self.held[shard]
                        log.warning("lost the lease of shard %s (epoch %d)", shard,
                                    lease.epoch)
                    else:
                        self.held[shard] = renewed
            leases = self.store.read(self.shards)
            live = frozenset(self.store.present())
            now = self.clock()
            if live != self.live:
                self.live_since = now
                self.live = live
            holders = {s: lease.holder for s, lease in leases.items()}
            for s in self.shards:
                if s in holders:
                    self.free_since.pop(s, None)
                    self.last_holder[s] = holders[s]
                else:
                    self.free_since.setdefault(s, now)
            for s in [s for s in self.held if holders.get(s) != self.me]:
                del self.held[s]  # the store says otherwise: not ours
            for s, m in first_standbys(self.shards, holders, self.last_holder, live).items():
                if self.first_standby.get(s) != m:
                    self.first_standby[s] = m
                    self.standby_since[s] = now
            p = plan(View(self.me, live, self.shards, holders, now, dict(self.free_since),
                          self.live_since, dict(self.last_holder), dict(self.standby_since),
                          dict(self.evaluating_since)),
                     replicas=self.cfg.replicas, grace_s=GRACE_ROUNDS * self.renew_every,
                     settle_s=self.cfg.rebalance_after_s, warm_s=self.warm_s,
                     slack_s=self.cfg.lease_ttl_s)
            for s in p.release:
                released = self.held.pop(s, None)
                if released is not None:
                    self.store.release(released)
                    holders.pop(s, None)
                    log.info("handed shard %s over (above the fair share of %d)", s, p.share)
            # the first lease TTL after it began, an instance only listens: instances
            # started together (seconds apart on a loaded machine) see one another's
            # presence before any takes a share computed without the others (which it
            # would then keep: hand-overs wait for rebalance_after_s)
            if self.listen_until is None:
                self.listen_until = started + self.cfg.lease_ttl_s
            for s in p.take if now >= self.listen_until else ():
                got = self.store.take(s, self.me)
                if got is not None:
                    self.held[s] = got
                    holders[s] = self.me
                    self.free_since.pop(s, None)
            self.holders = holders
            self.standby = p.standby
            evaluating = set(self.held) | p.standby
            for s in self.shards:
                if s in evaluating:
                    self.evaluating_since.setdefault(s, now)
                else:
                    self.evaluating_since.pop(s, None)
            if self.failing is not None:
                log.warning("the lease store answers again")
                self.failing = None
            self.out.put(Round(started, True, dict(self.held), p.standby, dict(holders), live))
        except LeaseStoreError as exc:
            if self.failing is None:
                log.error("the lease store cannot be reached (%s): publishing stops as the "
                          "held leases run out", exc)
            self.failing = str(exc)
            self.out.put(Round(started, False, dict(self.held), self.standby,
                               dict(self.holders), self.live, str(exc)))
        except Exception:  # noqa: BLE001 - the keeper must go on; publication is fenced
            log.exception("lease round failed")
            self.out.put(Round(started, False, dict(self.held), self.standby,
                               dict(self.holders), self.live, "internal error"))

    def stop(self) -> None:
        """An orderly stop: release the held leases (their standbys take them at once) and
        withdraw the presence."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join(self.cfg.lease_ttl_s + 5)
        try:
            for lease in self.held.values():
                self.store.release(lease)
            if self.opened:
                self.store.withdraw(self.me)
        except LeaseStoreError as exc:
            log.warning("could not release the leases at the stop (%s); they expire in "
                        "%.0f s", exc, self.cfg.lease_ttl_s)
        self.held = {}
        self.store.close()
