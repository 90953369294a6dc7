"""Advisories: rule truths -> the lifecycle per (space, rule), levels, commands, floods.

Each rule keeps its lifecycle as arrays over the spaces (:class:`RuleRuntime`); an
:class:`Advisory` exists for every (space, rule) that is live. Every transition goes
through the table of :mod:`thermowarden.core.lifecycle`: an illegal one raises and changes
nothing. Notifications to one audience beyond the flood limit are held back and summarised.
"""

from __future__ import annotations

import copy
import json
import math
from collections import deque
from collections.abc import Callable, Mapping
from collections.abc import Set as AbstractSet
from dataclasses import dataclass
from typing import Any, Final

import numpy as np

from thermowarden.config.rule_packs import AUDIENCES, PRIORITIES
from thermowarden.config.site import SiteConfig
from thermowarden.core.columns import BoolArray, FloatArray, IndexColumn
from thermowarden.core.expressions import Expression
from thermowarden.core.json_values import iso, num
from thermowarden.core.labels import value_label
from thermowarden.core.lifecycle import IllegalTransition, State, Trigger, transition
from thermowarden.effects import Effect, Persist
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.evaluation import RuleTruths
from thermowarden.engine.publication import EVENT_SCHEMA, REPLY_SCHEMA, Publication
from thermowarden.engine.texts import Texts, number_at, one_space, values_at
from thermowarden.rules import (
    HEAT_STRESS_CAUTIONS,
    CompiledPack,
    CompiledRule,
    missing_inputs,
    provided_inputs,
    rule_applies,
)
from thermowarden.site_model import SiteModel

UNKNOWN_LONG_S: Final = 1800.0
"""A rule unknown this long in a space (an input it needs missing) counts for sensor health."""
CHATTER_WINDOW_S: Final = 3600.0
CHATTER_COUNT: Final = 3
"""Raised this often within ``CHATTER_WINDOW_S``: the advisory is chattering."""
CHATTER_HOLD_S: Final = 3600.0
HISTORY_KEPT: Final = 50
DEESCALATE_HOLD_S: Final = 300.0
"""A lower level must hold this long before an advisory is lowered to it (and, where the
level says ``leave_when``, the value must have passed that hysteresis)."""
RELAPSE_HOLD_S: Final = 1800.0
"""... and this long while the advisory relapses: it went back up within
``CHATTER_WINDOW_S`` of being lowered, so its numbers sit at a band edge (alarm-management
practice, ISA-18.2 / EEMUA 191: a level that comes and goes several times an hour is
chattering; the hold is common practice, no source)."""
TREND_WINDOW_S: Final = 900.0
"""The trend of an easing advisory's quantity is fitted over this long (least squares)."""
TREND_MIN_SPAN_S: Final = 300.0
"""... and only once its samples span this long."""
TREND_EVERY_S: Final = 60.0
"""An easing quantity is sampled at most this often."""
CLEAR_FORECAST_MAX_MIN: Final = 24 * 60.0
"""A projected clearing further away than this is not said."""
ADVISORY_REFRESH_S: Final = 300.0
"""Live advisories are republished (retained) this often."""
ACKNOWLEDGED_URGENT_RENOTIFY_S: Final = 1800.0
EFFECT_WAIT_S: Final = 1800.0
"""How long acted-on advice has to work when its rule names no ``effect``."""
"""An acknowledged urgent advisory is renotified (a reminder that the hazard persists, with
the numbers of now) at most this long after its last notification, or at its rule's
``renotify_s`` when shorter. Common practice, no source: heat-stress work/rest regimes are
reviewed within the hour, and an acknowledgement must not silence an urgent alert for the
rest of a shift."""
SHELVE_BUDGET_WINDOW_S: Final = 86_400.0
"""Shelved time is summed over this rolling window for ``max_shelved_per_day_s``."""


class CommandError(ValueError):
    """A command that changes nothing; the message goes back in the reply."""


class RuleRuntime:
    """Arrays of one rule's lifecycle across all spaces."""

    def __init__(self, rule: CompiledRule, mask: BoolArray, params: dict[str, FloatArray]):
        n = mask.size
        self.rule = rule
        self.base_mask = mask
        """The spaces the rule applies to."""
        self.mask = mask
        """... of those, the ones this instance evaluates (all, unless one of a group)."""
        self.params = params
        self.state = np.zeros(n, dtype=np.int8)
        self.level = np.full(n, rule.base_priority, dtype=np.int8)
        self.pending_since = np.full(n, np.nan)
        self.clear_since = np.full(n, np.nan)
        self.last_notified = np.full(n, np.nan)
        self.shelved_until = np.full(n, np.nan)
        self.unknown_since = np.full(n, np.nan)
        self.lower_since = np.full(n, np.nan)
        self.lowered_at = np.full(n, np.nan)
        """When the advisory was last lowered a level."""
        self.relapse_until = np.full(n, np.nan)
        """Until when a lowering waits ``RELAPSE_HOLD_S``: it went back up soon after one."""
        self.now_level = np.full(n, -1, dtype=np.int8)
        """The priority index of the highest level whose condition holds at the last step
        (-1: none, or not known)."""
        self.rearm_until = np.full(n, np.nan)
        """After a clearing of a rule with ``easing.rearm_s``: until when its lowest level
        is raised again only against the easing trend."""
        self.trends: dict[int, deque[tuple[float, float]]] = {}
        """Per space: (time, value) of the easing quantity, while live or re-arming."""
        self.rearm_check = np.full(n, np.nan)
        """When a raise held back while re-arming is looked at again: at the next sample of
        its trend."""
        self.leave_watch = False
        """A lower level holds somewhere but a leave_when keeps the advisory up: that turns
        with the values, not the truths, so every tick is stepped meanwhile."""
        self.acted_now = np.zeros(n, dtype=bool)
        """The equipment is in the state the advice asks for (blinds lowered, fans on)."""
        self.holds = np.zeros(n, dtype=bool)
        """The raise condition is not known to be false at the last step (true, or unknown
        for want of a reading). The texts are written for it to hold ("humidity 76 % is
        above 60 %"), so they are rendered again only here (a sentence whose number is
        unknown is left out); where the condition is false (waiting to clear, clearing) an
        advisory keeps what it said."""
        self.raise_true = np.zeros(n, dtype=bool)
        """The raise condition is known to be true at the last step (the notice that advice
        acted on has not helped waits for it: not while a reading is missing)."""
        self.advisories: dict[int, Advisory] = {}
        self.raised_times: dict[int, deque[float]] = {}
        self.shelvings: dict[int, list[list[float]]] = {}
        """Per space: [start, end] of each shelving in the last day (end: planned or when
        it ended), for the daily shelving limit (kept across advisories of the space)."""
        self.event_count: dict[int, int] = {}
        """Per space: events emitted by its live advisory (the event identity's suffix)."""
        every = [rule.renotify_at(k) for k in range(len(PRIORITIES))]
        self._renotify: FloatArray | None = (
            None if all(e is None for e in every)
            else np.array([math.inf if e is None else e for e in every]))

    def lower_due(self) -> FloatArray:
        """When a pending lowering may first happen (epoch s; NaN: none pending): after
        ``DEESCALATE_HOLD_S``, and while relapsing after ``RELAPSE_HOLD_S`` or at the end
        of the relapse, whichever comes first."""
        ls = self.lower_since
        relapsing = np.fmax(ls + DEESCALATE_HOLD_S,
                            np.fmin(self.relapse_until, ls + RELAPSE_HOLD_S))
        return np.where(np.isfinite(self.relapse_until), relapsing, ls + DEESCALATE_HOLD_S)

    def renotify_intervals(self) -> FloatArray | None:
        """Seconds between reminders per priority index (inf: none), or None if the rule
        never reminds."""
        return self._renotify

    def urgent_remind_s(self) -> float:
        """Seconds between reminders of an acknowledged urgent advisory: the rule's urgent
        interval, at most ``ACKNOWLEDGED_URGENT_RENOTIFY_S``."""
        urgent = PRIORITIES.index("urgent")
        return min(self.rule.renotify_at(urgent) or ACKNOWLEDGED_URGENT_RENOTIFY_S,
                   ACKNOWLEDGED_URGENT_RENOTIFY_S)

    def next_due(self) -> float:
        """The earliest time (epoch s) at which a timer of this rule's lifecycle may fall
        due in some space (on-delay, off-delay, shelving, de-escalation, re-notification,
        following the effect of advice acted on); until then, a step with the same
        conditions as the last one changes nothing."""
        cfg = self.rule.config
        live = self.state >= State.ACTIVE
        followed = self._effect_due()
        times = [self.pending_since + cfg.on_delay_s, self.shelved_until, self.rearm_check]
        if live.any():
            times.append(np.where(live, self.clear_since, np.nan) + cfg.off_delay_s)
            times.append(self.lower_due())
            intervals = self.renotify_intervals()
            if intervals is not None:
                # (no reminder while the equipment is as the advice asks)
                times.append(np.where((self.state == State.ACTIVE) & ~self.acted_now,
                                      self.last_notified, np.nan) + intervals[self.level])
            # an acknowledged urgent advisory is reminded of all the same (see step)
            urgent = PRIORITIES.index("urgent")
            times.append(np.where((self.state == State.ACKNOWLEDGED) & (self.level >= urgent),
                                  self.last_notified, np.nan) + self.urgent_remind_s())
        if self.leave_watch:
            return -math.inf
        due = np.fmin.reduce(times)
        first = float(np.nanmin(due)) if np.isfinite(due).any() else math.inf
        return min(first, followed)

    def _effect_due(self) -> float:
        """The earliest time a piece of advice acted on is due a check of its effect or
        the notice that it did not help (see :meth:`Advisories._follow_effect`); a second
        early, so that rounding never makes a step come too late (an early step with the
        same conditions changes nothing)."""
        eff = self.rule.config.effect
        wait_s = eff.wait_s if eff is not None else EFFECT_WAIT_S
        due = math.inf
        for adv in self.advisories.values():
            rec = adv.acted_on
            if rec is None:
                continue
            t0 = float(rec.get("_t", adv.updated_at))
            i = adv.space
            if not adv.effect_overdue and self.acted_now[i] and self.raise_true[i]:
                # (otherwise the notice waits for a change of the conditions, and a tick
                # whose conditions changed is stepped anyway)
                due = min(due, t0 + wait_s)
            if eff is not None and rec.get("effect") is not None and self.rule.effect_quantity:
                done = {c["after_min"] for c in rec["effect"]["checks"]}
                for after in eff.checks_s:
                    if after / 60 not in done:
                        due = min(due, t0 + after)
        return due - 1.0


def build_rule_runtimes(config: SiteConfig, model: SiteModel,
                        packs: Mapping[str, CompiledPack]) -> list[RuleRuntime]:
    """One runtime per rule of every pack, masked to the spaces that enable the pack, match
    the rule's filters and have a point for every input it needs; per-space parameters."""
    rules: list[RuleRuntime] = []
    provided = provided_inputs(model)
    for pack_name in sorted(packs):
        pack = packs[pack_name]
        enabled = np.array([pack_name in config.rule_packs(s) for s in config.spaces],
                           dtype=bool)
        lacking: set[tuple[str, int]] = set()
        for i in np.flatnonzero(enabled):
            for rule_id, _ in missing_inputs(pack, model, int(i), provided):
                lacking.add((rule_id, int(i)))
        for rule in pack.rules:
            applies = np.array([rule_applies(rule.config, s)
                                and (rule.config.id, i) not in lacking
                                for i, s in enumerate(config.spaces)], dtype=bool)
            params: dict[str, FloatArray] = {}
            for pname, default in rule.config.parameters.items():
                values = [config.parameters(s).get(pname, default) for s in config.spaces]
                params[pname] = np.array([float(v) for v in values], dtype=np.float64)
            rules.append(RuleRuntime(rule, enabled & applies, params))
    return rules


def _no_details(i: int, wanted: AbstractSet[str]) -> dict[str, object]:
    return {}


@dataclass
class _Context:
    """The evaluation in progress, for rendering texts with the numbers of the moment."""

    base: Mapping[str, Any]
    table: Mapping[str, IndexColumn] | None
    details: Callable[[int, AbstractSet[str]], dict[str, object]] = _no_details
    """Text fields of one space that are not arrays (sensor names, the WBGT basis)."""
    evaluated: BoolArray | None = None
    """The spaces this evaluation computed (None: all). A space taken over from another
    instance since has no numbers of its own here yet: its texts are not rendered again
    until it has been evaluated."""

    def has_numbers(self, i: int) -> bool:
        return self.table is not None and (self.evaluated is None or bool(self.evaluated[i]))


class Advisories:
    """The live advisories of a site, their lifecycle, commands and notification floods."""

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
        self.flood_limit = config.evaluation.flood_limit
        self.flood_window_s = config.evaluation.flood_window_s
        self.flood: dict[str, deque[float]] = {a: deque() for a in AUDIENCES}
        self.suppressed: dict[str, list[dict[str, Any]]] = {a: [] for a in AUDIENCES}
        self.last_summary: dict[str, float] = dict.fromkeys(AUDIENCES, -math.inf)
        self.summary_interval_s = config.evaluation.flood_summary_interval_s
        self.episode: dict[str, dict[str, Any] | None] = dict.fromkeys(AUDIENCES)
        """Per audience, the flood in progress: its id, since when, the summary updates
        sent and the notifications held back in it (None: no flood)."""
        self.raised_count: dict[str, int] = dict.fromkeys(AUDIENCES, 0)
        self.cleared_count: dict[str, int] = dict.fromkeys(AUDIENCES, 0)
        self.last_refresh = -math.inf
        self._ctx = _Context({}, None)

    # ------------------------------------------------------------------ evaluation
    def unknown_long(self, now: float) -> FloatArray:
        """Per space: how many rules (other than those of health packs) have been unknown for
        want of an input for at least ``UNKNOWN_LONG_S``."""
        since = [rt.unknown_since for rt in self.rules if not rt.rule.health]
        if not since:
            return np.zeros(self.n)
        counts: FloatArray = (now - np.stack(since) >= UNKNOWN_LONG_S).sum(
            axis=0, dtype=np.float64)  # one array operation, not one per rule
        return counts

    def unknown_detail(self, i: int, now: float) -> str:
        """Which rules of space ``i`` have been unknown for ``UNKNOWN_LONG_S`` and the names
        they read that are not known, in words: ``Lower the shading (Mean radiant
        temperature)``."""
        parts: list[str] = []
        env = self._ctx.base
        for rt in self.rules:
            if rt.rule.health or not now - rt.unknown_since[i] >= UNKNOWN_LONG_S:
                continue
            exprs = [e for _, e in rt.rule.levels] + [
                e for e in (rt.rule.condition, rt.rule.clear) if e is not None]
            names = sorted({n for e in exprs for n in e.names
                            if n not in rt.params and isinstance(env.get(n), np.ndarray)
                            and env[n].dtype != np.bool_ and not np.isfinite(env[n][i])})
            # in words: the rule's title and the inputs it lacks ("Too warm (PMV, ISO 7730)")
            lacking = ", ".join(value_label(n) for n in names) or "inputs out of range"
            parts.append(f"{rt.rule.config.title} ({lacking})")
        return "; ".join(parts)

    def begin(self, base: Mapping[str, Any], table: Mapping[str, IndexColumn] | None,
              details: Callable[[int, AbstractSet[str]], dict[str, object]] = _no_details,
              evaluated: BoolArray | None = None) -> None:
        """Start an evaluation: texts rendered from now on use these values (of the spaces
        ``evaluated``, None: all)."""
        self._ctx = _Context(base, table, details,
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
        live_before = rt.state >= State.ACTIVE
        # unknown for want of an input: the raise condition while an input it needs is
        # missing, or the clear condition of a live advisory whatever the reason (unknown
        # never clears, so such an advisory would stand for ever)
        stuck = rt.mask & ((truths.lacking & ~cond.known) | (live_before & ~clear.known))
        rt.unknown_since = np.where(stuck, np.fmin(rt.unknown_since, now), np.nan)
        state = rt.state
        # idle -> pending (just after a clearing, not at the lowest level while the space is
        # still easing: see RuleEasing.rearm_s)
        blocked = self._rearming(rt, cond.true & (state <= State.PENDING), level_idx, now)
        start = (state == State.IDLE) & cond.true & ~hold & ~blocked
        rt.rearm_check = np.full(self.n, np.nan)
        for i in np.flatnonzero(blocked):
            q = rt.trends.get(int(i))
            rt.rearm_check[i] = (q[-1][0] if q else now) + TREND_EVERY_S
        rt.pending_since = np.where(start, now, rt.pending_since)
        state[start] = State.PENDING
        # pending -> idle (false, unknown, or held back)
        drop = (state == State.PENDING) & ~(cond.true & ~hold & ~blocked)
        state[drop] = State.IDLE
        rt.pending_since[drop] = np.nan
        # pending -> active
        due = (state == State.PENDING) & cond.true & (now - rt.pending_since >= cfg.on_delay_s)
        for i in np.flatnonzero(due):
            self._raise(rt, int(i), int(level_idx[i]), now, effects)
        live = state >= State.ACTIVE
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
                    effects.append(self._published(adv))
                    effects.append(self._persist(adv))
            for i in np.flatnonzero(live):
                adv = rt.advisories[int(i)]
                if adv.acted_on is not None:
                    self._follow_effect(rt, adv, now, effects)
        # cleared
        off = np.full(self.n, cfg.off_delay_s)
        for i in np.flatnonzero(live):
            if rt.advisories[int(i)].chattering:
                off[i] = max(cfg.off_delay_s, CHATTER_HOLD_S)
        gone = live & clear.true & (now - rt.clear_since >= off)
        for i in np.flatnonzero(gone):
            self._apply(rt, int(i), Trigger.OFF_DELAY_ELAPSED, now, effects)
        live &= ~gone
        # shelving expiry
        expired = live & (state == State.SHELVED) & (now >= rt.shelved_until)
        for i in np.flatnonzero(expired):
            self._apply(rt, int(i), Trigger.SHELVE_EXPIRED, now, effects)
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
                self._apply(rt, int(i), Trigger.ESCALATE, now, effects)
            for i in np.flatnonzero(down):
                rt.level[i] = lower_to[i]
                rt.lower_since[i] = np.nan
                rt.lowered_at[i] = now
                rt.advisories[int(i)].lowered = True
                self._apply(rt, int(i), Trigger.DEESCALATE, now, effects)
        # re-notify: a reminder that the hazard persists, with the numbers of now; never
        # while the equipment is already in the state the advice asks for
        intervals = rt.renotify_intervals()
        if intervals is not None:
            every = intervals[rt.level]
            again = (live & (state == State.ACTIVE) & ~rt.acted_now
                     & (now - rt.last_notified >= every))
            for i in np.flatnonzero(again):
                self._apply(rt, int(i), Trigger.RENOTIFY_DUE, now, effects)
        # an acknowledgement does not silence an urgent advisory for ever
        urgent = PRIORITIES.index("urgent")
        remind_s = rt.urgent_remind_s()
        reminded = (live & (state == State.ACKNOWLEDGED) & (rt.level >= urgent)
                    & (now - rt.last_notified >= remind_s))
        for i in np.flatnonzero(reminded):
            self._apply(rt, int(i), Trigger.RENOTIFY_DUE, now, effects)

    def shift_timers(self, step_s: float) -> list[Effect]:
        """Move every timer by ``step_s`` seconds: the wall clock was stepped by that much
        (negative: back), and a duration (on-delay, off-delay, shelving and its daily
        budget, reminders, chatter and flood windows, the effect of advice acted on, the
        refresh and summary schedules) must last as long after the step as it would have
        without it, that is by the monotonic clock. Timestamps already said are not
        changed. Returns the records of the live advisories, to store their timers."""
        out: list[Effect] = []
        for rt in self.rules:
            for a in (rt.pending_since, rt.clear_since, rt.last_notified, rt.shelved_until,
                      rt.unknown_since, rt.lower_since, rt.lowered_at, rt.relapse_until):
                a += step_s
            rt.rearm_until += step_s
            for q in rt.trends.values():
                for k, (t_s, v) in enumerate(q):
                    q[k] = (t_s + step_s, v)
            for i, times in rt.raised_times.items():
                rt.raised_times[i] = deque((t + step_s for t in times), times.maxlen)
            for spans in rt.shelvings.values():
                for span in spans:
                    span[0] += step_s
                    span[1] += step_s
            for adv in rt.advisories.values():
                adv.raised_at += step_s  # minutes since raised, the chatter hold
                if adv.numbers_at is not None:
                    adv.numbers_at += step_s
                if adv.acted_on is not None and "_t" in adv.acted_on:
                    adv.acted_on["_t"] = float(adv.acted_on["_t"]) + step_s
                out.append(self._persist(adv))
        for audience, window in self.flood.items():
            self.flood[audience] = deque((t + step_s for t in window), window.maxlen)
        for audience, last in self.last_summary.items():
            self.last_summary[audience] = last + step_s
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

    def _rearming(self, rt: RuleRuntime, candidates: BoolArray, level_idx: Any,
                  now: float) -> BoolArray:
        """Spaces where the rule may not raise now: just cleared (``easing.rearm_s``), at its
        lowest level only, while the easing quantity is not moving against the easing."""
        blocked = np.zeros(self.n, dtype=bool)
        easing = rt.rule.easing
        if easing is None or easing.rearm_s <= 0:
            return blocked
        rearm = candidates & (rt.rearm_until > now) & (level_idx <= rt.rule.lowest_level)
        for i in np.flatnonzero(rearm):
            slope = self._slope(rt, int(i))
            rise = (None if slope is None
                    else (slope if easing.falling else -slope) * TREND_WINDOW_S)
            worsening = rise is not None and rise > max(easing.rearm_rise, 0.0) \
                and rise > 0
            blocked[i] = not worsening
        return blocked

    def sample_trends(self, now: float) -> None:
        """Sample the easing quantity of every live or re-arming advisory (at most once a
        minute) for its trend; call once per tick, after :meth:`begin`."""
        for rt in self.rules:
            easing = rt.rule.easing
            if easing is None:
                continue
            watched = set(rt.advisories)
            if rt.trends or watched:
                watched |= {int(i) for i in np.flatnonzero(rt.rearm_until > now)}
            for i in [i for i in rt.trends if i not in watched]:
                del rt.trends[i]
            for i in watched:
                if not self._ctx.has_numbers(i):
                    continue
                q = rt.trends.setdefault(i, deque())
                if q and now - q[-1][0] < TREND_EVERY_S:
                    continue
                v = self._value_at(rt, easing.quantity, i)
                if not math.isfinite(v):
                    continue
                q.append((now, v))
                while q and q[0][0] < now - TREND_WINDOW_S:
                    q.popleft()

    def _slope(self, rt: RuleRuntime, i: int) -> float | None:
        """The easing quantity's trend in space ``i`` (units per second; least squares over
        the last ``TREND_WINDOW_S``), or None with too short a record."""
        q = rt.trends.get(i)
        if not q or q[-1][0] - q[0][0] < TREND_MIN_SPAN_S:
            return None
        t = np.array([p[0] for p in q])
        v = np.array([p[1] for p in q])
        t = t - t.mean()
        return float((t * (v - v.mean())).sum() / (t * t).sum())

    def _clear_in_min(self, rt: RuleRuntime, i: int, now: float) -> float | None:
        """Minutes until space ``i``'s advisory clears at the present trend: to the easing
        quantity's ``clears_at``, then the off-delay (what is left of it once there);
        None when it is not moving that way or too far off."""
        easing = rt.rule.easing
        assert easing is not None
        off = rt.rule.config.off_delay_s
        if np.isfinite(rt.clear_since[i]):
            return max(0.0, off - (now - float(rt.clear_since[i]))) / 60
        v = self._value_at(rt, easing.quantity, i)
        target = self._value_at(rt, easing.clears_at, i)
        slope = self._slope(rt, i)
        if slope is None or not (math.isfinite(v) and math.isfinite(target)):
            return None
        gap = (v - target) if easing.falling else (target - v)
        rate = -slope if easing.falling else slope
        if gap <= 0 or rate <= 0:
            return None
        minutes = (gap / rate + off) / 60
        return minutes if minutes <= CLEAR_FORECAST_MAX_MIN else None

    def _mode(self, rt: RuleRuntime, i: int, adv: Advisory) -> str:
        """What the advisory says now: ``level`` (its level's texts) or ``easing`` (lowered
        and not escalated since, its level's condition no longer holding, or its raise
        condition false while it waits to clear), for rules with ``easing``."""
        if rt.rule.easing is None:
            return "level"
        level = int(rt.level[i])
        now_level = int(rt.now_level[i])
        if not rt.holds[i] or 0 <= now_level < level or adv.lowered:
            return "easing"
        return "level"

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
                mode = self._mode(rt, adv.space, adv)
                if self._ctx.has_numbers(adv.space) and (rt.holds[adv.space]
                                                         or mode != "level"):
                    shown = copy.copy(adv)
                    self._render(rt, shown, now, mode)
                out.append(self._published(shown, counter=adv))
                # stored with its sequence number: after a restart its records go on
                # from the last one published, never back
                out.append(self._persist(adv))
        return out

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
        record: dict[str, Any] = {"at": iso(now), "cleared_after": None,
                                  "cleared_after_min": None, "helped": None,
                                  "minutes_after_raised": round((now - adv.raised_at) / 60, 1),
                                  "effect": None, "_t": now}
        eff = rt.rule.config.effect
        if eff is not None and rt.rule.effect_quantity is not None:
            value = self._value_at(rt, rt.rule.effect_quantity, adv.space)
            predicted = (shown.benefit.get(eff.predicted, {}).get("value")
                         if eff.predicted else None)
            record["effect"] = {
                "quantity": eff.quantity, "value_then": num(value), "predicted": predicted,
                "predicted_change": (num(predicted - value) if predicted is not None
                                     and math.isfinite(value) else None),
                "realised_change": None, "checks": []}
        adv.acted_on = record
        adv.updated_at = now
        self._note(adv, now, "acted_on")

    def _follow_effect(self, rt: RuleRuntime, adv: Advisory, now: float,
                       effects: list[Effect]) -> None:
        """Record the target quantity at the rule's check times after the action; once the
        expected time has passed with the rule's condition still true, say so, once.

        Not while the condition is known to be false (between the raise and the clear
        thresholds, or during the off-delay): the action has at least brought it back
        there, and "no effect" would contradict the numbers; nor while it is unknown (a
        reading missing: the notice would have no numbers). Should it be true again with
        the equipment still as asked, the notice comes then."""
        rec = adv.acted_on
        assert rec is not None
        eff = rt.rule.config.effect
        t0 = float(rec.get("_t", adv.updated_at))
        wait_s = eff.wait_s if eff is not None else EFFECT_WAIT_S
        if eff is not None and rec.get("effect") is not None and rt.rule.effect_quantity:
            done = {c["after_min"] for c in rec["effect"]["checks"]}
            for after in eff.checks_s:
                if now - t0 >= after and after / 60 not in done:
                    v = self._value_at(rt, rt.rule.effect_quantity, adv.space)
                    rec["effect"]["checks"].append({"after_min": after / 60, "value": num(v)})
                    then = rec["effect"]["value_then"]
                    if then is not None and math.isfinite(v):
                        rec["effect"]["realised_change"] = num(v - then)
        i = adv.space
        if (not adv.effect_overdue and now - t0 >= wait_s and rt.acted_now[i]
                and rt.raise_true[i] and State(rt.state[i]) in (State.ACTIVE, State.ACKNOWLEDGED)):
            adv.effect_overdue = True
            rec["helped"] = False
            self._apply(rt, i, Trigger.EFFECT_OVERDUE, now, effects,
                        extra={"waited_min": round((now - t0) / 60)})

    def _value_at(self, rt: RuleRuntime, expr: Any, i: int) -> float:
        return number_at(expr, self._ctx.base, rt.params, i)

    def _values_now(self, rt: RuleRuntime, i: int) -> dict[str, Any]:
        """The values of the rule's numbers for space ``i`` in this evaluation (units as
        in the advisory's ``numbers``; None where not known)."""
        numbers, _, _ = values_at(rt.rule, self._ctx.base, rt.params, self._ctx.table, i,
                                  self.n)
        return {name: item["value"] for name, item in numbers.items()}

    # ------------------------------------------------------------------ transitions
    def _render(self, rt: RuleRuntime, adv: Advisory, now: float | None = None,
                mode: str = "level") -> None:
        """Render ``adv``'s texts with the numbers of this evaluation: its level's texts, or
        (``mode``) the rule's easing or cleared texts."""
        extra = dict(self._ctx.details(adv.space, rt.rule.template_names))
        texts = None
        easing = rt.rule.easing
        if easing is not None and mode == "easing":
            texts = (easing.title, easing.advice)
            if now is not None:
                clear_in = self._clear_in_min(rt, adv.space, now)
                if clear_in is not None:
                    extra["clear_in_min"] = clear_in
        elif easing is not None and mode == "cleared":
            texts = (easing.cleared_title, easing.cleared_advice)
        if adv.acted_on is not None and now is not None:
            t0 = float(adv.acted_on.get("_t", adv.updated_at))
            extra["acted_minutes_ago"] = max(0.0, (now - t0) / 60)
            effect = adv.acted_on.get("effect")
            if effect is not None and effect.get("predicted") is not None:
                extra["effect_predicted"] = effect["predicted"]
        level = int(rt.level[adv.space])
        key = (adv.effect_overdue, mode, self.texts.render_key(
            rt.rule, adv.space, self._ctx.base, rt.params, self._ctx.table, level, extra))
        adv.numbers_at = now if now is not None else adv.numbers_at
        if key == adv.rendered_from:
            return  # the same values as at the last rendering: the same texts
        self.texts.render(rt.rule, adv, self._ctx.base, rt.params, self._ctx.table, level,
                          extra, texts)
        if adv.effect_overdue and adv.no_effect_text:
            adv.advice = adv.no_effect_text
        adv.rendered_from = key

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
        self._note(adv, now, event)
        self._emit(rt, adv, event, now, effects)

    def _apply(self, rt: RuleRuntime, i: int, trigger: Trigger, now: float,
               effects: list[Effect], by: str | None = None,
               extra: dict[str, Any] | None = None) -> Advisory:
        """Run one table transition for an existing advisory (raises if illegal)."""
        adv = rt.advisories[i]
        new_state, event = transition(State(rt.state[i]), trigger)
        rt.state[i] = new_state
        adv.state = new_state
        adv.updated_at = now
        adv.priority = PRIORITIES[int(rt.level[i])]
        mode = self._mode(rt, i, adv)
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
            extra = {**(extra or {}), "values": self._values_now(rt, i)}
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
                t0 = float(rec.get("_t", now))
                rec["cleared_after"] = True
                rec["cleared_after_min"] = round((now - t0) / 60, 1)
                eff = rt.rule.config.effect
                wait_s = eff.wait_s if eff is not None else EFFECT_WAIT_S
                rec["helped"] = bool(now - t0 <= wait_s)
                if rec.get("effect") is not None and rt.rule.effect_quantity is not None \
                        and self._ctx.table is not None:
                    v = self._value_at(rt, rt.rule.effect_quantity, i)
                    then = rec["effect"]["value_then"]
                    if then is not None and math.isfinite(v):
                        rec["effect"]["realised_change"] = num(v - then)
            del rt.advisories[i]
            self.by_id.pop(adv.id, None)
            rt.clear_since[i] = np.nan
            rt.shelved_until[i] = np.nan
            rt.level[i] = rt.rule.base_priority
            if rt.rule.easing is not None and rt.rule.easing.rearm_s > 0:
                rt.rearm_until[i] = now + rt.rule.easing.rearm_s
        if event is not None:
            self._note(adv, now, event, by, extra)
            self._emit(rt, adv, event, now, effects)
        if new_state == State.IDLE:
            rt.event_count.pop(i, None)  # after its last event: the next advisory starts anew
        return adv

    @staticmethod
    def _note(adv: Advisory, now: float, event: str, by: str | None = None,
              extra: dict[str, Any] | None = None) -> None:
        entry: dict[str, Any] = {"at": iso(now), "event": event}
        if by:
            entry["by"] = by
        if extra:
            entry.update(extra)
        adv.history.append(entry)
        del adv.history[:-HISTORY_KEPT]

    def _timers(self, adv: Advisory) -> dict[str, Any]:
        """The lifecycle state a restart or another instance needs to continue ``adv``."""
        rt, i = self.by_id[adv.id]
        own = rt.advisories[i]  # ``adv`` may be a copy rendered for a refresh
        return {
            "state": int(rt.state[i]), "level": int(rt.level[i]),
            "last_notified": num(float(rt.last_notified[i])),
            "shelved_until": num(float(rt.shelved_until[i])),
            "raised_times": list(rt.raised_times.get(i, ())),
            "shelvings": rt.shelvings.get(i, []),
            "event_count": rt.event_count.get(i, 0),
            "lowered": own.lowered,
            # what its last event said (a refreshed message shows newer numbers)
            "said": {"title": own.title, "advice": own.advice, "rationale": own.rationale,
                     "numbers": own.numbers, "benefit": own.benefit,
                     "numbers_at": own.numbers_at},
        }

    def _persist(self, adv: Advisory) -> Effect:
        if adv.cleared_at is not None:
            return self.pub.advisory_persist(adv, {})
        return self.pub.advisory_persist(adv, self._timers(adv))

    def _published(self, adv: Advisory, counter: Advisory | None = None) -> Effect:
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
        record = self._published(adv)
        payload = self.pub.event_payload(adv, event, now)
        # the shard and its lease epoch make the id unique across holders: a new holder
        # continues the count under a new epoch, and an old one is fenced from its epoch
        shard, epoch = self.pub.fence(adv.space)
        payload["event_id"] = f"{self.config.site.id}.{shard}.{epoch}.{adv.id}.{n}"
        if event == "raised":
            self.raised_count[adv.audience] += 1
        elif event == "cleared":
            self.cleared_count[adv.audience] += 1
        effects.append(record)
        effects.append(self._persist(adv))
        effects.append(Persist("event", adv.id, payload))
        window = self._window(adv.audience, now)
        # the last place in the window is kept for the flood's summary, so that with it no
        # audience gets more than flood_limit notifications in any flood_window_s (urgent
        # ones always go out at once)
        if len(window) >= self.flood_limit - 1 and adv.priority != "urgent":
            self.suppressed[adv.audience].append(payload)
            return
        window.append(now)
        effects.append(self.pub.event_publish(adv, payload))

    def _window(self, audience: str, now: float) -> deque[float]:
        """The audience's notification times within the last ``flood_window_s``."""
        window = self.flood[audience]
        while window and window[0] < now - self.flood_window_s:
            window.popleft()
        return window

    def flush_summaries(self, now: float, effects: list[Effect]) -> None:
        """Notifications held back by the flood limit go out as one summary per audience
        and flood, updated (with what was held back since) at most every
        ``flood_summary_interval_s`` and only where the flood window has room for it; a
        flood ends when an interval has passed after its last update with nothing held."""
        for audience, held in self.suppressed.items():
            episode = self.episode[audience]
            if not held:
                if episode is not None and \
                        now - self.last_summary[audience] >= self.summary_interval_s:
                    self.episode[audience] = None  # the flood is over
                continue
            if now - self.last_summary[audience] < self.summary_interval_s:
                continue
            window = self._window(audience, now)
            if len(window) >= self.flood_limit:
                continue
            if episode is None:
                episode = {"id": f"{self.config.site.id}.flood.{audience}.{int(now)}",
                           "since": held[0]["at"], "update": 0, "held_total": 0}
                self.episode[audience] = episode
            episode["update"] += 1
            episode["held_total"] += len(held)
            self.last_summary[audience] = now
            window.append(now)
            items = [{"event": p["event"], "advisory_id": p["advisory"]["id"],
                      "space": p["advisory"]["space"]["id"], "rule": p["advisory"]["rule"],
                      "priority": p["advisory"]["priority"], "title": p["advisory"]["title"],
                      "at": p["at"]} for p in held]
            every = self.summary_interval_s / 60
            payload = {"schema": EVENT_SCHEMA, "event": "summary", "at": iso(now),
                       "audience": audience, "count": len(items), "items": items,
                       "flood": {"episode": episode["id"], "since": episode["since"],
                                 "update": episode["update"],
                                 "held_total": episode["held_total"],
                                 "next_update_after": iso(now + self.summary_interval_s)},
                       "note": f"a flood of notifications to {audience} (more than "
                               f"{self.flood_limit - 1} in {self.flood_window_s / 60:g} "
                               f"minutes): {len(items)} held back since the last update, "
                               f"{episode['held_total']} since {episode['since']}; this "
                               f"summary is update {episode['update']} of one per flood, "
                               f"updated at most every {every:g} minutes while it lasts; "
                               "urgent notifications always go out at once"}
            self.suppressed[audience] = []
            payload["event_id"] = f"{self.config.site.id}.summary.{audience}.{now:.3f}"
            effects.extend(self.pub.site_event(audience, payload,
                                               f"summary.{audience}.{int(now)}"))

    # ------------------------------------------------------------------ restore
    def restore(self, records: list[dict[str, Any]],
                malformed: list[str] | None = None) -> list[str]:
        """Bring back live advisories stored before a restart, without raising them again.

        Returns a note for each record that could not be restored (its space or rule is
        no longer configured, or its record is malformed). Conditions are re-evaluated from
        fresh readings; until then an advisory stays as it was (unknown never clears).
        ``malformed``, when given, also receives ``"<space>/<rule>: <what is wrong>"`` for
        each malformed record (the service refuses to start on a damaged store).
        """
        notes: list[str] = []
        rules = {rt.rule.key: rt for rt in self.rules}
        for rec in records:
            rt = rules.get(rec.get("rule", ""))
            i = self.model.space_index.get(rec.get("space", ""))
            if rt is None or i is None:
                notes.append(f"advisory {rec.get('space')}/{rec.get('rule')} not restored: "
                             "its space or rule is no longer configured")
                continue
            try:
                p = rec["payload"]
                adv = Advisory(
                    id=str(p["id"]), space=i, rule=rt.rule.key, audience=p["audience"],
                    priority=p["priority"], state=State(rec["state"]),
                    raised_at=float(rec["raised_at"]), updated_at=float(rec["updated_at"]),
                    title=p["title"], advice=p["advice"], rationale=p["rationale"],
                    numbers=p["numbers"], benefit=p["benefit"], cautions=p["cautions"],
                    acknowledged=p["acknowledged"], shelved=p["shelved"],
                    acted_on=(dict(p["acted_on"]) if p["acted_on"] is not None else None),
                    chattering=p["chattering"],
                    history=list(p["history"]))
                seq = p.get("seq", 0)
                if isinstance(seq, bool) or not isinstance(seq, int) or seq < 0:
                    raise TypeError("seq must be a whole number, 0 or more")
                adv.seq = seq
                level = int(rec["level"])
                ln = rec.get("last_notified")
                last_notified = float(ln) if ln is not None else adv.raised_at
                su = rec.get("shelved_until")
                shelved_until = float(su) if su is not None else np.nan
                raised_times = deque(float(t) for t in rec.get("raised_times", []))
                if adv.acted_on is not None:
                    adv.acted_on["_t"] = _epoch(adv.acted_on["at"])
                    adv.effect_overdue = adv.acted_on.get("helped") is False
                shelvings = [list(map(float, sh)) for sh in rec.get("shelvings", [])]
                event_count = int(rec.get("event_count", len(adv.history)))
                shown_at = p.get("numbers_at")
                adv.numbers_at = _epoch(shown_at) if shown_at is not None else None
                said = rec.get("said")
                if said is not None:
                    texts = [said["title"], said["advice"], said["rationale"]]
                    if not all(isinstance(t, str) for t in texts):
                        raise TypeError("said: title, advice and rationale must be text")
                    numbers, benefit = said.get("numbers", adv.numbers), \
                        said.get("benefit", adv.benefit)
                    if not (isinstance(numbers, dict) and isinstance(benefit, dict)):
                        raise TypeError("said: numbers and benefit must be objects")
                    adv.title, adv.advice, adv.rationale = texts
                    adv.numbers, adv.benefit = numbers, benefit
                    said_at = said.get("numbers_at")
                    adv.numbers_at = None if said_at is None else float(said_at)
            except (KeyError, TypeError, ValueError, AttributeError, OverflowError) as exc:
                # a record from another instance (through the broker) or a damaged row:
                # nothing of it is taken, and nothing half-restored is left behind
                notes.append(f"advisory {rec.get('space')}/{rec.get('rule')} not restored: "
                             f"its record is malformed ({type(exc).__name__}: {exc})")
                if malformed is not None:
                    malformed.append(f"{rec.get('space')}/{rec.get('rule')}: "
                                     f"{type(exc).__name__}: {exc}")
                continue
            rt.state[i] = adv.state
            rt.level[i] = level
            rt.last_notified[i] = last_notified
            rt.shelved_until[i] = shelved_until
            rt.raised_times[i] = raised_times
            rt.shelvings[i] = shelvings
            rt.event_count[i] = event_count
            adv.lowered = rec.get("lowered") is True
            rt.advisories[i] = adv
            self.by_id[adv.id] = (rt, i)
        return notes

    # ------------------------------------------------------------------ commands
    def command(self, verb: str, body: bytes, now: float, audience: str | None = None,
                identity: str | None = None) -> tuple[dict[str, Any], list[Effect]]:
        """Acknowledge, shelve or unshelve an advisory. Returns the reply and the effects;
        on any error nothing changes and the reply says why.

        ``audience``: the audience the command was sent to (its topic); it must be the
        advisory's, so a broker ACL per audience decides who may act. ``identity``: who
        sent it as the broker or a trusted gateway vouches (recorded beside ``by``)."""
        request_id = None
        try:
            try:
                data = json.loads(body.decode("utf-8"))
            except (UnicodeDecodeError, ValueError, RecursionError):
                raise CommandError("the body is not a JSON object") from None
            if not isinstance(data, dict):
                raise CommandError("the body is not a JSON object")
            request_id = data.get("request_id")
            effects = self._command(verb, data, now, audience, identity)
            reply = {"schema": REPLY_SCHEMA, "ok": True, "verb": verb,
                     "advisory_id": data.get("advisory_id"), "request_id": request_id,
                     "at": iso(now)}
            return reply, effects
        except (CommandError, IllegalTransition) as exc:
            return ({"schema": REPLY_SCHEMA, "ok": False, "verb": verb, "error": str(exc),
                     "request_id": request_id, "at": iso(now)}, [])

    def _command(self, verb: str, data: dict[str, Any], now: float, audience: str | None,
                 identity: str | None) -> list[Effect]:
        allowed = {"acknowledge": {"advisory_id", "by", "note", "request_id", "reply_to"},
                   "shelve": {"advisory_id", "by", "reason", "duration_s", "request_id",
                              "reply_to"},
                   "unshelve": {"advisory_id", "by", "note", "request_id", "reply_to"}}
        if verb not in allowed:
            raise CommandError(f"unknown command {verb!r} (acknowledge, shelve, unshelve)")
        extra = set(data) - allowed[verb]
        if extra:
            raise CommandError(f"unknown field(s) {', '.join(sorted(extra))}")
        adv_id = data.get("advisory_id")
        by = data.get("by")
        if not isinstance(adv_id, str) or adv_id not in self.by_id:
            raise CommandError(f"no live advisory {adv_id!r}")
        if not isinstance(by, str) or not by.strip() or len(by) > 100:
            raise CommandError("'by' must name who acted")
        rt, i = self.by_id[adv_id]
        adv = rt.advisories[i]
        if audience is not None and audience != adv.audience:
            raise CommandError(f"advisory {adv_id} is for {adv.audience}; send the command to "
                               f"{self.config.output.prefix}/commands/{adv.audience}/{verb}")
        who: dict[str, Any] = {"by": by}
        if identity:
            who["identity"] = identity
        effects: list[Effect] = []
        note = data.get("note")
        if note is not None and (not isinstance(note, str) or len(note) > 1000):
            raise CommandError("'note' must be text of at most 1000 characters")
        if verb == "acknowledge":
            transition(State(rt.state[i]), Trigger.ACKNOWLEDGE)  # raises before any change
            adv.acknowledged = {**who, "at": iso(now), "note": note}
            self._apply(rt, i, Trigger.ACKNOWLEDGE, now, effects, by=by,
                        extra=_extra(identity, note=note))
        elif verb == "shelve":
            dur = data.get("duration_s")
            reason = data.get("reason")
            if isinstance(dur, bool) or not isinstance(dur, int | float) or not dur > 0:
                raise CommandError("'duration_s' must be a positive number of seconds")
            limit = rt.rule.config.max_shelve_s
            if dur > limit:
                raise CommandError(f"rule {rt.rule.key} may be shelved for at most {limit:g} s")
            if not isinstance(reason, str) or not reason.strip():
                raise CommandError("'reason' must say why it is shelved")
            transition(State(rt.state[i]), Trigger.SHELVE)  # raises before any change
            spans = self._shelvings_today(rt, i, now)
            budget = min(rt.rule.config.max_shelved_per_day_s or limit, SHELVE_BUDGET_WINDOW_S)
            used = sum(max(0.0, min(end, now) - start) for start, end in spans)
            if spans and spans[-1][1] > now:
                used_current = now - spans[-1][0]
                spans = spans[:-1]  # a new shelving replaces the running one
            else:
                used_current = 0.0
            left = budget - used
            if float(dur) > left:
                raise CommandError(
                    f"rule {rt.rule.key} may be shelved for at most {budget:g} s in any 24 h "
                    f"per space; {max(left, 0.0):.0f} s are left (used {used:.0f} s, "
                    f"{used_current:.0f} s of them by the running shelving)")
            spans.append([now, now + float(dur)])
            rt.shelvings[i] = spans
            rt.shelved_until[i] = now + float(dur)
            adv.shelved = {**who, "at": iso(now), "reason": reason,
                           "until": iso(now + float(dur))}
            self._apply(rt, i, Trigger.SHELVE, now, effects, by=by,
                        extra={**(_extra(identity) or {}), "reason": reason,
                               "until": iso(now + float(dur))})
        else:
            self._apply(rt, i, Trigger.UNSHELVE, now, effects, by=by,
                        extra=_extra(identity, note=note))
        return effects

    @staticmethod
    def _shelvings_today(rt: RuleRuntime, i: int, now: float) -> list[list[float]]:
        """The shelvings of space ``i`` that overlap the last 24 hours (older ones go)."""
        spans = [s for s in rt.shelvings.get(i, []) if s[1] > now - SHELVE_BUDGET_WINDOW_S]
        for s in spans:
            s[0] = max(s[0], now - SHELVE_BUDGET_WINDOW_S)
        return spans

    # ------------------------------------------------------------------ digest
    def digest(self, now: float, since: float) -> list[Effect]:
        """One daily summary event per audience: what was raised and cleared since
        ``since``, and what is still live."""
        effects: list[Effect] = []
        for audience in self.flood:
            live = [a for a in self.live() if a.audience == audience]
            items = [{"event": "live", "advisory_id": a.id,
                      "space": self.model.space_ids[a.space], "rule": a.rule,
                      "priority": a.priority, "title": a.title, "at": iso(a.updated_at)}
                     for a in live]
            payload = {"schema": EVENT_SCHEMA, "event": "summary", "at": iso(now),
                       "audience": audience, "count": max(len(items), 1),
                       "items": items, "digest": {
                           "since": iso(since), "live": len(live),
                           "raised": self.raised_count[audience],
                           "cleared": self.cleared_count[audience]},
                       "note": "daily digest"}
            self.raised_count[audience] = 0
            self.cleared_count[audience] = 0
            payload["event_id"] = f"{self.config.site.id}.digest.{audience}.{now:.3f}"
            effects.extend(self.pub.site_event(audience, payload,
                                               f"digest.{audience}.{int(now)}"))
        return effects

    # ------------------------------------------------------------------ queries
    def live(self) -> list[Advisory]:
        """Every live advisory (active, acknowledged or shelved)."""
        return [a for rt in self.rules for a in rt.advisories.values()]



def _epoch(text: str) -> float:
    import datetime as dt

    return dt.datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp()


def _extra(identity: str | None, **fields: Any) -> dict[str, Any] | None:
    """History details: the given non-empty fields and the sender's vouched identity."""
    out = {k: v for k, v in fields.items() if v}
    if identity:
        out["identity"] = identity
    return out or None
