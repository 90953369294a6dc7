"""One instance of a group that shares a site's spaces (``thermowarden run --group NAME``).

Membership: each instance's status record (``<prefix>/status/<instance>``, retained, with
the broker's last will saying ``offline``) also names its group and its *view*: the members
it counts as live. It is sent again as a heartbeat every third of the keepalive; retained
when it changes and on every sixth beat (a retained publish on a JetStream-backed broker is
a stream write: most beats need not be), plain otherwise. A member is live while its record
says online and a beat of it arrived within ``LIVE_FACTOR`` keepalives; a newcomer's first
record has no view and claims nothing until it has listened for a beat's interval.

Ownership: :mod:`thermowarden.core.ownership` (rendezvous hashing with the hand-over rule).
When this instance takes spaces over, it first hands the engine their live advisories from
the retained advisory messages it has been reading all along (:meth:`Engine.adopt`), then
they are evaluated; spaces given up are forgotten (the instance that takes them continues
their advisories). The sensor subscriptions follow the owned spaces.

The bound: a space is owned again within ``BOUND_FACTOR`` (2) keepalives of its owner's end
(a broker notices a dead client within 1.5 keepalives and publishes its will; a missing
heartbeat is noticed within one keepalive). Coverage:
metrics (owned spaces, members, seconds since every space had an owner), a retained record
of the spaces each instance owns (``<prefix>/group/<name>/owners/<instance>``: sent when they
change, again after every (re)connect and with every retained beat, so that a record lost
with a connection, a broker node or a broker's restart comes back), and a notice
to the integrator when a space had no owner, or a member evaluated nothing, for longer than
the bound (sent by the first live member in name order, once per episode).

A member silent for a keepalive that did not stop in order (its latest record says online,
or is its will: on a clustered broker whose killed node's streams were moving, the will
reached the members but the retained record kept saying online) is marked offline for it
by the first live member in name order, with every beat until the mark comes back, and its
owners record is emptied; so the status and owners records on the broker do not keep a
dead instance live while others run. Only a member
that has listened for a keepalive since it last (re)connected and hears its own beats come
back marks; a mark older than the latest beat heard is ignored. A member that sees itself
marked while it runs says online again (retained) at its next turn.
"""

from __future__ import annotations

import json
import logging
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Final

import numpy as np

from thermowarden.core import ownership
from thermowarden.effects import Effect, Persist, Publish

if TYPE_CHECKING:
    from thermowarden.shell.service import Service

log = logging.getLogger("thermowarden.group")

BEATS_PER_KEEPALIVE: Final = 3
RETAIN_EVERY_BEATS: Final = 6
LIVE_FACTOR: Final = 1.0
"""A member whose beat was not heard for this many keepalives is taken as gone."""
BOUND_FACTOR: Final = 2.0
"""A space is owned again within this many keepalives (the bound the coverage checks)."""
LET_GO_FACTOR: Final = 0.6
"""An instance cut off from the broker (or whose subscriptions the broker refuses) this many
keepalives lets its spaces go (before the others, which wait ``LIVE_FACTOR`` from its last
beat, take them): it cannot see readings or peers."""
SETTLE_EXTRA_S: Final = 0.5
MAX_VIEW: Final = 4096
"""A view naming more members than this is not taken (a forged or broken record)."""


@dataclass
class Member:
    name: str
    view: tuple[str, ...] | None
    """The members it counts as live; None while joining (it claims nothing)."""
    seen: float
    """Monotonic time its latest record or beat arrived."""
    online: bool
    evaluated_at: float | None = None
    """Epoch s of its latest evaluation, as it said."""
    since: str = ""
    """When its run began (ISO 8601; a restart is a new run)."""
    beat: int = -1
    """The number of its latest record in that run."""
    first_seen_at: float | None = None
    """Epoch s this instance first heard the record (for an owner that never evaluated)."""
    reason: str = ""
    """Why its latest record says offline: "stopped" (an orderly stop), "silent" (marked by
    a member), "lost" (its will, or a record without a reason); "" while online."""


class Group:
    """See the module docstring. Runs on the service's engine thread."""

    def __init__(self, name: str, instance: str, keepalive_s: float, prefix: str) -> None:
        self.name = name
        self.me = instance
        self.prefix = prefix
        self.keepalive_s = float(keepalive_s)
        self.beat_s = self.keepalive_s / BEATS_PER_KEEPALIVE
        self.live_s = self.keepalive_s * LIVE_FACTOR
        self.bound_s = self.keepalive_s * BOUND_FACTOR
        self.status_prefix = f"{prefix}/status/"
        self.advisory_prefix = f"{prefix}/spaces/"
        self.owners_topic = f"{prefix}/group/{name}/owners/{instance}"
        self.members: dict[str, Member] = {}
        self.ignored = 0
        """Status records and advisory messages that were not JSON objects (not acted on)."""
        self.retained: dict[str, dict[str, Any]] = {}
        """Retained advisory messages of the site (topic -> payload), as they arrive."""
        self.view: tuple[str, ...] | None = None
        self.beats = 0
        self.last_beat = -math.inf
        self.settle_until: float | None = None
        self.cut_off_at: float | None = None
        self.uncovered_since: float | None = None
        self.gap_told = False
        self.idle_told: set[str] = set()
        self.service: Service | None = None
        self.holding = np.zeros(0, dtype=bool)
        self.hashes = ownership.space_hashes([])
        self.last_evaluated: float | None = None
        self.owners_record: dict[str, Any] | None = None
        """The latest owners record this run sent (sent again, unchanged, until it changes)."""
        self._reassert = False
        """A record said this instance is offline while it runs: say online again."""
        self.listening_since: float | None = None
        """Monotonic time this instance's current listening began (after a (re)connect)."""
        self.heard_self: float | None = None
        """Monotonic time this instance's own record last came back from the broker."""
        self._marked: set[tuple[str, str]] = set()
        """(member, run) marked offline by this instance (logged once)."""
        self._key: object = None
        self._held = np.zeros(0, dtype=bool)
        self._unowned = np.zeros(0, dtype=bool)

    # ------------------------------------------------------------------ wiring
    def attach(self, service: Service) -> None:
        self.service = service
        model = service.engine.model
        self.hashes = ownership.space_hashes(model.space_ids)
        self.holding = np.zeros(model.n_spaces, dtype=bool)
        service.engine.set_owned([], service.clock.now())
        service.link.qos0.add(f"{self.status_prefix}+")
        service.link.set_subscriptions(self.subscriptions())
        self._status_fields()

    def watch_prefixes(self) -> tuple[str, ...]:
        return (self.status_prefix, self.advisory_prefix)

    def fixed_subscriptions(self) -> list[str]:
        assert self.service is not None
        return [f"{self.service.command_prefix}#", f"{self.status_prefix}+",
                f"{self.advisory_prefix}+/advisories/#"]

    def subscriptions(self) -> list[str]:
        """The sensor topics of the owned spaces (and the site's), commands, the group's
        status records and the site's retained advisories."""
        assert self.service is not None
        model = self.service.engine.model
        owned = np.flatnonzero(self.holding).tolist()
        return model.subscriptions(per_space=True, spaces=owned) + self.fixed_subscriptions()

    def reapplied(self) -> None:
        """After a reload swapped the engine: the same spaces, subscriptions as before."""
        assert self.service is not None
        engine = self.service.engine
        ids = [engine.model.space_ids[i] for i in np.flatnonzero(self.holding)]
        if engine.model.n_spaces != self.holding.size:
            held = set(ids)
            self.hashes = ownership.space_hashes(engine.model.space_ids)
            self.holding = np.array([s in held for s in engine.model.space_ids], dtype=bool)
            self._key = None
        self.service.execute(engine.set_owned(ids, self.service.clock.now()))
        self.service.link.set_subscriptions(self.subscriptions())

    # ------------------------------------------------------------------ input
    def connected(self) -> None:
        """A (re)connect: listen a beat's interval before ownership changes again; the
        owners record again (one sent while the connection was going may have been lost,
        and a broker restarted without persistence has forgotten it)."""
        self.settle_until = None
        self._send_owners()

    def receive(self, topic: str, payload: bytes) -> None:
        """A status record, beat or retained advisory message."""
        assert self.service is not None
        if topic.startswith(self.status_prefix):
            self._record(topic[len(self.status_prefix):], payload)
        elif "/advisories/" in topic:
            if not payload:
                self.retained.pop(topic, None)
                return
            data = _json(payload)
            if isinstance(data, dict):
                self.retained[topic] = data
            else:
                self.retained.pop(topic, None)
                self.ignored += 1

    def _record(self, name: str, payload: bytes) -> None:
        if "/" in name:
            return
        data = _json(payload) if payload else {}
        if name == self.me:
            # its own beats coming back: the path through the broker works. Marked offline
            # by a member that took this one as gone (or an old will): the retained record
            # must say online again while this instance runs (cleared by update only)
            if isinstance(data, dict):
                if data.get("state") == "offline":
                    self._reassert = True
                elif self.service is not None:
                    self.heard_self = self.service.clock.monotonic()
            return
        if data is None:
            self.ignored += 1  # not JSON: not a record of ours, and nothing to act on
            return
        if not isinstance(data, dict) or data.get("group") != self.name:
            self.members.pop(name, None)
            return
        assert self.service is not None
        # records travel two ways (retained ones through the broker's store, plain beats
        # directly) and can arrive out of order: keep only the newest of an instance's run
        # (its "since"), by beat number. The will (offline) keeps the beat number it
        # follows: a member that reconnects within the same run beats on with higher
        # numbers and is live again, while an older retained record is still ignored.
        since, beat = str(data.get("since", "")), data.get("beat")
        online = data.get("state") == "online"
        if not isinstance(beat, int) or isinstance(beat, bool):
            beat = -1
        old = self.members.get(name)
        if old is not None and old.since and since:
            if since < old.since:
                return
            if since == old.since and online and beat <= old.beat:
                return
            if since == old.since and not online and data.get("reason") == "silent" \
                    and beat < old.beat:
                return  # a mark by a member that had not heard its latest beats
        view = data.get("view")
        if isinstance(view, list) and len(view) > MAX_VIEW:
            view = None  # not a view any group of ours would have: claims nothing
        if online:
            number = beat
        else:
            number = old.beat if old is not None and old.since == since else -1
        self.members[name] = Member(
            name, tuple(str(v) for v in view) if isinstance(view, list) else None,
            self.service.clock.monotonic(), online, _epoch(data.get("evaluated_at")),
            since, number,
            old.first_seen_at if old is not None and old.since == since
            else self.service.clock.now(),
            "" if online else str(data.get("reason") or "lost"))

    def evaluated(self, now: float) -> None:
        self.last_evaluated = now

    def answers(self, advisory_id: object) -> bool:
        """Whether this instance replies to a command for ``advisory_id``: the one that
        holds the advisory does; for an advisory no one holds, the first live member in
        name order (the others stay silent, so one reply goes back)."""
        assert self.service is not None
        if advisory_id in self.service.engine.advisories.by_id:
            return True
        known = any(p.get("id") == advisory_id for p in self.retained.values())
        return not known and (self.view or (self.me,))[0] == self.me

    # ------------------------------------------------------------------ the loop
    def update(self) -> None:
        """Called on every turn of the engine loop; cheap unless something changed."""
        service = self.service
        assert service is not None
        mono = service.clock.monotonic()
        if not (service.link.connected.is_set() and service.link.subscribed.is_set()):
            if service.link.connected.is_set():
                self._beat_due(mono)
            self.settle_until = None  # listen again after the reconnect
            self.listening_since = None
            if self.cut_off_at is None:
                self.cut_off_at = mono
            elif self.holding.any() and mono - self.cut_off_at >= \
                    LET_GO_FACTOR * self.keepalive_s:
                log.warning("cut off from the broker for %.0f s: letting the %d owned "
                            "space(s) go to the other members", mono - self.cut_off_at,
                            int(self.holding.sum()))
                self.view = None  # back as a newcomer: the others need not wait for it
                self._hold(np.zeros_like(self.holding))
            return
        self.cut_off_at = None
        if self._reassert:
            self._reassert = False
            self._beat(retain=True)
        if self.settle_until is None:
            self.settle_until = mono + self.beat_s + SETTLE_EXTRA_S
            self.listening_since = mono
        if mono < self.settle_until:
            self._beat_due(mono)
            return
        live = {m.name: m for m in self.members.values()
                if m.online and m.view is not None and mono - m.seen < self.live_s}
        view = tuple(sorted({self.me, *live}))
        if view != self.view:
            gone = set(self.view or ()) - set(view)
            came = set(view) - set(self.view or ())
            log.info("group %s: members %s (joined %s, gone %s)", self.name, ", ".join(view),
                     ", ".join(sorted(came)) or "-", ", ".join(sorted(gone)) or "-")
            self.view = view
            self._beat(retain=True)
        views = {m.name: m.view or () for m in live.values()}
        key = (view, tuple(sorted(views.items())))
        if key != self._key:  # hashing every space is done only when a view changes
            self._key = key
            self._held = ownership.held(self.hashes, self.me, view, views)
            _, _, count = ownership.holders(self.hashes, {**views, self.me: view})
            self._unowned = count == 0
        if not np.array_equal(self._held, self.holding):
            self._hold(self._held)
        self._beat_due(mono)
        self._coverage(mono, live)

    def _beat_due(self, mono: float) -> None:
        if mono - self.last_beat >= self.beat_s:
            self._beat(retain=self.beats % RETAIN_EVERY_BEATS == 0)

    def _status_fields(self) -> None:
        """The group's fields in the status record (also what a reconnect's birth says)."""
        assert self.service is not None
        online = self.service.link.status_online
        online.update({"group": self.name, "view": list(self.view) if self.view else None,
                       "keepalive_s": self.keepalive_s, "beat": self.beats,
                       "owned_spaces": int(self.holding.sum()),
                       "evaluated_at": self.last_evaluated})
        self.service.link.status_offline["group"] = self.name

    def _beat(self, retain: bool) -> None:
        assert self.service is not None
        self.beats += 1
        self.last_beat = self.service.clock.monotonic()
        self._status_fields()
        link = self.service.link
        if retain:
            self._send_owners()
        self._mark_silent(self.last_beat)
        # a plain beat at QoS 0: on a JetStream-backed broker it does not wait for the
        # streams (which stall for seconds while a dead node's streams move)
        link.publish(link.status_topic, dict(link.status_online), 1 if retain else 0, retain)

    def _mark_silent(self, mono: float) -> None:
        """For the first live member in name order: say offline, retained, for each member
        taken as gone for silence that did not stop in order, and empty its owners record.
        Its latest record says online (its will never came), or is its will, which a
        clustered broker may have delivered to the members it could reach without storing
        it (the retained record then says online for good). Sent with every beat until the
        mark comes back (a mark lost with a connection or a broker node is sent again).

        Silence proves something only where this instance was listening: the member must
        have been silent for a keepalive of this instance's own listening since its last
        (re)connect, and this instance's own beats must be coming back from the broker
        (else its subscription or the broker's path is what is silent)."""
        assert self.service is not None
        link = self.service.link
        if not self.view or self.view[0] != self.me or self.listening_since is None \
                or self.heard_self is None or mono - self.heard_self >= self.live_s \
                or not (link.connected.is_set() and link.subscribed.is_set()):
            return
        for name, m in sorted(self.members.items()):
            if name in self.view or m.reason in ("stopped", "silent") \
                    or mono - max(m.seen, self.listening_since) < self.live_s:
                continue
            if (name, m.since) not in self._marked:
                self._marked.add((name, m.since))
                log.warning("group %s: member %s has been silent for %.0f s (its last record: "
                            "%s): marking it offline", self.name, name, mono - m.seen,
                            "online" if m.online else "its will")
            link.publish(f"{self.status_prefix}{name}", {
                "schema": link.status_online.get("schema"), "site": link.status_online.get(
                    "site"), "instance": name, "group": self.name, "state": "offline",
                "since": m.since, "beat": m.beat, "reason": "silent", "by": self.me,
                "at": _iso(self.service.clock.now())}, 1, True)
            link.publish(f"{self.prefix}/group/{self.name}/owners/{name}", None, 1, True)

    def _send_owners(self) -> None:
        """The retained owners record, as of the latest change of the owned spaces."""
        if self.owners_record is not None and self.service is not None:
            self.service.link.publish(self.owners_topic, self.owners_record, 1, True)

    def _hold(self, held: np.ndarray) -> None:
        """Own exactly the spaces ``held``: adopt the advisories of those taken over before
        they are evaluated, forget those given up, follow with the subscriptions."""
        service = self.service
        assert service is not None
        engine = service.engine
        now = service.clock.now()
        ids = engine.model.space_ids
        gained = held & ~self.holding
        released = self.holding & ~held
        effects: list[Effect] = engine.set_owned([ids[i] for i in np.flatnonzero(held)], now)
        if gained.any():
            taken = {ids[i] for i in np.flatnonzero(gained)}
            payloads = [p for p in self.retained.values()
                        if isinstance(p.get("space"), dict)
                        and isinstance(p["space"].get("id"), str) and p["space"]["id"] in taken]
            notes, more = engine.adopt(payloads, now, by=self.me)
            for note in notes:
                log.warning("%s", note)
            effects += more
            if payloads:
                log.info("took over %d live advisory(ies) with %d space(s)",
                         sum(1 for e in more if isinstance(e, Persist)), int(gained.sum()))
        self.holding = held.copy()
        service.execute(effects)
        service.link.set_subscriptions(self.subscriptions())
        service.dirty = True
        m = service.metrics
        m.group_owned.set(int(held.sum()))
        m.group_moves.labels(direction="in").inc(int(gained.sum()))
        m.group_moves.labels(direction="out").inc(int(released.sum()))
        log.info("group %s: owning %d space(s) (+%d, -%d)", self.name, int(held.sum()),
                 int(gained.sum()), int(released.sum()))
        self.owners_record = {
            "schema": "thermowarden.owners/1", "group": self.name, "instance": self.me,
            "at": _iso(now), "spaces": [ids[i] for i in np.flatnonzero(held)]}
        self._beat(retain=True)  # sends the owners record first

    def _coverage(self, mono: float, live: dict[str, Member]) -> None:
        """Metrics and the integrator's notices: spaces without an owner, idle owners."""
        service = self.service
        assert service is not None and self.view is not None
        unowned = self._unowned
        service.metrics.group_members.set(len(live) + 1)
        if unowned.any():
            if self.uncovered_since is None:
                self.uncovered_since = mono
            waited = mono - self.uncovered_since
            service.metrics.group_uncovered.set(waited)
        else:
            self.uncovered_since = None
            self.gap_told = False
            service.metrics.group_uncovered.set(0)
            waited = 0.0
        first = self.view[0] == self.me
        now = service.clock.now()
        if waited > self.bound_s and not self.gap_told and first:
            self.gap_told = True
            spaces = [service.engine.model.space_ids[i] for i in np.flatnonzero(unowned)]
            self._notice("spaces_unowned", now, {
                "count": len(spaces), "spaces": spaces[:100],
                "text": f"{len(spaces)} space(s) of group {self.name} had no owner for more "
                        f"than {self.bound_s:.0f} s: nobody evaluated them"})
        late = self.bound_s + service.tick_s
        idle = sorted(n for n, m in live.items() if (
            now - m.evaluated_at > late if m.evaluated_at is not None
            else m.first_seen_at is not None and now - m.first_seen_at > late))
        fresh = sorted(set(idle) - self.idle_told)
        self.idle_told = set(idle)
        if fresh and first:
            self._notice("owner_idle", now, {
                "count": len(fresh), "members": fresh,
                "text": f"member(s) {', '.join(fresh)} of group {self.name} evaluated nothing "
                        f"for more than {self.bound_s:.0f} s"})

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
        """An orderly stop: the owners record is emptied (the status says offline)."""
        self.owners_record = None  # not sent again
        if self.service is not None and self.service.link.connected.is_set():
            self.service.link.publish(self.owners_topic, None, 1, True)


def _json(payload: bytes) -> object:
    """The JSON in a message from the broker, or None: anyone who may publish on the
    group's topics can send anything, and nothing they send may stop the service."""
    try:
        return json.loads(payload)
    except (ValueError, RecursionError):
        return None


def _epoch(value: object) -> float | None:
    """A finite epoch time in seconds, or None."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    try:
        t = float(value)
    except OverflowError:
        return None
    return t if math.isfinite(t) else None


def _iso(t: float) -> str:
    import datetime as dt

    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")
