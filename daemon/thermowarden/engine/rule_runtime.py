"""One rule's lifecycle across the spaces, as arrays (:class:`RuleRuntime`): its state,
level and every timer (on-delay, off-delay, shelving, de-escalation and relapse holds,
reminders, the effect of advice acted on), and when the next of them falls due. The
transitions themselves are :mod:`thermowarden.engine.advisories`' (through the table of
:mod:`thermowarden.core.lifecycle`)."""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Mapping
from typing import Any, Final

import numpy as np

from thermowarden.config.rule_packs import PRIORITIES
from thermowarden.config.site import SiteConfig
from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.lifecycle import State
from thermowarden.engine.advisory import Advisory
from thermowarden.rules import (
    CompiledPack,
    CompiledRule,
    missing_inputs,
    provided_inputs,
    rule_applies,
)
from thermowarden.site_model import SiteModel

CHATTER_WINDOW_S: Final = 3600.0
CHATTER_COUNT: Final = 3
"""Raised this often within ``CHATTER_WINDOW_S``: the advisory is chattering."""
CHATTER_HOLD_S: Final = 3600.0
DEESCALATE_HOLD_S: Final = 300.0
"""A lower level must hold this long before an advisory is lowered to it (and, where the
level says ``leave_when``, the value must have passed that hysteresis)."""
RELAPSE_HOLD_S: Final = 1800.0
"""... and this long while the advisory relapses: it went back up within
``CHATTER_WINDOW_S`` of being lowered, so its numbers sit at a band edge (alarm-management
practice, ISA-18.2 / EEMUA 191: a level that comes and goes several times an hour is
chattering; the hold is common practice, no source)."""
ACKNOWLEDGED_URGENT_RENOTIFY_S: Final = 1800.0
"""An acknowledged urgent advisory is renotified (a reminder that the hazard persists, with
the numbers of now) at most this long after its last notification, or at its rule's
``renotify_s`` when shorter. Common practice, no source: heat-stress work/rest regimes are
reviewed within the hour, and an acknowledgement must not silence an urgent alert for the
rest of a shift."""
EFFECT_WAIT_S: Final = 1800.0
"""How long acted-on advice has to work when its rule names no ``effect``."""


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
        self.settled: dict[int, dict[str, Any]] = {}
        """Per space: the record of advice acted on that has nothing more to follow (said
        not to have helped, every check of its effect taken): see ``acted_on.follow``."""
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
        active, acknowledged = State.ACTIVE, State.ACKNOWLEDGED  # (each State.X is a call)
        live = self.state >= active
        followed = self._effect_due()
        times = [self.pending_since + cfg.on_delay_s, self.shelved_until, self.rearm_check]
        if live.any():
            times.append(np.where(live, self.clear_since, np.nan) + cfg.off_delay_s)
            times.append(self.lower_due())
            intervals = self.renotify_intervals()
            if intervals is not None:
                # (no reminder while the equipment is as the advice asks)
                times.append(np.where((self.state == active) & ~self.acted_now,
                                      self.last_notified, np.nan) + intervals[self.level])
            # an acknowledged urgent advisory is reminded of all the same (see step)
            urgent = PRIORITIES.index("urgent")
            times.append(np.where((self.state == acknowledged) & (self.level >= urgent),
                                  self.last_notified, np.nan) + self.urgent_remind_s())
        if self.leave_watch:
            return -math.inf
        due = np.fmin.reduce(times)
        first = float(np.nanmin(due)) if np.isfinite(due).any() else math.inf
        return min(first, followed)

    def _effect_due(self) -> float:
        """The earliest time a piece of advice acted on is due a check of its effect or
        the notice that it did not help (see :meth:`thermowarden.engine.acted_on.follow`); a second
        early, so that rounding never makes a step come too late (an early step with the
        same conditions changes nothing)."""
        eff = self.rule.config.effect
        wait_s = eff.wait_s if eff is not None else EFFECT_WAIT_S
        due = math.inf
        for adv in self.advisories.values():
            rec = adv.acted_on
            if rec is None or self.settled.get(adv.space) is rec:
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

    def shift(self, step_s: float) -> None:
        """Move this rule's timers by ``step_s`` seconds (a step of the wall clock; see
        :meth:`Advisories.shift_timers`)."""
        for a in (self.pending_since, self.clear_since, self.last_notified, self.shelved_until,
                  self.unknown_since, self.lower_since, self.lowered_at, self.relapse_until):
            a += step_s
        self.rearm_until += step_s
        for q in self.trends.values():
            for k, (t_s, v) in enumerate(q):
                q[k] = (t_s + step_s, v)
        for i, times in self.raised_times.items():
            self.raised_times[i] = deque((t + step_s for t in times), times.maxlen)
        for spans in self.shelvings.values():
            for span in spans:
                span[0] += step_s
                span[1] += step_s
        for adv in self.advisories.values():
            adv.raised_at += step_s  # minutes since raised, the chatter hold
            if adv.numbers_at is not None:
                adv.numbers_at += step_s
            if adv.acted_on is not None and "_t" in adv.acted_on:
                adv.acted_on["_t"] = float(adv.acted_on["_t"]) + step_s


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
