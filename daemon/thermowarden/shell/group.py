"""One instance of a group that shares a site (``thermowarden run --group NAME``): shard
leases, fenced publication and warm standbys.

The site's spaces fall into shards (:mod:`thermowarden.core.shards`). Each shard has a lease
in a store with compare-and-set and expiry (:mod:`thermowarden.shell.leases`: a JetStream
key-value bucket or a PostgreSQL table). Two threads:

- the **lease keeper** (:mod:`thermowarden.shell.lease_keeper`: a thread of its own,
  blocking store calls) runs a round every sixth of the lease TTL: it says this instance is
  present, renews the leases it holds (every other round: a third of the TTL), reads every
  shard's holder and the live instances, and takes or gives up shards as
  :func:`thermowarden.core.shards.plan` says. It hands each round's result to the engine
  thread (a queue) and touches nothing else.
- the **engine thread** (:meth:`Group.update`, every turn of the service's loop) evaluates
  the spaces of the shards it holds *and* of those it stands by for, and only those (its
  engine is rebuilt for them when they change, carrying the state over as a reload does;
  their sensors and the commands reach it, so windows, delays and timers are current),
  and publishes only for
  the shards whose lease is valid by its own clock: ``expires - margin`` on the monotonic
  clock, the expiry counted from before the request that took or renewed the lease. After
  a stall of its loop longer than the margin (a frozen process, a swapped-out host) it
  publishes nothing until a round that began after the stall has read the leases again.

**Fencing.** Every event, retained advisory and conditions record carries its shard and the
epoch it was published under (and the event id names both), and an advisory's records and
events a sequence number (:mod:`thermowarden.core.record_order`); :meth:`Group.fence` drops, at
the one place effects are carried out, anything of a shard this instance may not publish
for now, and an outbox row of an epoch it no longer holds is dropped instead of sent. A
retained advisory message is taken by the consumer rule of that module: one of an older epoch
than seen for its shard, or whose (epoch, seq) is not above the newest taken for its
advisory, is ignored.

**Taking over.** When a shard's lease becomes this instance's, its advisories are
reconciled with the retained advisory messages of the shard (:meth:`Engine.reconcile`:
published ids, history, acknowledgements, shelving win, but an acknowledgement or shelving
this instance applied that the message lacks is kept), the kept commands for the shard that
the advisory taken over lacks are applied, and it publishes under the new epoch. Every
instance keeps every command of the site for ``COMMANDS_KEPT_S`` (:meth:`route`), whatever
its shard: it may stand by for or take the shard a moment after the command arrived. Only
an instance whose lease for the advisory's shard is valid at that moment answers a command
(:meth:`may_publish`; for an advisory no one has, the first live instance in name order
replies), and the reply carries the shard and epoch, so that one the MQTT client would send
again after a reconnect is dropped like a record (:meth:`allows_bytes`).

People see: a retained status per instance (``<prefix>/status/<instance>``: the shards it
holds and stands by for), metrics (spaces held, live instances, seconds since every shard
had a holder, moves, fenced effects) and a notice to the integrator when a shard had no
holder for longer than twice the lease TTL (from the first instance in name order of those
that hold a shard).
"""

from __future__ import annotations

import json
import logging
import math
import queue
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from thermowarden.config import GroupConfig, SiteConfig
from thermowarden.core.record_order import NewestSeen
from thermowarden.core.shards import shard_of
from thermowarden.effects import Effect, Persist, Publish
from thermowarden.engine import Engine
from thermowarden.engine.reload import carry_over
from thermowarden.shell.lease_keeper import LeaseKeeper, Round, lease_clock
from thermowarden.shell.leases import LeaseStore
from thermowarden.site_model import build_site_model

if TYPE_CHECKING:
    from thermowarden.shell.engine_host import EngineHost
    from thermowarden.shell.mqtt_link import Incoming

log = logging.getLogger("thermowarden.group")

COMMANDS_KEPT_S = 600.0
"""Every instance keeps every command of the site this long, whichever shard it is for
(applied at a takeover if the old holder had not: a standby may have joined the shard, or
an instance taken it, just after the command arrived)."""


@dataclass
class Buffered:
    """A command of the site, kept in case this instance takes its shard over."""

    message: Incoming
    at: float
    advisory_id: str
    shard: str | None
    """The advisory's shard when it arrived (None: no advisory of that id was known)."""


class Group:
    """See the module docstring. :meth:`update`, :meth:`receive` and :meth:`fence` run on
    the service's engine thread."""

    def __init__(self, name: str, instance: str, cfg: GroupConfig, store: LeaseStore,
                 prefix: str, clock: Callable[[], float] = lease_clock) -> None:
        self.name = name
        self.me = instance
        self.cfg = cfg
        self.store = store
        self.prefix = prefix
        self.clock = clock
        self.margin_s = cfg.margin
        self.bound_s = 2 * cfg.lease_ttl_s
        self.advisory_prefix = f"{prefix}/spaces/"
        self.rounds: queue.Queue[Round] = queue.Queue()
        self.round: Round | None = None
        self.keeper: LeaseKeeper | None = None
        self.service: EngineHost | None = None
        self.publishing: dict[str, int] = {}
        """Shard -> epoch, for the shards this instance may publish for now."""
        self.paused: dict[str, tuple[int, float]] = {}
        """Shard -> (epoch, wall time of the last tick before) when this instance last
        stopped publishing for it."""
        self.evaluating: frozenset[str] = frozenset()
        self.holding = np.zeros(0, dtype=bool)
        """Spaces of the shards this instance publishes for."""
        self.publish_after = -math.inf
        self.last_turn: float | None = None
        self.records: dict[str, dict[str, Any]] = {}
        """Retained advisory messages of the site (topic -> payload), newest epoch only."""
        self.seen = NewestSeen()
        """The consumer rule over the retained advisory messages (epoch per shard, order
        key per advisory)."""
        self.ignored = 0
        """Retained advisory messages not taken: not JSON, or of an older epoch."""
        self.commands: list[Buffered] = []
        self.uncovered_since: float | None = None
        self.gap_told = False
        self.status: dict[str, Any] = {}
        self.last_evaluated: float | None = None
        self.full: SiteConfig
        self.shard_by_space: dict[str, str] = {}
        self._shards: list[str] = []

    # ------------------------------------------------------------------ wiring
    @property
    def shards(self) -> list[str]:
        """Every shard of the site (kept from :meth:`_site`: it is read at every turn of the
        engine loop, and listing it from the spaces cost each instance time in proportion
        to the whole site's size)."""
        return self._shards

    def _site(self, config: SiteConfig) -> None:
        """The whole site (at the start and after a reload): the engine evaluates only the
        spaces of the shards this instance holds or stands by for (:meth:`_rebuild`)."""
        self.full = config
        buckets = self.cfg.shard_buckets
        self.shard_by_space = {sp.id: shard_of(sp.id, sp.area, sp.building, buckets)
                               for sp in config.spaces}
        self._shards = sorted(set(self.shard_by_space.values()))

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

    def subscriptions(self) -> list[str]:
        """The sensor topics of the spaces evaluated (held and standby shards) and the
        site's, commands and the site's retained advisories."""
        assert self.service is not None
        service = self.service
        shards = service.engine.publication.shards
        spaces = [i for i, s in enumerate(shards) if s in self.evaluating]
        return service.engine.model.subscriptions(per_space=True, spaces=spaces) + [
            f"{service.command_prefix}#", f"{self.advisory_prefix}+/advisories/#"]

    def reapplied(self) -> None:
        """After a reload swapped in an engine of the whole (new) site: back to the spaces
        of the same shards, with their epochs and subscriptions."""
        assert self.service is not None
        self._site(self.service.engine.config)
        if self.keeper is not None:
            self.keeper.shards = self.shards
            self.keeper.warm_s = self._warm_s()
        self._rebuild(self.evaluating)
        self.service.engine.publication.epochs.update(self.publishing)
        self.holding = np.array([s in self.publishing
                                 for s in self.service.engine.publication.shards], dtype=bool)
        self.service.link.set_subscriptions(self.subscriptions())

    def _warm_s(self) -> float:
        """How long a standby must have stood by for a shard before it is handed the shard:
        ``standby_warm_s``, by default the site's WBGT window (its 60-minute WBGT is then
        whole) and one lease TTL (the rounds in which the standby learns of it and starts
        evaluating)."""
        if self.cfg.standby_warm_s is not None:
            return self.cfg.standby_warm_s
        return float(self.full.ingest.wbgt_window_s) + self.cfg.lease_ttl_s

    def _rebuild(self, shards: frozenset[str]) -> None:
        """Make the engine one of the spaces of ``shards`` only, carrying the state of the
        spaces it keeps (:func:`carry_over`, as a reload does): an instance keeps the state
        of the shards it holds or stands by for, not of the whole site. Spaces that leave
        are forgotten first (their advisories go on at their holders; nothing is
        withdrawn)."""
        service = self.service
        assert service is not None
        old = service.engine
        now = service.clock.now()
        keep = [sp for sp in self.full.spaces if self.shard_by_space[sp.id] in shards]
        kept = {sp.id for sp in keep}
        service.execute(old.set_owned([sid for sid in old.model.space_ids if sid in kept],
                                      now))
        templates = []
        for t in self.full.templates:
            if t.spaces:
                mine = [sid for sid in t.spaces if sid in kept]
                if not mine:
                    continue  # an empty list would mean every space
                t = t.model_copy(update={"spaces": mine})
            templates.append(t)
        config = self.full.model_copy(update={"spaces": keep, "templates": templates})
        engine = Engine(config, build_site_model(config), old.packs,
                        conditions_every_s=old.publication.conditions_every_s,
                        start=old.start, sample_every_s=old.sample_every_s,
                        advisory_refresh_s=old.advisories.refresh_s)
        effects, notes = carry_over(old, engine)
        for note in notes:
            log.debug("%s", note)
        engine.publication.epochs.update(old.publication.epochs)
        engine.ticks = old.ticks
        if old.ticks > 0:  # new here: its 60-minute WBGT window begins now
            for i, sid in enumerate(engine.model.space_ids):
                if sid not in old.model.space_index:
                    engine.publication.moved_at[i] = now
        service.engine = engine
        service.failures_seen = set()  # by space index, which changed
        service.execute(effects)

    # ------------------------------------------------------------------ input
    def connected(self) -> None:
        """A (re)connect: the status record says what this instance holds."""
        self._send_status()

    def receive(self, topic: str, payload: bytes) -> None:
        """A retained advisory message of the site."""
        if "/advisories/" not in topic:
            return
        if not payload:
            self.records.pop(topic, None)
            return
        data = _json(payload)
        if not isinstance(data, dict) or not isinstance(data.get("shard"), str) \
                or not _is_int(data.get("epoch")):
            self.ignored += 1
            return
        if not self.seen.accept(data):
            if not self.seen.is_copy(data):
                self.ignored += 1  # older than one taken: late, or from a holder fenced since
            return
        self.records[topic] = data

    def evaluated(self, now: float) -> None:
        self.last_evaluated = now

    def route(self, m: Incoming, advisory_id: object, keep: bool = True) -> str:
        """What to do with a command: "answer" (this instance holds a valid lease for the
        advisory's shard now, :meth:`may_publish`, or no one has the advisory and this
        instance is the first live one), "keep" (it does not: kept, and applied if it takes
        the shard over; only with ``keep``), or "ignore". With ``keep``, every command
        naming an advisory is kept for ``COMMANDS_KEPT_S``, answered or not, whatever its
        shard. "First" is in name order among the instances holding a shard."""
        assert self.service is not None
        shard = self._shard_of_advisory(advisory_id)
        kept = False
        if keep and isinstance(advisory_id, str):
            now = self.service.clock.now()
            self.commands = [c for c in self.commands if now - c.at < COMMANDS_KEPT_S]
            if not any(c.message is m for c in self.commands):  # not one applied again
                self.commands.append(Buffered(m, now, advisory_id, shard))
            kept = True
        if shard is None:  # no one has it: one instance replies with the error
            r = self.round
            working = sorted(set(r.holders.values()) & r.live) or sorted(r.live) \
                if r is not None else []
            return "answer" if not working or working[0] == self.me else "ignore"
        if self.round is not None and self.may_publish(shard, self.publishing.get(shard)):
            return "answer"
        return "keep" if kept else "ignore"

    def fencing(self, advisory_id: object) -> dict[str, Any]:
        """The shard and epoch a reply about ``advisory_id`` is sent under (empty when no
        one has the advisory): a reply the client would send again after a reconnect is
        dropped, as records are, if the lease lapsed meanwhile (:meth:`allows_bytes`)."""
        shard = self._shard_of_advisory(advisory_id)
        if shard is None or shard not in self.publishing:
            return {}
        return {"shard": shard, "epoch": self.publishing[shard]}

    def _shard_of_advisory(self, advisory_id: object) -> str | None:
        assert self.service is not None
        engine = self.service.engine
        got = engine.advisories.by_id.get(advisory_id) if isinstance(advisory_id, str) \
            else None
        if got is not None:
            return engine.publication.shards[got[1]]
        for p in self.records.values():
            if p.get("id") == advisory_id:
                shard = p.get("shard")
                return shard if isinstance(shard, str) else None
        return None

    # ------------------------------------------------------------------ fencing
    def may_publish(self, shard: object, epoch: object) -> bool:
        """Whether this instance may publish a record of ``shard`` under ``epoch`` now."""
        if not isinstance(shard, str) or self.publishing.get(shard) != epoch:
            return False
        assert self.round is not None
        lease = self.round.held.get(shard)
        return lease is not None and self.clock() < lease.expires_mono - self.margin_s \
            and self.round.started >= self.publish_after

    def fence(self, effects: list[Effect]) -> list[Effect]:
        """The effects this instance may carry out now: those of the shards it publishes
        for under their current epoch (records and events of the others are dropped, and
        counted); removals from its own store and site-wide records pass."""
        assert self.service is not None
        kept: list[Effect] = []
        dropped = 0
        for e in effects:
            shard, epoch = self._fence_of(e)
            if shard is None or self.may_publish(shard, epoch):
                kept.append(e)
            else:
                dropped += 1
        if dropped:
            self.service.metrics.group_fenced.inc(dropped)
        return kept

    def _fence_of(self, e: Effect) -> tuple[str | None, object]:
        """The shard and epoch an effect belongs to; (None, None) for one that is not of a
        shard (site-wide events, samples, a store row removed)."""
        assert self.service is not None
        pub = self.service.engine.publication
        if isinstance(e, Publish):
            p = e.payload
            if p is not None and "shard" in p:
                return p["shard"], p.get("epoch")
            if p is None and "/advisories/" in e.topic:  # a cleared advisory
                space = e.topic[len(self.advisory_prefix):].split("/", 1)[0]
                shard = self.shard_by_space.get(space)
                return (shard, pub.epochs.get(shard, 0)) if shard is not None else ("?", -1)
            return None, None
        if e.kind in ("advisory", "event") and e.record is not None:
            rec = e.record.get("payload", e.record)
            if isinstance(rec, dict) and "shard" in rec:
                return rec["shard"], rec.get("epoch")
        return None, None

    def allows(self, payload: dict[str, Any]) -> bool:
        """Whether an outbox row may still be sent: an event of a shard's epoch this
        instance publishes under now (or not of a shard)."""
        if "shard" not in payload:
            return True
        return self.may_publish(payload["shard"], payload.get("epoch"))

    def allows_bytes(self, payload: bytes) -> bool:
        """:meth:`allows` for a message the MQTT client holds (called on its network
        thread before a reconnect; reads only values the engine thread replaces whole)."""
        if b'"shard"' not in payload:
            return True
        data = _json(payload)
        if not isinstance(data, dict):
            return True
        try:
            return self.allows(data)
        except AssertionError:
            return False

    # ------------------------------------------------------------------ the loop
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

    def _apply_kept(self, shard: str) -> None:
        """Kept commands for ``shard`` (:meth:`route`) whose effect the advisory taken over
        lacks are applied now: an acknowledgement unless the advisory is acknowledged
        already or was raised or escalated after it; a shelving or unshelving unless the
        retained advisory changed after it arrived (the old holder applied it, or something
        after it), nor a shelving when one given at or after it is in force."""
        service = self.service
        assert service is not None
        now = service.clock.now()
        self.commands = [c for c in self.commands if now - c.at < COMMANDS_KEPT_S]
        # they stay kept (with the time they arrived): the shard may change hands again
        kept = [c for c in self.commands
                if (c.shard or self._shard_of_advisory(c.advisory_id)) == shard]
        book = service.engine.advisories
        for c in kept:
            verb = self._verb(c)
            got = book.by_id.get(c.advisory_id)
            adv = got[0].advisories.get(got[1]) if got is not None else None
            if verb == "acknowledge":
                if adv is not None and (adv.acknowledged is not None or any(
                        h.get("event") in ("raised", "escalated")
                        and str(h.get("at", "")) > _iso(c.at) for h in adv.history)):
                    continue  # acknowledged already, or a worse level since
            else:
                if verb == "shelve" and adv is not None and adv.shelved is not None \
                        and str(adv.shelved.get("at", "")) >= _iso(c.at):
                    continue  # this shelving, or a later one, is in force
                record = next((p for p in self.records.values()
                               if p.get("id") == c.advisory_id), None)
                h = record.get("handover") if record is not None else None
                updated = h.get("updated_at") if isinstance(h, dict) else None
                if isinstance(updated, int | float) and updated >= c.at:
                    continue  # the old holder applied it (or something after it)
            log.info("applying a kept %s command for %s at the takeover", verb,
                     c.advisory_id)
            service.handle_command(c.message)

    def _verb(self, c: Buffered) -> str:
        """The verb of a kept command (``<prefix>/commands/<audience>/<verb>[/<user>]``)."""
        assert self.service is not None
        parts = c.message.topic[len(self.service.command_prefix):].split("/")
        return parts[1] if len(parts) in (2, 3) else parts[-1]

    def _send_status(self) -> None:
        service = self.service
        if service is None:
            return
        link = service.link
        status = {"group": self.name, "shards": sorted(self.publishing),
                  "epochs": dict(sorted(self.publishing.items())),
                  "standby": sorted(self.evaluating - set(self.publishing)),
                  "owned_spaces": int(self.holding.sum())}
        link.status_online.update(status)
        if status != self.status and link.connected.is_set():
            link.publish(link.status_topic, dict(link.status_online), 1, True)
        self.status = status

    def _coverage(self, r: Round, mono: float) -> None:
        """Metrics and the integrator's notice when a shard has had no holder too long."""
        service = self.service
        assert service is not None
        service.metrics.group_members.set(len(r.live))
        free = [s for s in self.shards if s not in r.holders]
        if free and r.ok:
            if self.uncovered_since is None:
                self.uncovered_since = mono
            waited = mono - self.uncovered_since
        elif not free:
            self.uncovered_since = None
            self.gap_told = False
            waited = 0.0
        else:
            waited = mono - self.uncovered_since if self.uncovered_since is not None else 0.0
        service.metrics.group_uncovered.set(waited)
        # told by one instance: the first in name order of those that hold a shard (one
        # that holds none may be the very reason a shard has no holder)
        working = sorted(set(r.holders.values()) & r.live) or sorted(r.live)
        first = not working or working[0] == self.me
        if waited > self.bound_s and not self.gap_told and first and r.ok:
            self.gap_told = True
            spaces = [sid for sid, s in self.shard_by_space.items() if s in free]
            self._notice("spaces_unowned", service.clock.now(), {
                "count": len(spaces), "spaces": spaces[:100], "shards": free[:100],
                "text": f"{len(free)} shard(s) ({len(spaces)} space(s)) of group {self.name} "
                        f"had no holder for more than {self.bound_s:.0f} s: nobody "
                        "evaluated them"})

    def _notice(self, kind: str, now: float, fields: dict[str, Any]) -> None:
        assert self.service is not None
        log.error("%s", fields["text"])
        notice = {"schema": "thermowarden.event/1", "event": "notice", "at": _iso(now),
                  "audience": "integrator", "kind": kind, "group": self.name,
                  "bound_s": self.bound_s, **fields}
        self.service.execute([
            Publish(f"{self.prefix}/events/integrator/_site", notice, qos=1),
            Persist("event", f"notice.{kind}.{int(now)}", notice)])

    def stop(self) -> None:
        """An orderly stop: the leases go to their standbys at once."""
        self.publishing = {}
        if self.keeper is not None:
            self.keeper.stop()


def _json(payload: bytes) -> object:
    """The JSON in a message from the broker, or None: anyone who may publish on the
    site's topics can send anything, and nothing they send may stop the service."""
    try:
        return json.loads(payload)
    except (ValueError, RecursionError):
        return None


def _is_int(value: object) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _iso(t: float) -> str:
    import datetime as dt

    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")
