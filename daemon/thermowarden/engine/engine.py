"""The engine: one site's state, evaluation and advisories, fed with ``now``; returns effects.

The data's path, one module per step::

    message -> ingest -> state (windows, freshness)          engine/ingest.py, engine/state.py
    tick(now) -> snapshot -> indices -> rule truths          engine/evaluation.py, health.py
              -> lifecycle per (space, rule)                 engine/advisories.py, texts.py
              -> payloads, topics, records (effects)         engine/publication.py

(``state`` draws on sensor_slots, air_speed_rings, schedules, outdoor_days, wbgt_window
and space_constants; ``evaluation`` on index_rows, and the rules' truths are
``rule_truths``; ``advisories`` on rule_runtime, easing, acted_on, floods and
advisory_records; commands are ``engine/commands.py``, rules unknown for long
``engine/unknown_rules.py``, a batch of ticks as rows ``engine/tick_batch.py``, the hand-over
of advisories between the instances of a group ``engine/handover.py``.)

It does no I/O and reads no clock, so a whole day of a site replays in a test. One thread
only: the service's engine thread, or the replay loop.

One code path for both: a tick captures the points' state (:meth:`Engine.capture`) and
:meth:`Engine.tick_many` evaluates captured ticks as K x N rows. The service evaluates one
tick at a time; replay captures hours of ticks and evaluates them together, the lifecycle
stepping through them in order. Indices are computed only for rows whose inputs changed; a
(space, rule) is visited only where its condition holds, its advisory is pending or live
and its conditions changed or a timer fell due, or an input it needs went or came back.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Iterable, Mapping
from collections.abc import Set as AbstractSet
from typing import Any, Final

import numpy as np

from thermowarden.config import SiteConfig
from thermowarden.core.columns import BoolArray, IndexColumn
from thermowarden.core.indices import IndexTable
from thermowarden.effects import Effect, Persist
from thermowarden.engine import advisory_records, commands, handover
from thermowarden.engine.advisories import ADVISORY_REFRESH_S, Advisories
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.crossings import Crossings
from thermowarden.engine.evaluation import Evaluation
from thermowarden.engine.foresight import AHEAD_TEXTS, WINDOW_TEXTS, Foresight
from thermowarden.engine.foresight import text_fields as foresight_texts
from thermowarden.engine.health import PointHealth
from thermowarden.engine.ingest import IMPLAUSIBLE_REASONS, Ingestor, Rejection
from thermowarden.engine.publication import Publication
from thermowarden.engine.rule_runtime import RuleRuntime
from thermowarden.engine.rule_truths import RuleTruths, rule_truths
from thermowarden.engine.state import Capture, SiteState, Snapshot
from thermowarden.engine.texts import Texts
from thermowarden.engine.tick_batch import (
    RowView,
    patch_rows,
    reads,
    repeated_ticks,
    unknown_trajectory,
)
from thermowarden.engine.unknown_rules import UNKNOWN_LONG_S, count_long
from thermowarden.engine.unknown_rules import detail as unknown_detail
from thermowarden.rules import CompiledPack
from thermowarden.site_model import SITE, SiteModel

AHEAD_FIELDS: Final = frozenset((*AHEAD_TEXTS, *WINDOW_TEXTS))
"""Text fields of the ahead-of-time messages (engine/foresight.py)."""
HEALTH_DETAILS: Final = frozenset({"stale_detail", "stuck_detail", "implausible_detail",
                                   "disagreement_detail"})
"""Text fields :meth:`PointHealth.details` gives."""
SAMPLE_EVERY_S: Final = 300.0
"""Every 5 minutes the key indices of every space are stored for reports."""


class Engine:
    """Evaluates a site; see the module docstring."""

    def __init__(self, config: SiteConfig, model: SiteModel, packs: Mapping[str, CompiledPack],
                 *, conditions_every_s: float = 60.0, start: float | None = None,
                 sample_every_s: float = SAMPLE_EVERY_S,
                 advisory_refresh_s: float = ADVISORY_REFRESH_S) -> None:
        self.config = config
        self.model = model
        self.packs = packs
        self.n = model.n_spaces
        self.prefix = config.output.prefix
        self.start = start
        self.state = SiteState(model)
        self.ingest = Ingestor(model, self.state)
        self.health = PointHealth(model, self.state)
        self.evaluation = Evaluation(self.state, self.health)
        self.evaluation.foresight = Foresight(model, self.state)
        self.publication = Publication(config, model, conditions_every_s)
        self.advisories = Advisories(config, model, packs, self.publication,
                                     Texts(config, model), refresh_s=advisory_refresh_s)
        self.crossings = Crossings(self.advisories)
        self.sample_every_s = sample_every_s
        self.last_sample = -math.inf
        self.last_table: IndexTable | None = None
        self.last_snapshot: Snapshot | None = None
        self.ticks = 0
        self._space_of = np.zeros(0, dtype=np.int64)
        self.last_batch: tuple[Snapshot, IndexTable] | None = None
        """The snapshot and indices of the latest :meth:`tick_many` (K x N rows)."""

    @property
    def rules(self) -> list[RuleRuntime]:
        return self.advisories.rules

    # ------------------------------------------------------------------ input
    def message(self, topic: str, payload: bytes, now: float,
                retained: bool = False) -> list[Rejection]:
        """A sensor message received at ``now``; returns its rejections (already counted).
        ``retained``: kept by the broker from before; without a timestamp it is refused as
        of unknown age."""
        before = self.ingest.accepted
        rejections = self.ingest.ingest(topic, payload, now, retained)
        if self.ingest.accepted != before:
            for pid in self.ingest.last_points:
                space = self.model.points[pid].space
                if space != SITE:
                    self.publication.touched[space] = True
        for r in rejections:
            if r.reason in IMPLAUSIBLE_REASONS:
                self.health.note_implausible(r.point, now)
        return rejections

    def messages(self, items: Iterable[tuple[str, bytes, float, bool]]) -> list[Rejection]:
        """Sensor messages ``(topic, payload, received at, retained)`` in order, as
        :meth:`message` one by one would take them; returns all their rejections."""
        ingest = self.ingest
        rejected = ingest.ingest_many(items)
        points = self.model.points
        if len(self._space_of) < len(points):  # each point's space (points only grow)
            self._space_of = np.array([p.space for p in points], dtype=np.int64)
        if ingest.last_points:
            spaces = self._space_of[ingest.last_points]
            self.publication.touched[spaces[spaces != SITE]] = True
        out: list[Rejection] = []
        for now, r in rejected:
            if r.reason in IMPLAUSIBLE_REASONS:
                self.health.note_implausible(r.point, now)
            out.append(r)
        return out

    def oversized(self, topic: str, size: int) -> list[Rejection]:
        """A sensor message dropped unread for its ``size`` (bytes); see
        :meth:`Ingestor.oversized`."""
        return [self.ingest.oversized(topic, size)]

    # ------------------------------------------------------------------ tick
    def tick(self, now: float) -> list[Effect]:
        """Evaluate every space at ``now`` and return what to publish and store."""
        return self.tick_many([self.state.capture(now)])

    def capture(self, now: float) -> Capture:
        """What a tick at ``now`` needs from the readings received so far; evaluate a run of
        captures together with :meth:`tick_many` (replay)."""
        return self.state.capture(now)

    def tick_many(self, caps: list[Capture]) -> list[Effect]:
        """Evaluate the ticks of ``caps`` (in time order, no readings in between that they
        have not captured) and return their effects in order, as :meth:`tick` one by one
        would. Snapshot, indices and rule conditions are computed for all ticks at once;
        the lifecycle then steps through the ticks, visiting a (space, rule) only where a
        condition holds, an advisory is pending or live, or an input went missing or came
        back."""
        if not caps:
            return []
        if self.start is None:
            self.start = caps[0].now
        n = self.n
        if n == 0:  # one instance of a group that evaluates no shard (yet)
            self.ticks += len(caps)
            return []
        snap = self.state.snapshot_many(caps)
        k = snap.k
        table = self.evaluation.indices(snap)
        env = self.evaluation.environment(snap, table, self.start)
        book = self.advisories
        crossings = self.crossings
        times = snap.times.tolist()
        evaluated: list[tuple[RuleRuntime, RuleTruths, list[bool], list[bool]]] = []
        others = [rt for rt in book.rules if not rt.rule.health]
        health = [rt for rt in book.rules if rt.rule.health]
        unknown_long = np.zeros(k * n)
        for group in (others, health):
            if group is health:
                if k == 1:  # exact: the count depends on the lifecycle too
                    unknown_long = count_long(book.rules, n, float(snap.times[0]))
                env["rules_unknown_long"] = unknown_long
            for rt in group:
                if not rt.mask.any() and not rt.advisories:
                    continue
                mask = np.tile(rt.mask, k) if k > 1 else rt.mask
                params = ({p: np.tile(v, k) for p, v in rt.params.items()} if k > 1
                          else rt.params)
                truths = rule_truths(rt.rule, params, mask, env, k * n)
                u = (mask & truths.lacking & ~truths.raise_.known).reshape(k, n)
                since = unknown_trajectory(u, rt.unknown_since, snap.times)
                if group is others:
                    before = np.concatenate([rt.unknown_since[None, :], since[:-1]])
                    unknown_long += (snap.times[:, None] - before >= UNKNOWN_LONG_S).ravel()
                flips = np.concatenate([u[:1] != np.isfinite(rt.unknown_since)[None, :],
                                        u[1:] != u[:-1]]).any(axis=1)
                hits = np.asarray(truths.raise_.true.reshape(k, n).any(axis=1) | flips)
                anything = [bool(x) for x in hits]
                evaluated.append((rt, truths, anything, repeated_ticks(truths, k, n)))
        evaluated.sort(key=lambda e: book.rules.index(e[0]))
        readers = [e for e in evaluated if "rules_unknown_long" in reads(e[0].rule)]
        effects: list[Effect] = []
        sample_due = self.sample_every_s > 0
        due = {id(rt): -math.inf for rt, *_ in evaluated}
        for j, now in enumerate(times):
            if j in snap.days_rolled:
                effects.append(Persist("daily_means", "outdoor",
                                       {"newest_first": snap.days_rolled[j]}))
            rows = slice(j * n, (j + 1) * n)
            # texts rendered in this tick (raises, reminders, refreshes) use its values
            at_j = self.evaluation.tick_rows(table, snap.inputs, rows) if k > 1 else table
            self.health.at(j)
            env_j = RowView(env, rows) if k > 1 else env
            book.begin(env_j, at_j,
                       functools.partial(self._text_fields, at_j, now, env_j),
                       self.evaluation.owned)
            book.sample_trends(now)
            if readers and k > 1 and any(rt.advisories for rt in others):
                # the unknown-for-long count depends on the lifecycle (a live advisory whose
                # clear condition is unknown; exact without one): where the estimate was
                # wrong, re-evaluate the rules that read it
                exact = count_long(book.rules, n, now)
                if not np.array_equal(exact, unknown_long[rows]):
                    unknown_long[rows] = exact
                    view_j = dict(RowView(env, rows))
                    for rt, truths, anything, repeats in readers:
                        one = rule_truths(rt.rule, rt.params, rt.mask, view_j, n)
                        patch_rows(truths, one, rows)
                        anything[j] = True
                        repeats[j] = False
                        if j + 1 < k:
                            repeats[j + 1] = False
            for rt, truths, anything, repeats in evaluated:
                if not np.count_nonzero(rt.state):  # no pending or live advisory
                    if not anything[j]:
                        continue
                elif repeats[j] and now < due[id(rt)]:
                    continue  # same conditions as the tick before and no timer due
                truths_j = truths.rows(rows) if k > 1 else truths
                if crossings:
                    truths_j = crossings.hold(rt, truths_j)
                book.step(rt, truths_j, now, effects)
                due[id(rt)] = rt.next_due()
            if crossings:
                crossings.settle(now, effects)
            book.floods.flush_summaries(now, effects)
            if sample_due and now - self.last_sample >= self.sample_every_s:
                self.last_sample = now
                at = (dict(self.evaluation.tick_rows(table, snap.inputs, rows)) if k > 1
                      else table)
                effects.append(Persist("sample", str(int(now)), self.publication.sample(
                    at, now, snap.occupied[rows],
                    air_temperature=snap.inputs.air_temperature[rows])))
            effects.extend(book.refresh_due(now))
            self.ticks += 1
        last = (dict(self.evaluation.tick_rows(table, snap.inputs, slice((k - 1) * n, k * n)))
                if k > 1 else table)
        self.last_table = last
        self.last_snapshot = snap
        self.last_batch = (snap, table)
        if self.publication.conditions_every_s > 0:
            if k > 1:
                raise ValueError("conditions are published per tick: tick_many with one "
                                 "capture when conditions_every_s > 0")
            effects.extend(self.publication.conditions_due(snap, table, snap.now))
        return effects

    def _text_fields(self, table: Mapping[str, IndexColumn], now: float,
                     env: Mapping[str, Any], i: int,
                     wanted: AbstractSet[str]) -> dict[str, object]:
        """Words for the messages of space ``i`` that are not numbers, those of ``wanted``
        only (the names the rule's templates insert; each costs a pass over points or
        rules): which sensors the health columns are about, which rules cannot be evaluated
        and why, and what a WBGT rests on (``table`` holds this tick's rows)."""
        fields: dict[str, object] = {}
        if wanted & HEALTH_DETAILS:
            assert self.health.snap is not None
            fields.update(self.health.details(i, self.health.snap))
        if "wbgt_basis" in wanted:
            twa = table.get("wbgt_time_weighted")
            basis = ("the 60-minute time-weighted mean" if twa is not None
                     and bool(twa.present[i])
                     else "the spot value (the 60-minute mean is not complete yet)")
            est = table.get("natural_wet_bulb_estimated")
            if est is not None and bool(est.present[i]):
                mrt = table["mean_radiant_temperature"].values[i]
                ta = env["air_temperature"][i]
                by_globe = bool(np.isfinite(mrt)) and not mrt - ta > 70.0
                basis += ("; natural wet bulb estimated from the globe, air temperature, "
                          "humidity and air speed (Liljegren et al. 2008)" if by_globe else
                          "; natural wet bulb estimated (Liljegren et al. 2008) from the solar "
                          "irradiance and the sun's position"
                          + (", the globe reading more than 70 K above the air"
                             if np.isfinite(mrt) else ""))
            fields["wbgt_basis"] = basis
        if wanted & AHEAD_FIELDS and self.evaluation.foresight is not None:
            fields.update(foresight_texts(self.evaluation.foresight, i, now, table, wanted))
        if "rules_unknown_detail" in wanted:
            unknown = unknown_detail(self.advisories.rules, env, i, now)
            if unknown:
                fields["rules_unknown_detail"] = unknown
        return fields

    def republish_all(self) -> None:
        """Send every space's conditions and every live advisory at the next evaluation
        (after a reconnect, where retained messages may have been lost)."""
        self.publication.republish_conditions()
        self.advisories.last_refresh = -math.inf

    # ------------------------------------------------------------------ commands, restore
    def command(self, verb: str, body: bytes, now: float, audience: str | None = None,
                identity: str | None = None) -> tuple[dict[str, Any], list[Effect]]:
        """Acknowledge, shelve or unshelve an advisory; see :func:`commands.command`."""
        return commands.command(self.advisories, verb, body, now, audience, identity)

    def clock_stepped(self, now: float, step_s: float) -> list[Effect]:
        """The wall clock was stepped by ``step_s`` (negative: back) at ``now``.

        The engine keeps its timers on the wall timeline it is fed; the shell measures each
        step (the wall clock's change minus the monotonic clock's) and hands it here, and
        every timer moves by it: so every duration (delays, shelving and its daily budget,
        reminders, the conditions, sample and heat-strain schedules) ends after the same
        monotonic time as without the step, and no schedule stops. Timestamps (``now``)
        follow the corrected clock. After a step back, readings are no longer refused as
        older than the latest one taken before it. Returns the live advisories' records
        (their timers moved)."""
        if step_s < 0:
            self.state.clock_stepped_back(now)
        self.publication.shift_timers(step_s)
        self.evaluation.last_phs += step_s
        self.last_sample += step_s
        return self.advisories.shift_timers(step_s)

    def restore(self, records: list[dict[str, Any]],
                malformed: list[str] | None = None) -> list[str]:
        """Bring back stored live advisories; see :func:`advisory_records.restore`."""
        book = self.advisories
        return advisory_records.restore(book.rules, book.model, book.by_id, records, malformed)

    # ------------------------------------------------------------------ groups
    @property
    def owned(self) -> BoolArray:
        """The spaces this instance evaluates (all, unless it is one of a group)."""
        return self.publication.owned

    def set_owned(self, space_ids: Iterable[str], now: float) -> list[Effect]:
        """Evaluate only the spaces ``space_ids`` from now on (one instance of a group).

        A space given up is forgotten here (its live advisories go on at the instance that
        takes it, from their retained messages; its store rows are removed: the returned
        effects). A space taken up is evaluated from the next tick; call :meth:`adopt` with
        its retained advisories first, so that none is raised again. Its 60-minute WBGT
        window is rebuilt from the readings from now on and published as partial until it
        is whole (``windows.wbgt_60min`` in its conditions).
        """
        index = self.model.space_index
        new = np.zeros(self.n, dtype=bool)
        for sid in space_ids:
            i = index.get(sid)
            if i is not None:
                new[i] = True
        old = self.publication.owned
        gained = new & ~old
        released = old & ~new
        effects: list[Effect] = []
        book = self.advisories
        for rt in book.rules:
            rt.mask = rt.base_mask & new
            for i in np.flatnonzero(released).tolist():
                adv = rt.advisories.pop(i, None)
                if adv is not None:
                    book.by_id.pop(adv.id, None)
                    effects.append(Persist("advisory", f"{self.model.space_ids[i]}/{adv.rule}",
                                           None))
                rt.state[i] = 0
                rt.level[i] = rt.rule.base_priority
                for arr in (rt.pending_since, rt.clear_since, rt.last_notified,
                            rt.shelved_until, rt.unknown_since, rt.lower_since,
                            rt.lowered_at, rt.relapse_until):
                    arr[i] = np.nan
                rt.acted_now[i] = False
                rt.raised_times.pop(i, None)
                rt.event_count.pop(i, None)
        if self.ticks > 0:  # at start nothing moved: the instance just began
            self.publication.moved_at[gained] = now
        self.publication.moved_at[released] = np.nan
        self.publication.touched[gained] = True
        self.publication.last_conditions[gained] = -math.inf
        self.publication.owned = new
        self.evaluation.owned = None if new.all() else new
        return effects

    def adopt(self, payloads: Iterable[dict[str, Any]], now: float, *,
              by: str | None = None) -> tuple[list[str], list[Effect]]:
        """Continue live advisories another instance of the group published (their
        retained messages with ``handover``); see :func:`handover.adopt`. Returns notes on
        what was not taken and the effects."""
        return handover.adopt(self.advisories, self.publication.owned, payloads, now, by=by)

    def reconcile(self, space_ids: Iterable[str], payloads: Iterable[dict[str, Any]],
                  now: float, *, by: str | None = None) -> tuple[list[str], list[Effect]]:
        """Take over spaces this instance has been evaluating as a standby: what was
        published for them wins over what it computed; see :func:`handover.reconcile`."""
        return handover.reconcile(self.advisories, self.publication.owned, space_ids,
                                  payloads, now, by=by)

    def digest(self, now: float, since: float) -> list[Effect]:
        """The daily digest per audience; see :meth:`Floods.digest`."""
        book = self.advisories
        return book.floods.digest(now, since, book.live(), self.model.space_ids)

    # ------------------------------------------------------------------ queries
    def conditions_payload(self, i: int) -> dict[str, Any]:
        """The latest published form of space ``i``'s conditions."""
        assert self.last_table is not None and self.last_snapshot is not None
        return self.publication.conditions_payload(self.last_snapshot, self.last_table, i)

    def advisory_payload(self, adv: Advisory) -> dict[str, Any]:
        return self.publication.advisory_payload(adv)

    def live_advisories(self) -> list[Advisory]:
        return self.advisories.live()

    def active_counts(self) -> dict[tuple[str, str], int]:
        """(rule, priority) -> live advisories, for metrics."""
        out: dict[tuple[str, str], int] = {}
        for adv in self.live_advisories():
            out[(adv.rule, adv.priority)] = out.get((adv.rule, adv.priority), 0) + 1
        return out

