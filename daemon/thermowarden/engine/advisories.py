"""Advisories: rule truths -> the lifecycle per (space, rule), levels and notifications.

Each rule keeps its lifecycle as arrays over the spaces
(:class:`~thermowarden.engine.rule_runtime.RuleRuntime`); an :class:`Advisory` exists for
every (space, rule) that is live. Every transition goes through the table of
:mod:`thermowarden.core.lifecycle`: an illegal one raises and changes nothing. Around the
stepping here: ``easing`` (trends, re-arming), ``acted_on`` (advice carried out and its
effect), ``texts`` (what an advisory says), ``floods`` (held-back notifications, the
digest), ``advisory_records`` (timers in the stored record, restore) and ``commands``
(acknowledge, shelve, unshelve).
"""

from __future__ import annotations

import copy
import math
from collections import deque
from collections.abc import Callable, Mapping
from collections.abc import Set as AbstractSet
from typing import Any, Final

import numpy as np

from thermowarden.config.rule_packs import PRIORITIES
from thermowarden.config.site import SiteConfig
from thermowarden.core.columns import BoolArray, IndexColumn
from thermowarden.core.expressions import Expression
from thermowarden.core.json_values import iso
from thermowarden.core.lifecycle import State, Trigger, transition
from thermowarden.effects import Effect, Persist
from thermowarden.engine import acted_on, advisory_records, easing
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.floods import Floods
from thermowarden.engine.publication import Publication
from thermowarden.engine.rule_runtime import (
    CHATTER_COUNT,
    CHATTER_HOLD_S,
    CHATTER_WINDOW_S,
    RuleRuntime,
    build_rule_runtimes,
)
from thermowarden.engine.rule_truths import RuleTruths
from thermowarden.engine.texts import RenderContext, Texts, no_details, one_space, values_now
from thermowarden.rules import HEAT_STRESS_CAUTIONS, CompiledPack
from thermowarden.site_model import SiteModel

_IDLE, _PENDING, _ACTIVE = State.IDLE, State.PENDING, State.ACTIVE  # (each State.X: a call)
_ACKNOWLEDGED, _SHELVED = State.ACKNOWLEDGED, State.SHELVED

HISTORY_KEPT: Final = 50
ADVISORY_REFRESH_S: Final = 300.0
"""Live advisories are republished (retained) this often."""


class Advisories:
    """The live advisories of a site and their lifecycle."""

    def __init__(self, config: SiteConfig, model: SiteModel, packs: Mapping[str, CompiledPack],
                 publication: Publication, texts: Texts,
                 refresh_s: float = ADVISORY_REFRESH_S) -> None:
        self.config = config
        self.refresh_s = refresh_s
        """Seconds between republications of the live advisories (0: never; replay, which
        has no broker to keep them on)."""
        self.model = model
        self.pub = publication
        self.texts = texts
        self.n = model.n_spaces
        self.rules = build_rule_runtimes(config, model, packs)
        self.by_id: dict[str, tuple[RuleRuntime, int]] = {}
        self.floods = Floods(config, publication)
        self.last_refresh = -math.inf
        self._ctx = RenderContext({}, None)

    # ------------------------------------------------------------------ evaluation
    def begin(self, base: Mapping[str, Any], table: Mapping[str, IndexColumn] | None,
              details: Callable[[int, AbstractSet[str]], dict[str, object]] = no_details,
              evaluated: BoolArray | None = None) -> None:
        """Start an evaluation: texts rendered from now on use these values (of the spaces
        ``evaluated``, None: all)."""
        self._ctx = RenderContext(base, table, details,
                                  None if evaluated is None else evaluated.copy())

    def step(self, rt: RuleRuntime, truths: RuleTruths, now: float,
             effects: list[Effect]) -> None:
        """Advance one rule's lifecycle in every space from its truths at ``now``."""
        cfg = rt.rule.config
        cond, clear, hold, level_idx = truths.raise_, truths.clear, truths.hold, truths.level
        rt.holds = (cond.true | ~cond.known) & rt.mask
        rt.raise_true = cond.true & rt.mask
        rt.now_level = np.where(rt.mask, level_idx, -1).astype(np.int8)
        rt.leave_watch = False
        live_before = rt.state >= _ACTIVE
        # unknown for want of an input: the raise condition while an input it needs is
        # missing, or the clear condition of a live advisory whatever the reason (unknown
        # never clears, so such an advisory would stand for ever)
        stuck = rt.mask & ((truths.lacking & ~cond.known) | (live_before & ~clear.known))
        rt.unknown_since = np.where(stuck, np.fmin(rt.unknown_since, now), np.nan)
        state = rt.state
        # idle -> pending (just after a clearing, not at the lowest level while the space is
        # still easing: see RuleEasing.rearm_s)
        blocked = easing.rearming(rt, cond.true & (state <= _PENDING), level_idx, now,
                                  self.n)
        start = (state == _IDLE) & cond.true & ~hold & ~blocked
        rt.rearm_check = np.full(self.n, np.nan)
        for i in np.flatnonzero(blocked):
            q = rt.trends.get(int(i))
            rt.rearm_check[i] = (q[-1][0] if q else now) + easing.TREND_EVERY_S
        rt.pending_since = np.where(start, now, rt.pending_since)
        state[start] = _PENDING
        # pending -> idle (false, unknown, or held back)
        drop = (state == _PENDING) & ~(cond.true & ~hold & ~blocked)
        state[drop] = _IDLE
        rt.pending_since[drop] = np.nan
        # pending -> active
        due = (state == _PENDING) & cond.true & (now - rt.pending_since >= cfg.on_delay_s)
        for i in np.flatnonzero(due):
            self._raise(rt, int(i), int(level_idx[i]), now, effects)
        live = state >= _ACTIVE
        if not live.any():
            return
        rt.clear_since = np.where(live & clear.true, np.fmin(rt.clear_since, now), np.nan)
        # acted on: record it once, follow its effect, and wait for it
        if truths.acted_on is not None:
            rt.acted_now = truths.acted_on & live
            for i in np.flatnonzero(rt.acted_now):
                adv = rt.advisories[int(i)]
                if adv.acted_on is None:
                    self._acted(rt, adv, now)
                    effects.append(self.published(adv))
                    effects.append(self.persist(adv))
            for i in np.flatnonzero(live):
                adv = rt.advisories[int(i)]
                if adv.acted_on is not None and rt.settled.get(adv.space) is not adv.acted_on:
                    self._follow_effect(rt, adv, now, effects)
        # cleared
        # (the longer hold of a chattering advisory matters only where it may clear now)
        clearing = live & clear.true
        off = np.full(self.n, cfg.off_delay_s)
        for i in np.flatnonzero(clearing):
            if rt.advisories[int(i)].chattering:
                off[i] = max(cfg.off_delay_s, CHATTER_HOLD_S)
        gone = clearing & (now - rt.clear_since >= off)
        for i in np.flatnonzero(gone):
            self.apply(rt, int(i), Trigger.OFF_DELAY_ELAPSED, now, effects)
        live &= ~gone
        # shelving expiry
        expired = live & (state == _SHELVED) & (now >= rt.shelved_until)
        for i in np.flatnonzero(expired):
            self.apply(rt, int(i), Trigger.SHELVE_EXPIRED, now, effects)
        # escalation within one advisory: up at once; down as the numbers fall, whatever
        # band they sit in (below the lowest band, to the lowest level, until the clear
        # condition ends it), after the lower level has held DEESCALATE_HOLD_S and past
        # each level's leave_when (hysteresis), so noise near a band edge does not make the
        # priority chatter
        if rt.rule.levels:
            up = live & (level_idx > rt.level)
            target = np.where(level_idx >= 0, level_idx, rt.rule.lowest_level)
            lower_to = np.full(self.n, -1, dtype=np.int8)
            for i in np.flatnonzero(live & cond.known & (target < rt.level)):
                lower_to[i] = self._lowest_allowed(rt, int(i), int(target[i]))
            lower = live & (lower_to >= 0) & (lower_to < rt.level)
            # a leave_when turns with the values, not the truths: step every tick while it
            # keeps an advisory up, and while a lowering it allowed waits for its hold (it
            # may stop allowing it before the hold is over)
            rt.leave_watch = bool((live & (lower_to > target)).any()) or (
                bool(rt.rule.level_leave) and bool(lower.any()))
            # a relapsing advisory whose lower level stopped holding again swings on: its
            # relapse lasts another CHATTER_WINDOW_S
            swung = live & ~lower & np.isfinite(rt.lower_since) & (rt.relapse_until > now)
            rt.relapse_until[swung] = now + CHATTER_WINDOW_S
            rt.lower_since = np.where(lower, np.fmin(rt.lower_since, now), np.nan)
            down = lower & (now >= rt.lower_due())
            for i in np.flatnonzero(up):
                if now - rt.lowered_at[i] < CHATTER_WINDOW_S:
                    rt.relapse_until[i] = now + CHATTER_WINDOW_S
                rt.level[i] = level_idx[i]
                rt.lower_since[i] = np.nan
                rt.advisories[int(i)].lowered = False
                self.apply(rt, int(i), Trigger.ESCALATE, now, effects)
            for i in np.flatnonzero(down):
                rt.level[i] = lower_to[i]
                rt.lower_since[i] = np.nan
                rt.lowered_at[i] = now
                rt.advisories[int(i)].lowered = True
                self.apply(rt, int(i), Trigger.DEESCALATE, now, effects)
        # re-notify: a reminder that the hazard persists, with the numbers of now; never
        # while the equipment is already in the state the advice asks for
        intervals = rt.renotify_intervals()
        if intervals is not None:
            every = intervals[rt.level]
            again = (live & (state == _ACTIVE) & ~rt.acted_now
                     & (now - rt.last_notified >= every))
            for i in np.flatnonzero(again):
                self.apply(rt, int(i), Trigger.RENOTIFY_DUE, now, effects)
        # an acknowledgement does not silence an urgent advisory for ever
        urgent = PRIORITIES.index("urgent")
        remind_s = rt.urgent_remind_s()
        reminded = (live & (state == _ACKNOWLEDGED) & (rt.level >= urgent)
                    & (now - rt.last_notified >= remind_s))
        for i in np.flatnonzero(reminded):
            self.apply(rt, int(i), Trigger.RENOTIFY_DUE, now, effects)

    def shift_timers(self, step_s: float) -> list[Effect]:
        """Move every timer by ``step_s`` seconds: the wall clock was stepped by that much
        (negative: back), and a duration (on-delay, off-delay, shelving and its daily
        budget, reminders, chatter and flood windows, the effect of advice acted on, the
        refresh and summary schedules) must last as long after the step as it would have
        without it, that is by the monotonic clock. Timestamps already said are not
        changed. Returns the records of the live advisories, to store their timers."""
        out: list[Effect] = []
        for rt in self.rules:
            rt.shift(step_s)
            out.extend(self.persist(adv) for adv in rt.advisories.values())
        self.floods.shift(step_s)
        self.last_refresh += step_s
        return out

    def _lowest_allowed(self, rt: RuleRuntime, i: int, target: int) -> int:
        """The lowest level space ``i``'s advisory may go down to now, towards ``target``:
        each level it passes on the way must let go (its ``leave_when``, if any, holds)."""
        level = int(rt.level[i])
        while level > target:
            leave = rt.rule.level_leave.get(level)
            if leave is not None and not self._holds_at(rt, leave, i):
                break
            lower = [p for p, _ in rt.rule.levels if target <= p < level]
            level = max(lower) if lower else target
        return level

    def _holds_at(self, rt: RuleRuntime, expr: Expression, i: int) -> bool:
        return bool(expr.evaluate_truth(one_space(expr, self._ctx.base, rt.params, i), 1)
                    .true[0])

    def sample_trends(self, now: float) -> None:
        """Sample the easing quantity of every live or re-arming advisory (at most once a
        minute) for its trend; call once per tick, after :meth:`begin`."""
        easing.sample_trends(self.rules, self._ctx, now)

    def refresh_due(self, now: float) -> list[Effect]:
        """Republish every live advisory (retained) every ``refresh_s``, with the numbers
        of the moment.

        The republished texts are rendered on a copy: the advisory keeps the texts its
        last event said, which a later event falls back on where its own numbers are
        unknown. So the events depend on the feed alone, not on when retained messages
        were refreshed (replay refreshes none and gives the same events)."""
        if self.refresh_s <= 0 or now - self.last_refresh < self.refresh_s:
            return []
        self.last_refresh = now
        out: list[Effect] = []
        for rt in self.rules:
            for adv in rt.advisories.values():
                shown = adv
                mode = easing.mode(rt, adv.space, adv)
                if self._ctx.has_numbers(adv.space) and (rt.holds[adv.space]
                                                         or mode != "level"):
                    shown = copy.copy(adv)
                    self._render(rt, shown, now, mode)
                out.append(self.published(shown, counter=adv))
                # stored with its sequence number: after a restart its records go on
                # from the last one published, never back
                out.append(self.persist(adv))
        return out

    # ------------------------------------------------------------------ acted on
    # ------------------------------------------------------------------ acted on
    def _acted(self, rt: RuleRuntime, adv: Advisory, now: float) -> None:
        """The equipment went into the state the advice asks for: note the target
        quantity and the value the advice predicts for this moment's numbers.

        The texts are rendered again only where the rule's condition still holds: acted on
        while the advisory waits to clear, it keeps what it last said (its texts are
        written for the condition), and the prediction is computed on a copy, so that it
        is of the same moment as the value it is compared with."""
        shown = adv
        if self._ctx.has_numbers(adv.space):
            if not rt.holds[adv.space]:
                shown = copy.copy(adv)
            self._render(rt, shown, now)
        adv.acted_on = acted_on.record(rt, adv, shown, now, self._ctx)
        adv.updated_at = now
        self.note(adv, now, "acted_on")

    def _follow_effect(self, rt: RuleRuntime, adv: Advisory, now: float,
                       effects: list[Effect]) -> None:
        """Follow the effect of advice acted on (:func:`acted_on.follow`); say once that it
        has not helped when it has not in the expected time."""
        waited = acted_on.follow(rt, adv, now, self._ctx)
        if waited is not None:
            self.apply(rt, adv.space, Trigger.EFFECT_OVERDUE, now, effects,
                       extra={"waited_min": waited})

    # ------------------------------------------------------------------ transitions
    def _render(self, rt: RuleRuntime, adv: Advisory, now: float | None = None,
                mode: str = "level") -> None:
        """Render ``adv``'s texts with the numbers of this evaluation: its level's texts, or
        (``mode``) the rule's easing or cleared texts (see :meth:`Texts.show`)."""
        clear_in = (easing.clear_in_min(rt, adv.space, now, self._ctx)
                    if rt.rule.easing is not None and mode == "easing" and now is not None
                    else None)
        self.texts.show(rt.rule, adv, self._ctx, rt.params, int(rt.level[adv.space]), now,
                        mode, clear_in)

    def _raise(self, rt: RuleRuntime, i: int, level: int, now: float,
               effects: list[Effect]) -> None:
        rule = rt.rule
        new_state, event = transition(State(rt.state[i]), Trigger.ON_DELAY_ELAPSED)
        level = level if level >= 0 else rule.base_priority
        rt.level[i] = level
        space = self.model.space(i)
        adv = Advisory(
            id=f"{space.id}.{rule.key}.{int(now)}", space=i, rule=rule.key,
            audience=rule.config.audience, priority=PRIORITIES[level], state=new_state,
            raised_at=now, updated_at=now,
            cautions=list(HEAT_STRESS_CAUTIONS) if rule.config.heat_stress_cautions else [])
        times = rt.raised_times.setdefault(i, deque())
        times.append(now)
        while times and times[0] < now - CHATTER_WINDOW_S:
            times.popleft()
        adv.chattering = len(times) >= CHATTER_COUNT
        self._render(rt, adv, now)
        rt.state[i] = new_state
        rt.pending_since[i] = np.nan
        rt.clear_since[i] = np.nan
        rt.last_notified[i] = now
        rt.advisories[i] = adv
        self.by_id[adv.id] = (rt, i)
        assert event is not None
        self.note(adv, now, event)
        self._emit(rt, adv, event, now, effects)

    def apply(self, rt: RuleRuntime, i: int, trigger: Trigger, now: float,
              effects: list[Effect], by: str | None = None,
              extra: dict[str, Any] | None = None) -> Advisory:
        """Run one table transition for an existing advisory (raises if illegal): the
        lifecycle's arrays, the advisory's texts and history, and its event."""
        adv = rt.advisories[i]
        new_state, event = transition(State(rt.state[i]), trigger)
        rt.state[i] = new_state
        adv.state = new_state
        adv.updated_at = now
        adv.priority = PRIORITIES[int(rt.level[i])]
        mode = easing.mode(rt, i, adv)
        if new_state == State.IDLE and rt.rule.easing is not None:
            mode = "cleared"
        if self._ctx.has_numbers(i) and (rt.holds[i] or mode != "level"):
            # an event says the numbers of its moment where the texts are true of them:
            # unless the condition is known to be false; waiting to clear and clearing, it
            # keeps what it said, and a clearing records the values it cleared at in its
            # history entry (the notice that acted-on advice has not helped comes only
            # while the condition holds, see _follow_effect). A rule with easing texts says
            # that it eases, and that it cleared, with the numbers of the moment.
            self._render(rt, adv, now, mode)
        if new_state == State.IDLE and self._ctx.has_numbers(i):
            values = values_now(rt.rule, self._ctx, rt.params, i, self.n)
            extra = {**(extra or {}), "values": values}
        if trigger == Trigger.ESCALATE and adv.shelved is not None:
            adv.shelved = None
        if trigger in (Trigger.UNSHELVE, Trigger.SHELVE_EXPIRED, Trigger.ESCALATE) or \
                new_state == State.IDLE:
            spans = rt.shelvings.get(i)
            if spans and spans[-1][1] > now:
                spans[-1][1] = now  # the shelving ended early: only the time used counts
        if trigger in (Trigger.UNSHELVE, Trigger.SHELVE_EXPIRED):
            adv.shelved = None
            rt.shelved_until[i] = np.nan
        if trigger == Trigger.ESCALATE:
            adv.acknowledged = None
        if event in ("raised", "escalated", "renotified", "unshelved", "no_effect",
                     "acknowledged"):
            rt.last_notified[i] = now  # (acknowledged: an urgent reminder counts from it)
        if new_state == State.IDLE:
            adv.cleared_at = now
            rec = adv.acted_on
            if rec is not None:
                acted_on.close(rt, rec, i, now, self._ctx)
            del rt.advisories[i]
            self.by_id.pop(adv.id, None)
            rt.clear_since[i] = np.nan
            rt.shelved_until[i] = np.nan
            rt.level[i] = rt.rule.base_priority
            if rt.rule.easing is not None and rt.rule.easing.rearm_s > 0:
                rt.rearm_until[i] = now + rt.rule.easing.rearm_s
        if event is not None:
            self.note(adv, now, event, by, extra)
            self._emit(rt, adv, event, now, effects)
        if new_state == State.IDLE:
            rt.event_count.pop(i, None)  # after its last event: the next advisory starts anew
        return adv

    @staticmethod
    def note(adv: Advisory, now: float, event: str, by: str | None = None,
             extra: dict[str, Any] | None = None) -> None:
        """Add an entry to ``adv``'s history (the last ``HISTORY_KEPT`` are kept)."""
        entry: dict[str, Any] = {"at": iso(now), "event": event}
        if by:
            entry["by"] = by
        if extra:
            entry.update(extra)
        adv.history.append(entry)
        del adv.history[:-HISTORY_KEPT]

    def _timers(self, adv: Advisory) -> dict[str, Any]:
        """The lifecycle state a restart or another instance needs to continue ``adv``
        (:func:`advisory_records.timers`; ``adv`` may be a copy rendered for a refresh)."""
        rt, i = self.by_id[adv.id]
        return advisory_records.timers(rt, i)

    def persist(self, adv: Advisory) -> Effect:
        """The store row of ``adv``: with its timers while live, to continue after a
        restart."""
        if adv.cleared_at is not None:
            return self.pub.advisory_persist(adv, {})
        return self.pub.advisory_persist(adv, self._timers(adv))

    def published(self, adv: Advisory, counter: Advisory | None = None) -> Effect:
        """The retained advisory message; a live one carries its timers (``handover``), so
        that another instance of a group can continue it (:meth:`adopt`). Every call makes
        the next record of the advisory: its ``seq`` grows by one (kept on ``counter``
        when ``adv`` is a copy rendered for the message)."""
        keeper = counter if counter is not None else adv
        keeper.seq += 1
        adv.seq = keeper.seq
        if adv.cleared_at is not None or adv.id not in self.by_id:
            return self.pub.advisory_publish(adv)
        return self.pub.advisory_publish(adv, self._timers(adv))

    def _emit(self, rt: RuleRuntime, adv: Advisory, event: str, now: float,
              effects: list[Effect]) -> None:
        n = rt.event_count.get(adv.space, 0) + 1
        rt.event_count[adv.space] = n
        # the record first: the event carries the same sequence number (one change)
        record = self.published(adv)
        payload = self.pub.event_payload(adv, event, now)
        # the shard and its lease epoch make the id unique across holders: a new holder
        # continues the count under a new epoch, and an old one is fenced from its epoch
        shard, epoch = self.pub.fence(adv.space)
        payload["event_id"] = f"{self.config.site.id}.{shard}.{epoch}.{adv.id}.{n}"
        self.floods.count(event, adv.audience)
        effects.append(record)
        effects.append(self.persist(adv))
        effects.append(Persist("event", adv.id, payload))
        if self.floods.admit(adv.audience, adv.priority, now, payload):
            effects.append(self.pub.event_publish(adv, payload))

    # ------------------------------------------------------------------ queries
    def live(self) -> list[Advisory]:
        """Every live advisory (active, acknowledged or shelved)."""
        return [a for rt in self.rules for a in rt.advisories.values()]
