"""Evaluation: a snapshot of the site -> indices -> the environment rules see -> rule truths.

Indices are computed for all spaces in one vectorised call (ISO 7933 PHS, which simulates a
whole work period, only every ``PHS_EVERY_S``). Rule conditions are three-valued over the
spaces (true / false / unknown); unknown never raises and never clears.
"""

from __future__ import annotations

from collections import ChainMap
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.expressions import Truth
from thermowarden.core.indices import IndexTable, compute_indices
from thermowarden.core.radiation import SIDES
from thermowarden.engine.health import PointHealth
from thermowarden.engine.state import SiteState, Snapshot
from thermowarden.rules import CompiledRule

PHS_EVERY_S: Final = 300.0
"""ISO 7933 PHS simulates a whole work period per space: it is refreshed every 5 minutes."""


@dataclass(frozen=True)
class RuleTruths:
    """One rule's conditions over all spaces at one evaluation."""

    raise_: Truth
    """The raise condition (false where the rule does not apply or the space is empty)."""
    clear: Truth
    hold: BoolArray
    """Hold-back condition true: do not start raising."""
    level: npt.NDArray[np.int8]
    """Priority index of the highest true level (or the rule's base priority), -1 if none."""
    lacking: BoolArray
    """An input the rule ``needs`` is missing or stale."""
    acted_on: BoolArray | None
    """The acted-on condition (equipment in the state the advice asks for)."""



class Evaluation:
    """Computes indices and the rules' environment for one site at each tick."""

    def __init__(self, state: SiteState, health: PointHealth) -> None:
        self.state = state
        self.health = health
        self.n = state.model.n_spaces
        self.last_phs = -np.inf
        self.phs_columns: IndexTable = {}

    def indices(self, snap: Snapshot, now: float) -> IndexTable:
        """Every index of every space at ``now``; PHS columns are carried between their
        five-minutely refreshes. Records the WBGT into the 60-minute windows."""
        phs_due = bool(snap.inputs.hot_work.any()) and now - self.last_phs >= PHS_EVERY_S
        table = compute_indices(snap.inputs, with_phs=phs_due)
        if phs_due:
            self.last_phs = now
            self.phs_columns = {k: v for k, v in table.items() if k.startswith("phs_")}
        else:
            table.update(self.phs_columns)
        self.state.record_wbgt(now, table["wbgt"].values)
        return table

    def environment(self, snap: Snapshot, table: IndexTable, now: float, start: float,
                    rules_unknown_long: FloatArray) -> dict[str, Any]:
        """Name -> array over spaces: every index, the measured inputs, states, occupancy,
        the space's kind and the point-health columns; ``_present`` maps each quantity to
        whether the space has a fresh reading of it."""
        s = snap.inputs
        n = self.n
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
            "outdoor_air_temperature": np.full(n, snap.outdoor["outdoor_air_temperature"]),
            "solar_irradiance": np.full(n, snap.outdoor["solar_irradiance"]),
            "wind_speed": np.full(n, snap.outdoor["wind_speed"]),
            "met": s.met, "clo": s.clo, "target_pmv": s.target_pmv,
            "occupied": snap.occupied, "hot_work": s.hot_work, "indoor": s.indoor,
            "outdoor": ~s.indoor, "naturally_ventilated": s.naturally_ventilated,
            "acclimatised": s.acclimatised, "solar_load": s.solar_load,
        })
        nan = np.full(n, np.nan)
        for side in SIDES:
            env[f"plane_radiant_temperature_{side}"] = s.plane_radiant.get(side, nan)
        env.update(snap.states)
        env.update(self.health.columns(snap, now, start))
        env["rules_unknown_long"] = rules_unknown_long
        env["_present"] = snap.present
        env["_assumed"] = snap.assumed
        return env


def rule_truths(rule: CompiledRule, params: dict[str, FloatArray], mask: BoolArray,
                base: dict[str, Any], n: int) -> RuleTruths:
    """Evaluate one rule's raise, clear, hold-back and acted-on conditions over ``n`` spaces.

    ``mask`` says where the rule applies (its pack is enabled and the space has its inputs);
    outside it the rule is false and clear. An ``occupied_only`` rule is false and clear in
    an unoccupied space. A levelled rule is true at its highest true level and known only
    when every level is known or one is true.
    """
    cfg = rule.config
    env = ChainMap(params, base)
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
    occupied = base["occupied"]
    if cfg.occupied_only:
        cond = Truth(cond.value & occupied, cond.known | ~occupied)
    cond = Truth(cond.value & mask, cond.known | ~mask)
    clear = rule.clear.evaluate_truth(env, n) if rule.clear else Truth(~cond.value, cond.known)
    if cfg.occupied_only:
        clear = Truth(clear.value | ~occupied, clear.known | ~occupied)
    clear = Truth(clear.value | ~mask, clear.known | ~mask)
    hold = (rule.hold_back.evaluate_truth(env, n).true if rule.hold_back
            else np.zeros(n, dtype=bool))
    # a rule "cannot be evaluated" when an input it needs is missing or stale (not when
    # an index is merely outside its method's range)
    lacking = np.zeros(n, dtype=bool)
    for name in rule.needs:
        present = base["_present"].get(name)
        if present is not None:
            lacking |= ~present
    acted = rule.acted_on.evaluate_truth(env, n).true if rule.acted_on is not None else None
    return RuleTruths(cond, clear, hold, level_idx, lacking, acted)

