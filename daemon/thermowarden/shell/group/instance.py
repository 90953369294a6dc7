"""The engine loop's steps of a group instance (:mod:`thermowarden.shell.group`, which
describes the whole): wiring to the service, reading each round of the lease keeper,
evaluating the shards held and stood by for, and taking over or stopping publication."""

from __future__ import annotations

import logging
import math
import queue
from typing import TYPE_CHECKING

import numpy as np

from thermowarden.effects import Effect, Persist
from thermowarden.shell.group.status import GroupStatus
from thermowarden.shell.group.takeover import Takeover
from thermowarden.shell.lease_keeper import LeaseKeeper

if TYPE_CHECKING:
    from thermowarden.shell.engine_host import EngineHost

log = logging.getLogger("thermowarden.group")


class Group(GroupStatus, Takeover):
    """See :mod:`thermowarden.shell.group`. :meth:`update`, :meth:`receive` and
    :meth:`fence` run on the service's engine thread."""

    def attach(self, service: EngineHost) -> None:
        self.service = service
        self._site(service.engine.config)
        self._rebuild(frozenset())
        service.link.set_subscriptions(self.subscriptions())
        service.link.status_online.update({"group": self.name, "shards": [], "standby": []})
        service.link.status_offline["group"] = self.name
        self.keeper = LeaseKeeper(self.store, self.me, self.shards, self.cfg, self.rounds,
                                  self.clock)
        self.keeper.warm_s = self._warm_s()

    def start(self) -> None:
        """Start the lease keeper (when the service starts running)."""
        if self.keeper is not None and self.keeper._thread is None:
            self.keeper.start()

    def watch_prefixes(self) -> tuple[str, ...]:
        return (self.advisory_prefix,)

    def evaluated(self, now: float) -> None:
        self.last_evaluated = now

    def update(self) -> None:
        """Called on every turn of the engine loop; cheap unless something changed."""
        service = self.service
        assert service is not None
        mono = self.clock()
        if self.last_turn is not None and mono - self.last_turn > self.margin_s:
            log.warning("the engine loop stalled for %.1f s: publishing waits for the leases "
                        "to be read again", mono - self.last_turn)
            self.publish_after = mono
        self.last_turn = mono
        latest = None
        while True:
            try:
                latest = self.rounds.get_nowait()
            except queue.Empty:
                break
        if latest is not None:
            self.round = latest
        r = self.round
        if r is None:
            return
        evaluating = frozenset(r.held) | r.standby
        if evaluating != self.evaluating:
            self._evaluate(evaluating)
        valid = {s: lease.epoch for s, lease in r.held.items()
                 if mono < lease.expires_mono - self.margin_s and r.started >= self.publish_after}
        if valid != self.publishing:
            self._publish_for(valid)
        self._coverage(r, mono)

    def _evaluate(self, shards: frozenset[str]) -> None:
        """Evaluate the spaces of ``shards`` from now on (held and standby)."""
        service = self.service
        assert service is not None
        gained = shards - self.evaluating
        gone = self.evaluating - shards
        self.evaluating = shards
        self._rebuild(shards)
        pub = service.engine.publication
        ids = service.engine.model.space_ids
        self.holding = np.array([s in self.publishing for s in pub.shards], dtype=bool)
        service.link.set_subscriptions(self.subscriptions())
        service.metrics.group_evaluated.set(len(ids))
        service.dirty = True
        if gained or gone:
            log.info("group %s: evaluating %d shard(s), %d space(s) (+%s, -%s)", self.name,
                     len(shards), len(ids), ",".join(sorted(gained)) or "-",
                     ",".join(sorted(gone)) or "-")

    def _publish_for(self, valid: dict[str, int]) -> None:
        """Publish for exactly the shards ``valid`` (shard -> epoch): take over those that
        are new (or of a new epoch), stop for the others."""
        service = self.service
        assert service is not None
        engine = service.engine
        pub = engine.publication
        now = service.clock.now()
        new = {s: e for s, e in valid.items() if self.publishing.get(s) != e}
        for s in set(self.publishing) - set(valid):
            log.warning("not publishing for shard %s any more (epoch %d: lease %s)", s,
                        self.publishing[s], "lost" if self.round is None
                        or s not in self.round.held else "not confirmed in time")
            # from the last tick on: its effects may have been fenced already (the lease
            # ran out while it ran)
            self.paused[s] = (self.publishing[s], self.last_evaluated
                              if self.last_evaluated is not None else -math.inf)
        self.publishing = dict(valid)
        pub.epochs.update(valid)
        before = self.holding
        self.holding = np.array([s in valid for s in pub.shards], dtype=bool)
        effects: list[Effect] = []
        for shard, epoch in sorted(new.items()):
            ids = [sid for sid, s in zip(engine.model.space_ids, pub.shards, strict=True)
                   if s == shard]
            records = [p for p in self.records.values() if p.get("shard") == shard]
            notes, more = engine.reconcile(ids, records, now, by=self.me)
            for note in notes:
                log.warning("%s", note)
            effects += more
            # conditions at once: all of them when the shard is new here; when publishing
            # resumes under the same epoch (after a stall of the loop or a late renewal: no
            # one else held the shard meanwhile), those computed from the last tick before
            # the pause on, which were fenced (all of them again at every pause made the
            # next tick long, hence another stall, at 4,000 spaces on a loaded machine)
            paused_epoch, since = self.paused.pop(shard, (None, math.inf))
            for i, s in enumerate(pub.shards):
                if s == shard and (paused_epoch != epoch or pub.last_conditions[i] >= since):
                    pub.last_conditions[i] = -math.inf
            log.info("publishing for shard %s under epoch %d (%d space(s), %d live "
                     "advisory(ies) continued)", shard, epoch, len(ids),
                     sum(1 for e in more if isinstance(e, Persist)))
        service.execute(effects)
        for shard in sorted(new):
            self._apply_kept(shard)
        m = service.metrics
        m.group_owned.set(int(self.holding.sum()))
        if before.size == self.holding.size:
            m.group_moves.labels(direction="in").inc(int((self.holding & ~before).sum()))
            m.group_moves.labels(direction="out").inc(int((before & ~self.holding).sum()))
        engine.advisories.last_refresh = -math.inf
        service.dirty = True
        self._send_status()

    def stop(self) -> None:
        """An orderly stop: the leases go to their standbys at once."""
        self.publishing = {}
        if self.keeper is not None:
            self.keeper.stop()
