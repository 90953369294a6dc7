"""The engine: per-space state, indices, rules and the advisory lifecycle; returns effects.

Fed sensor messages (:meth:`Engine.message`), ticks (:meth:`Engine.tick`) and commands
(:meth:`Engine.command`), each with ``now`` in epoch seconds. It does no I/O and reads no
clock, so a whole day of a site replays in a test in about a second. One thread only.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from collections import ChainMap, deque
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Final

import numpy as np

from thermowarden.config import PRIORITIES, SiteConfig
from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.expressions import Expression, Truth
from thermowarden.core.indices import IndexTable, compute_indices
from thermowarden.core.lifecycle import IllegalTransition, State, Trigger, transition
from thermowarden.core.quantities import QUANTITIES
from thermowarden.effects import Effect, Persist, Publish
from thermowarden.ingest import IMPLAUSIBLE, Ingestor, Rejection
from thermowarden.rules import (
    HEAT_STRESS_CAUTIONS,
    CompiledPack,
    CompiledRule,
    missing_inputs,
    provided_inputs,
    rule_applies,
)
from thermowarden.site_model import SITE, SiteModel
from thermowarden.space_state import SiteState, Snapshot

ADVISORY_SCHEMA: Final = "thermowarden.advisory/1"
EVENT_SCHEMA: Final = "thermowarden.event/1"
CONDITIONS_SCHEMA: Final = "thermowarden.conditions/1"
REPLY_SCHEMA: Final = "thermowarden.reply/1"
UNKNOWN_LONG_S: Final = 1800.0
STUCK_AFTER_S: Final = 3 * 3600.0
SUMMARY_INTERVAL_S: Final = 60.0
CHATTER_WINDOW_S: Final = 3600.0
CHATTER_COUNT: Final = 3
CHATTER_HOLD_S: Final = 3600.0
HISTORY_KEPT: Final = 50
DEESCALATE_HOLD_S: Final = 300.0
SAMPLE_EVERY_S: Final = 300.0
"""Every 5 minutes the key indices of every space are stored for reports."""
PHS_EVERY_S: Final = 300.0
"""ISO 7933 PHS simulates a whole work period per space: it is refreshed every 5 minutes."""
ADVISORY_EXPIRY_S: Final = 900
ADVISORY_REFRESH_S: Final = 300.0
CONDITIONS_EXPIRY_S: Final = 600
CONDITIONS_MIN_S: Final = 15.0
"""Conditions of a space with new readings go out at most this often (else every minute)."""
TEMPERATURE_SPREADS: Final = ("air_temperature", "globe_temperature", "natural_wet_bulb",
                              "mean_radiant_temperature", "floor_temperature")
SITE_TOPIC_SPACE: Final = "_site"


def iso(t: float) -> str:
    """UTC ISO 8601 with seconds, for payloads."""
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
        "+00:00", "Z")


@dataclass
class Advisory:
    """One occurrence of an advisory for one space and rule."""

    id: str
    space: int
    rule: str
    audience: str
    priority: str
    state: State
    raised_at: float
    updated_at: float
    title: str = ""
    advice: str = ""
    rationale: str = ""
    numbers: dict[str, Any] = field(default_factory=dict)
    benefit: dict[str, Any] = field(default_factory=dict)
    cautions: list[str] = field(default_factory=list)
    cleared_at: float | None = None
    acknowledged: dict[str, Any] | None = None
    shelved: dict[str, Any] | None = None
    acted_on: dict[str, Any] | None = None
    chattering: bool = False
    history: list[dict[str, Any]] = field(default_factory=list)


class CommandError(ValueError):
    """A command that changes nothing; the message goes back in the reply."""


class RuleRuntime:
    """Arrays of one rule's lifecycle across all spaces."""

    def __init__(self, rule: CompiledRule, mask: BoolArray, params: dict[str, FloatArray]):
        n = mask.size
        self.rule = rule
        self.mask = mask
        self.params = params
        self.state = np.zeros(n, dtype=np.int8)
        self.level = np.full(n, rule.base_priority, dtype=np.int8)
        self.pending_since = np.full(n, np.nan)
        self.clear_since = np.full(n, np.nan)
        self.last_notified = np.full(n, np.nan)
        self.shelved_until = np.full(n, np.nan)
        self.unknown_since = np.full(n, np.nan)
        self.lower_since = np.full(n, np.nan)
        self.advisories: dict[int, Advisory] = {}
        self.raised_times: dict[int, deque[float]] = {}


class Engine:
    """Evaluates a site; see the module docstring."""

    def __init__(self, config: SiteConfig, model: SiteModel, packs: Mapping[str, CompiledPack],
                 *, conditions_every_s: float = 60.0, start: float | None = None,
                 sample_every_s: float = SAMPLE_EVERY_S) -> None:
        self.config = config
        self.model = model
        self.state = SiteState(model)
        self.ingest = Ingestor(model, self.state)
        self.prefix = config.output.prefix
        self.conditions_every_s = conditions_every_s
        self.flood_limit = config.evaluation.flood_limit
        self.flood_window_s = config.evaluation.flood_window_s
        self.start = start
        n = model.n_spaces
        self.n = n
        self.rules: list[RuleRuntime] = []
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
                self.rules.append(RuleRuntime(rule, enabled & applies, params))
        self.by_id: dict[str, tuple[RuleRuntime, int]] = {}
        self.last_conditions = np.full(n, -np.inf)
        self.touched = np.zeros(n, dtype=bool)
        self.last_refresh = -math.inf
        self.implausible: list[deque[float]] = [deque(maxlen=200) for _ in range(n)]
        self.last_change = np.full(0, np.nan)
        self._point_cache: tuple[int, Any, Any] = (-1, None, None)
        self._indices_cache: tuple[IndexTable | None, list[Any]] = (None, [])
        self.last_seen_value = np.full(0, np.nan)
        self.flood: dict[str, deque[float]] = {a: deque() for a in ("facilities", "safety",
                                                                     "integrator")}
        self.suppressed: dict[str, list[dict[str, Any]]] = {a: [] for a in self.flood}
        self.last_summary: dict[str, float] = dict.fromkeys(self.flood, -math.inf)
        self.raised_count: dict[str, int] = dict.fromkeys(self.flood, 0)
        self.cleared_count: dict[str, int] = dict.fromkeys(self.flood, 0)
        self.last_table: IndexTable | None = None
        self.last_phs = -math.inf
        self.sample_every_s = sample_every_s
        self.last_sample = -math.inf
        self.phs_columns: IndexTable = {}
        self.last_snapshot: Snapshot | None = None
        self.ticks = 0
        self.rejections_since_tick: list[Rejection] = []

    # ------------------------------------------------------------------ input
    def message(self, topic: str, payload: bytes, now: float) -> list[Rejection]:
        """A sensor message received at ``now``; returns its rejections (already counted)."""
        before = self.ingest.accepted
        rejections = self.ingest.ingest(topic, payload, now)
        if self.ingest.accepted != before:
            for pid in self.ingest.last_points:
                space = self.model.points[pid].space
                if space != SITE:
                    self.touched[space] = True
        for r in rejections:
            if r.reason == IMPLAUSIBLE:
                found = self.model.point_by_key.get(r.point)
                if found is not None and self.model.points[found].space != SITE:
                    self.implausible[self.model.points[found].space].append(now)
        return rejections

    # ------------------------------------------------------------------ health
    def _health(self, snap: Snapshot, now: float) -> dict[str, FloatArray]:
        n = self.n
        st = self.state
        npts = st.n_points
        if self.last_change.size < npts:
            grow = npts - self.last_change.size
            self.last_change = np.concatenate([self.last_change, np.full(grow, np.nan)])
            self.last_seen_value = np.concatenate([self.last_seen_value, np.full(grow, np.nan)])
        values = st.last_value[:npts]
        changed = values != self.last_seen_value
        seen = np.isfinite(st.last_time[:npts])
        self.last_change = np.where(changed & seen, now, self.last_change)
        self.last_seen_value = values.copy()
        if self._point_cache[0] != npts:
            self._point_cache = (npts, np.array([p.space for p in self.model.points],
                                                dtype=np.int64),
                                 np.array([p.quantity in ("shading_position", "fan_state",
                                                          "occupancy")
                                           for p in self.model.points], dtype=bool))
        _, spaces, state_q = self._point_cache
        indoor_pts = spaces >= 0
        start = self.start if self.start is not None else now
        grace = (now - start) > st.ingest_cfg.stale_after_intervals * st.interval[:npts]
        stale = ~snap.point_fresh & (seen | grace) & indoor_pts
        stuck = (snap.point_fresh & indoor_pts & ~state_q
                 & (now - self.last_change > STUCK_AFTER_S))
        sp = np.where(indoor_pts, spaces, 0)
        health = {
            "points_total": np.bincount(sp[indoor_pts], minlength=n).astype(np.float64),
            "stale_points": np.bincount(sp[stale], minlength=n).astype(np.float64),
            "stuck_points": np.bincount(sp[stuck], minlength=n).astype(np.float64),
            "implausible_recent": np.array([sum(1 for t in d if t >= now - 3600.0)
                                            for d in self.implausible], dtype=np.float64),
        }
        spread = np.full(n, np.nan)
        for q, arr in snap.disagreement.items():
            if q in TEMPERATURE_SPREADS or q.startswith("plane_radiant"):
                spread = np.fmax(spread, arr)
        health["max_disagreement"] = spread
        unknown = np.zeros(n)
        for rt in self.rules:
            if rt.rule.pack == "sensor_health":
                continue
            unknown += (now - rt.unknown_since >= UNKNOWN_LONG_S)
        health["rules_unknown_long"] = unknown
        return health

    # ------------------------------------------------------------------ environment
    def _environment(self, snap: Snapshot, table: IndexTable, now: float) -> dict[str, Any]:
        s = snap.inputs
        env: dict[str, Any] = {name: col.values for name, col in table.items()}
        env.update({
            "air_temperature": s.air_temperature, "relative_humidity": table[
                "relative_humidity"].values, "globe_temperature": s.globe_temperature,
            "mean_radiant_temperature_measured": s.mean_radiant_temperature,
            "air_speed": s.air_speed, "turbulence_intensity": s.turbulence_intensity,
            "natural_wet_bulb": s.natural_wet_bulb,
            "psychrometric_wet_bulb": s.psychrometric_wet_bulb,
            "floor_temperature": s.floor_temperature,
            "surface_temperature": s.surface_temperature_min,
            "outdoor_air_temperature": np.full(self.n, snap.outdoor["outdoor_air_temperature"]),
            "solar_irradiance": np.full(self.n, snap.outdoor["solar_irradiance"]),
            "wind_speed": np.full(self.n, snap.outdoor["wind_speed"]),
            "met": s.met, "clo": s.clo, "target_pmv": s.target_pmv,
            "occupied": snap.occupied, "hot_work": s.hot_work, "indoor": s.indoor,
            "outdoor": ~s.indoor, "naturally_ventilated": s.naturally_ventilated,
            "acclimatised": s.acclimatised, "solar_load": s.solar_load,
        })
        from thermowarden.core.radiation import SIDES

        nan = np.full(self.n, np.nan)
        for side in SIDES:
            env[f"plane_radiant_temperature_{side}"] = s.plane_radiant.get(side, nan)
        env.update(snap.states)
        env.update(self._health(snap, now))
        env["_present"] = snap.present
        return env

    # ------------------------------------------------------------------ tick
    def tick(self, now: float) -> list[Effect]:
        """Evaluate every space at ``now`` and return what to publish and store."""
        if self.start is None:
            self.start = now
        effects: list[Effect] = []
        known_days = len(self.state.daily_means)
        snap = self.state.snapshot(now)
        if len(self.state.daily_means) != known_days and self.state.daily_means:
            effects.append(Persist("daily_means", "outdoor",
                                   {"newest_first": list(self.state.daily_means)}))
        phs_due = bool(snap.inputs.hot_work.any()) and now - self.last_phs >= PHS_EVERY_S
        table = compute_indices(snap.inputs, with_phs=phs_due)
        if phs_due:
            self.last_phs = now
            self.phs_columns = {k: v for k, v in table.items() if k.startswith("phs_")}
        else:
            table.update(self.phs_columns)
        self.state.record_wbgt(now, table["wbgt"].values)
        self.last_table = table
        self.last_snapshot = snap
        env = self._environment(snap, table, now)
        for rt in self.rules:
            self._evaluate_rule(rt, env, now, effects)
        self._flush_summaries(now, effects)
        self._conditions(snap, table, now, effects)
        if self.sample_every_s > 0 and now - self.last_sample >= self.sample_every_s:
            self.last_sample = now
            effects.append(Persist("sample", str(int(now)), self._sample(table, now)))
        if now - self.last_refresh >= ADVISORY_REFRESH_S:
            self.last_refresh = now
            for rt in self.rules:
                for adv in rt.advisories.values():
                    effects.append(self._advisory_publish(adv))
        self.ticks += 1
        return effects

    def _evaluate_rule(self, rt: RuleRuntime, base: dict[str, Any], now: float,
                       effects: list[Effect]) -> None:
        rule = rt.rule
        cfg = rule.config
        n = self.n
        env = ChainMap(rt.params, base)
        mask = rt.mask
        if not mask.any() and not rt.advisories:
            return
        level_idx = np.full(n, -1, dtype=np.int8)
        if rule.levels:
            value = np.zeros(n, dtype=bool)
            all_known = np.ones(n, dtype=bool)
            for prio, expr in rule.levels:
                t = expr.evaluate_truth(env, n)
                level_idx = np.where(t.true, np.int8(prio), level_idx)
                value |= t.true
                all_known &= t.known
            cond = Truth(value, value | all_known)
        else:
            assert rule.condition is not None
            cond = rule.condition.evaluate_truth(env, n)
            level_idx = np.where(cond.true, np.int8(rule.base_priority), level_idx)
        active_mask = mask.copy()
        if cfg.occupied_only:
            occupied = base["occupied"]
            cond = Truth(cond.value & occupied, cond.known | ~occupied)
        cond = Truth(cond.value & active_mask, cond.known | ~active_mask)
        clear = rule.clear.evaluate_truth(env, n) if rule.clear else Truth(~cond.value,
                                                                           cond.known)
        if cfg.occupied_only:
            clear = Truth(clear.value | ~base["occupied"], clear.known | ~base["occupied"])
        clear = Truth(clear.value | ~active_mask, clear.known | ~active_mask)
        hold = rule.hold_back.evaluate_truth(env, n).true if rule.hold_back else np.zeros(
            n, dtype=bool)
        # a rule "cannot be evaluated" when an input it needs is missing or stale (not when
        # an index is merely outside its method's range)
        lacking = np.zeros(n, dtype=bool)
        for name in rule.needs:
            present = base["_present"].get(name)
            if present is not None:
                lacking |= ~present
        rt.unknown_since = np.where(active_mask & lacking & ~cond.known,
                                    np.fmin(rt.unknown_since, now), np.nan)
        state = rt.state
        # idle -> pending
        start = (state == State.IDLE) & cond.true & ~hold
        rt.pending_since = np.where(start, now, rt.pending_since)
        state[start] = State.PENDING
        # pending -> idle (false, unknown, or held back)
        drop = (state == State.PENDING) & ~(cond.true & ~hold)
        state[drop] = State.IDLE
        rt.pending_since[drop] = np.nan
        # pending -> active
        due = (state == State.PENDING) & cond.true & (now - rt.pending_since >= cfg.on_delay_s)
        for i in np.flatnonzero(due):
            self._raise(rt, int(i), int(level_idx[i]), env, now, effects)
        live = state >= State.ACTIVE
        if not live.any():
            return
        rt.clear_since = np.where(live & clear.true, np.fmin(rt.clear_since, now), np.nan)
        # acted on
        if rule.acted_on is not None:
            acted = rule.acted_on.evaluate_truth(env, n).true & live
            for i in np.flatnonzero(acted):
                adv = rt.advisories[int(i)]
                if adv.acted_on is None:
                    adv.acted_on = {"at": iso(now), "cleared_after": None}
                    adv.updated_at = now
                    self._note(adv, now, "acted_on")
                    effects.append(self._advisory_publish(adv))
                    effects.append(self._advisory_persist(adv))
        # cleared
        off = np.full(n, cfg.off_delay_s)
        for i in np.flatnonzero(live):
            if rt.advisories[int(i)].chattering:
                off[i] = max(cfg.off_delay_s, CHATTER_HOLD_S)
        gone = live & clear.true & (now - rt.clear_since >= off)
        for i in np.flatnonzero(gone):
            self._apply(rt, int(i), Trigger.OFF_DELAY_ELAPSED, env, now, effects)
        live &= ~gone
        # shelving expiry
        expired = live & (state == State.SHELVED) & (now >= rt.shelved_until)
        for i in np.flatnonzero(expired):
            self._apply(rt, int(i), Trigger.SHELVE_EXPIRED, env, now, effects)
        # escalation within one advisory: up at once, down only after the lower level has
        # held for the rule's off-delay (at least 5 minutes), so noise near a band edge
        # does not make the priority chatter
        if rule.levels:
            up = live & (level_idx > rt.level)
            lower = live & (level_idx >= 0) & (level_idx < rt.level) & cond.known
            rt.lower_since = np.where(lower, np.fmin(rt.lower_since, now), np.nan)
            down = lower & (now - rt.lower_since >= max(cfg.off_delay_s, DEESCALATE_HOLD_S))
            for i in np.flatnonzero(up):
                rt.level[i] = level_idx[i]
                rt.lower_since[i] = np.nan
                self._apply(rt, int(i), Trigger.ESCALATE, env, now, effects)
            for i in np.flatnonzero(down):
                rt.level[i] = level_idx[i]
                rt.lower_since[i] = np.nan
                self._apply(rt, int(i), Trigger.DEESCALATE, env, now, effects)
        # re-notify
        if cfg.renotify_s:
            again = live & (state == State.ACTIVE) & (now - rt.last_notified >= cfg.renotify_s)
            for i in np.flatnonzero(again):
                self._apply(rt, int(i), Trigger.RENOTIFY_DUE, env, now, effects)

    # ------------------------------------------------------------------ advisories
    def _values_at(self, rt: RuleRuntime, env: Mapping[str, Any], i: int
                   ) -> tuple[dict[str, Any], dict[str, Any], dict[str, object]]:
        rule = rt.rule
        table = self.last_table
        numbers: dict[str, Any] = {}
        fields: dict[str, object] = {}
        for name in rule.template_names:
            arr = env.get(name)
            if isinstance(arr, np.ndarray) and arr.dtype != np.bool_ and arr.shape == (self.n,):
                fields[name] = float(arr[i])

        def at(expr: Expression) -> float:
            """One space's value of an expression (not the whole site's)."""
            one = {name: env[name][i:i + 1] for name in expr.names}
            return float(expr.evaluate_number(one, 1)[0])

        for name, th in rule.numbers:
            v = float(env[name][i]) if name in env else math.nan
            item: dict[str, Any] = {"value": _num(v)}
            if table is not None and name in table:
                col = table[name]
                item["unit"] = col.unit
                item["method"] = col.method
                if not math.isfinite(v):
                    item["reason"] = col.reason_at(i) or "input missing or stale"
            else:
                q = QUANTITIES.get(name)
                item["unit"] = q.unit if q else ""
                item["method"] = "measured" if q else "thermowarden"
                if not math.isfinite(v):
                    item["reason"] = "input missing or stale"
            if th is not None:
                item["threshold"] = _num(at(th))
            numbers[name] = item
        benefit: dict[str, Any] = {}
        for name, expr in rule.benefit:
            v = at(expr)
            benefit[name] = {"value": _num(v)}
            fields[name] = v
        space = self.model.space(i)
        fields["space_name"] = space.name or space.id
        fields["space_id"] = space.id
        fields["site_name"] = self.config.site.name or self.config.site.id
        return numbers, benefit, fields

    def _render(self, rt: RuleRuntime, adv: Advisory, env: Mapping[str, Any], i: int) -> None:
        numbers, benefit, fields = self._values_at(rt, env, i)
        adv.numbers = numbers
        adv.benefit = benefit
        adv.title = rt.rule.title.render(fields)
        adv.advice = " ".join(rt.rule.advice.render(fields).split())
        adv.rationale = " ".join(rt.rule.rationale.render(fields).split())

    def _raise(self, rt: RuleRuntime, i: int, level: int, env: Mapping[str, Any], now: float,
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
        self._render(rt, adv, env, i)
        rt.state[i] = new_state
        rt.pending_since[i] = np.nan
        rt.clear_since[i] = np.nan
        rt.last_notified[i] = now
        rt.advisories[i] = adv
        self.by_id[adv.id] = (rt, i)
        assert event is not None
        self._note(adv, now, event)
        self._emit(rt, adv, event, now, effects)

    def _apply(self, rt: RuleRuntime, i: int, trigger: Trigger, env: Mapping[str, Any] | None,
               now: float, effects: list[Effect], by: str | None = None,
               extra: dict[str, Any] | None = None) -> Advisory:
        """Run one table transition for an existing advisory (raises if illegal)."""
        adv = rt.advisories[i]
        new_state, event = transition(State(rt.state[i]), trigger)
        rt.state[i] = new_state
        adv.state = new_state
        adv.updated_at = now
        adv.priority = PRIORITIES[int(rt.level[i])]
        if trigger in (Trigger.ESCALATE, Trigger.DEESCALATE, Trigger.RENOTIFY_DUE) and \
                env is not None:
            self._render(rt, adv, env, i)
        if trigger == Trigger.ESCALATE and adv.shelved is not None:
            adv.shelved = None
        if trigger in (Trigger.UNSHELVE, Trigger.SHELVE_EXPIRED):
            adv.shelved = None
            rt.shelved_until[i] = np.nan
        if trigger == Trigger.ESCALATE:
            adv.acknowledged = None
        if event in ("raised", "escalated", "renotified", "unshelved"):
            rt.last_notified[i] = now
        if new_state == State.IDLE:
            adv.cleared_at = now
            if adv.acted_on is not None:
                adv.acted_on["cleared_after"] = True
            del rt.advisories[i]
            self.by_id.pop(adv.id, None)
            rt.clear_since[i] = np.nan
            rt.shelved_until[i] = np.nan
            rt.level[i] = rt.rule.base_priority
        if event is not None:
            self._note(adv, now, event, by, extra)
            self._emit(rt, adv, event, now, effects)
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

    def advisory_payload(self, adv: Advisory) -> dict[str, Any]:
        """The advisory as published (schema ``thermowarden.advisory/1``)."""
        space = self.model.space(adv.space)
        state = "cleared" if adv.cleared_at is not None else adv.state.name.lower()
        return {
            "schema": ADVISORY_SCHEMA,
            "id": adv.id,
            "site": self.config.site.id,
            "space": _space_ref(space),
            "rule": adv.rule,
            "audience": adv.audience,
            "priority": adv.priority,
            "state": state,
            "title": adv.title,
            "advice": adv.advice,
            "rationale": adv.rationale,
            "numbers": adv.numbers,
            "benefit": adv.benefit,
            "cautions": adv.cautions,
            "advisory_only": True,
            "raised_at": iso(adv.raised_at),
            "updated_at": iso(adv.updated_at),
            "cleared_at": iso(adv.cleared_at) if adv.cleared_at is not None else None,
            "acknowledged": adv.acknowledged,
            "shelved": adv.shelved,
            "acted_on": adv.acted_on,
            "chattering": adv.chattering,
            "history": adv.history,
        }

    def _advisory_topic(self, adv: Advisory) -> str:
        return f"{self.prefix}/spaces/{self.model.space_ids[adv.space]}/advisories/{adv.rule}"

    def _advisory_publish(self, adv: Advisory) -> Publish:
        if adv.cleared_at is not None:
            return Publish(self._advisory_topic(adv), None, retain=True, qos=1)
        return Publish(self._advisory_topic(adv), self.advisory_payload(adv), retain=True, qos=1,
                       expiry_s=ADVISORY_EXPIRY_S)

    def _advisory_persist(self, adv: Advisory) -> Persist:
        """The stored form: the payload plus the lifecycle timers a restart needs."""
        key = f"{self.model.space_ids[adv.space]}/{adv.rule}"
        if adv.cleared_at is not None:
            return Persist("advisory", key, None)
        rt, i = self.by_id[adv.id]
        return Persist("advisory", key, {
            "payload": self.advisory_payload(adv), "space": self.model.space_ids[i],
            "rule": adv.rule, "state": int(rt.state[i]), "level": int(rt.level[i]),
            "raised_at": adv.raised_at, "updated_at": adv.updated_at,
            "last_notified": _num(float(rt.last_notified[i])),
            "shelved_until": _num(float(rt.shelved_until[i])),
            "raised_times": list(rt.raised_times.get(i, ())),
        })

    def restore(self, records: list[dict[str, Any]]) -> list[str]:
        """Bring back live advisories stored before a restart, without raising them again.

        Returns a note for each record that could not be restored (its space or rule is
        no longer configured). Conditions are re-evaluated from fresh readings; until then
        an advisory stays as it was (unknown never clears).
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
            p = rec["payload"]
            adv = Advisory(
                id=p["id"], space=i, rule=rt.rule.key, audience=p["audience"],
                priority=p["priority"], state=State(rec["state"]), raised_at=rec["raised_at"],
                updated_at=rec["updated_at"], title=p["title"], advice=p["advice"],
                rationale=p["rationale"], numbers=p["numbers"], benefit=p["benefit"],
                cautions=p["cautions"], acknowledged=p["acknowledged"], shelved=p["shelved"],
                acted_on=p["acted_on"], chattering=p["chattering"], history=p["history"])
            rt.state[i] = adv.state
            rt.level[i] = rec["level"]
            ln = rec.get("last_notified")
            rt.last_notified[i] = ln if ln is not None else rec["raised_at"]
            su = rec.get("shelved_until")
            rt.shelved_until[i] = su if su is not None else np.nan
            rt.raised_times[i] = deque(rec.get("raised_times", []))
            rt.advisories[i] = adv
            self.by_id[adv.id] = (rt, i)
        return notes

    def _emit(self, rt: RuleRuntime, adv: Advisory, event: str, now: float,
              effects: list[Effect]) -> None:
        payload = {"schema": EVENT_SCHEMA, "event": event, "at": iso(now),
                   "advisory": self.advisory_payload(adv)}
        if event == "raised":
            self.raised_count[adv.audience] += 1
        elif event == "cleared":
            self.cleared_count[adv.audience] += 1
        effects.append(self._advisory_publish(adv))
        effects.append(self._advisory_persist(adv))
        effects.append(Persist("event", adv.id, payload))
        audience = adv.audience
        window = self.flood[audience]
        while window and window[0] < now - self.flood_window_s:
            window.popleft()
        if len(window) >= self.flood_limit and adv.priority != "urgent":
            self.suppressed[audience].append(payload)
            return
        window.append(now)
        space_id = self.model.space_ids[adv.space]
        effects.append(Publish(f"{self.prefix}/events/{audience}/{space_id}", payload, qos=1))

    def _flush_summaries(self, now: float, effects: list[Effect]) -> None:
        """Events held back by the flood limit go out as one summary per audience."""
        for audience, held in self.suppressed.items():
            if not held or now - self.last_summary[audience] < SUMMARY_INTERVAL_S:
                continue
            self.last_summary[audience] = now
            items = [{"event": p["event"], "advisory_id": p["advisory"]["id"],
                      "space": p["advisory"]["space"]["id"], "rule": p["advisory"]["rule"],
                      "priority": p["advisory"]["priority"], "title": p["advisory"]["title"],
                      "at": p["at"]} for p in held]
            payload = {"schema": EVENT_SCHEMA, "event": "summary", "at": iso(now),
                       "audience": audience, "count": len(items), "items": items,
                       "note": f"more than {self.flood_limit} notifications in "
                               f"{self.flood_window_s / 60:g} minutes to {audience}; "
                               "summarised in one message"}
            self.suppressed[audience] = []
            effects.append(Publish(f"{self.prefix}/events/{audience}/{SITE_TOPIC_SPACE}",
                                   payload, qos=1))
            effects.append(Persist("event", f"summary.{audience}.{int(now)}", payload))

    # ------------------------------------------------------------------ conditions
    def conditions_payload(self, i: int) -> dict[str, Any]:
        """The published conditions of space ``i`` (schema ``thermowarden.conditions/1``)."""
        assert self.last_table is not None and self.last_snapshot is not None
        snap = self.last_snapshot
        space = self.model.space(i)
        inputs: dict[str, Any] = {}
        for q, mask in snap.present.items():
            inputs[q] = {"fresh": bool(mask[i])}
        return {
            "schema": CONDITIONS_SCHEMA,
            "site": self.config.site.id,
            "space": _space_ref(space),
            "at": iso(snap.now),
            "occupied": bool(snap.occupied[i]),
            "states": {k: _num(float(v[i])) for k, v in snap.states.items()},
            "inputs": inputs,
            "indices": self._indices_at(i),
            "advisory_only": True,
        }

    def _indices_at(self, i: int) -> dict[str, dict[str, Any]]:
        """``IndexColumn.as_dict`` for every index of space ``i``, with the per-column work
        (rounding, list conversion) done once per evaluation rather than once per space."""
        table = self.last_table
        assert table is not None
        if self._indices_cache[0] is not table:
            prepared = []
            for name, col in table.items():
                digits = 5 if col.unit == "kg/kg" else 2
                values = np.round(np.where(col.present, col.values, 0.0), digits).tolist()
                prepared.append((name, col, values, col.codes.tolist()))
            self._indices_cache = (table, prepared)
        out: dict[str, dict[str, Any]] = {}
        for name, col, values, codes in self._indices_cache[1]:
            code = codes[i]
            if code:
                out[name] = {"value": None, "unit": col.unit, "method": col.method,
                             "reason": col.reasons[code]}
            else:
                v = values[i]
                out[name] = {"value": col.labels[int(v)] if col.labels is not None else v,
                             "unit": col.unit, "method": col.method}
        return out

    def _conditions(self, snap: Snapshot, table: IndexTable, now: float,
                    effects: list[Effect]) -> None:
        if self.conditions_every_s <= 0:
            return
        age = now - self.last_conditions
        due = np.flatnonzero((age >= self.conditions_every_s)
                             | (self.touched & (age >= CONDITIONS_MIN_S)))
        for i in due:
            self.last_conditions[i] = now
            self.touched[i] = False
            effects.append(Publish(f"{self.prefix}/spaces/{self.model.space_ids[i]}/conditions",
                                   self.conditions_payload(int(i)), retain=True, qos=0,
                                   expiry_s=CONDITIONS_EXPIRY_S))

    # ------------------------------------------------------------------ commands
    def command(self, verb: str, body: bytes, now: float) -> tuple[dict[str, Any], list[Effect]]:
        """Acknowledge, shelve or unshelve an advisory. Returns the reply and the effects;
        on any error nothing changes and the reply says why."""
        request_id = None
        try:
            try:
                data = json.loads(body.decode("utf-8"))
            except (UnicodeDecodeError, ValueError, RecursionError):
                raise CommandError("the body is not a JSON object") from None
            if not isinstance(data, dict):
                raise CommandError("the body is not a JSON object")
            request_id = data.get("request_id")
            effects = self._command(verb, data, now)
            reply = {"schema": REPLY_SCHEMA, "ok": True, "verb": verb,
                     "advisory_id": data.get("advisory_id"), "request_id": request_id,
                     "at": iso(now)}
            return reply, effects
        except (CommandError, IllegalTransition) as exc:
            return ({"schema": REPLY_SCHEMA, "ok": False, "verb": verb, "error": str(exc),
                     "request_id": request_id, "at": iso(now)}, [])

    def _command(self, verb: str, data: dict[str, Any], now: float) -> list[Effect]:
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
        effects: list[Effect] = []
        note = data.get("note")
        if note is not None and (not isinstance(note, str) or len(note) > 1000):
            raise CommandError("'note' must be text of at most 1000 characters")
        if verb == "acknowledge":
            transition(State(rt.state[i]), Trigger.ACKNOWLEDGE)  # raises before any change
            adv.acknowledged = {"by": by, "at": iso(now), "note": note}
            self._apply(rt, i, Trigger.ACKNOWLEDGE, None, now, effects, by=by,
                        extra={"note": note} if note else None)
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
            rt.shelved_until[i] = now + float(dur)
            adv.shelved = {"by": by, "at": iso(now), "reason": reason,
                           "until": iso(now + float(dur))}
            self._apply(rt, i, Trigger.SHELVE, None, now, effects, by=by,
                        extra={"reason": reason, "until": iso(now + float(dur))})
        else:
            self._apply(rt, i, Trigger.UNSHELVE, None, now, effects, by=by,
                        extra={"note": note} if note else None)
        return effects

    def _sample(self, table: IndexTable, now: float) -> dict[str, Any]:
        """The report sample: a few indices of every space, NaN as null."""

        def col(name: str) -> list[float | None]:
            c = table[name]
            return [None if not ok else round(float(v), 3)
                    for v, ok in zip(c.values, c.present, strict=True)]

        low = [float(self.config.parameters(s).get("comfort_low_c", 20.0))
               for s in self.config.spaces]
        high = [float(self.config.parameters(s).get("comfort_limit_c", 26.0))
                for s in self.config.spaces]
        return {"t": now, "spaces": list(self.model.space_ids),
                "operative": col("operative_temperature"), "pmv": col("pmv_iso"),
                "category_iso": col("comfort_category_iso"),
                "category_en": col("adaptive_en_category"),
                "en_lower": col("adaptive_en_II_lower"), "en_upper": col("adaptive_en_II_upper"),
                "band_lower": low, "band_upper": high,
                "wbgt": col("wbgt_effective"), "ref_unacclimatised":
                    col("wbgt_reference_unacclimatised"),
                "ref_acclimatised": col("wbgt_reference_acclimatised")}

    # ------------------------------------------------------------------ digest
    def digest(self, now: float, since: float) -> list[Effect]:
        """One daily summary event per audience: what was raised and cleared since
        ``since``, and what is still live."""
        effects: list[Effect] = []
        for audience in self.flood:
            live = [a for a in self.live_advisories() if a.audience == audience]
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
            effects.append(Publish(f"{self.prefix}/events/{audience}/{SITE_TOPIC_SPACE}",
                                   payload, qos=1))
            effects.append(Persist("event", f"digest.{audience}.{int(now)}", payload))
        return effects

    # ------------------------------------------------------------------ queries
    def live_advisories(self) -> list[Advisory]:
        return [a for rt in self.rules for a in rt.advisories.values()]

    def active_counts(self) -> dict[tuple[str, str], int]:
        """(rule, priority) -> live advisories, for metrics."""
        out: dict[tuple[str, str], int] = {}
        for adv in self.live_advisories():
            out[(adv.rule, adv.priority)] = out.get((adv.rule, adv.priority), 0) + 1
        return out


def _num(v: float) -> float | None:
    """A JSON number, or null for NaN/inf (NaN never leaves the process)."""
    return round(v, 3) if math.isfinite(v) else None


def _space_ref(space: Any) -> dict[str, Any]:
    ref: dict[str, Any] = {"id": space.id, "name": space.name or space.id, "kind": space.kind,
                           "hot_work": space.hot_work}
    if space.external is not None:
        ref["external"] = space.external.model_dump(exclude_none=True)
    return ref

