"""Evaluation: a snapshot of the site -> indices -> the environment rules see -> rule truths.

Indices are computed for all spaces in one vectorised call (ISO 7933 PHS, which simulates a
whole work period, only every ``PHS_EVERY_S``). Rule conditions are three-valued over the
spaces (true / false / unknown); unknown never raises and never clears.

A computation that raises for one space's inputs fails for that space alone: the spaces are
split until the failing ones are found, the others are computed as usual, and the failing
space's indices are absent with the reason ``COMPUTATION_FAILED``. Each failure is kept in
:attr:`Evaluation.failures` (space -> index group and error) for the health columns, the
integrator's advisory and the metrics.
"""

from __future__ import annotations

import dataclasses
from collections import ChainMap
from dataclasses import dataclass
from typing import Any, Final

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import BoolArray, FloatArray, IndexColumn
from thermowarden.core.expressions import Truth
from thermowarden.core.indices import IndexTable, SpaceInputs, compute_indices
from thermowarden.core.radiation import SIDES
from thermowarden.engine.health import PointHealth
from thermowarden.engine.state import SiteState, Snapshot
from thermowarden.rules import CompiledRule

PHS_EVERY_S: Final = 300.0
"""ISO 7933 PHS simulates a whole work period per space: it is refreshed every 5 minutes."""
COMPUTATION_FAILED: Final = "the computation failed for this space's inputs"
PHS_GROUP: Final = "phs"
ALL_GROUP: Final = "indices"


def take_inputs(s: SpaceInputs, idx: npt.NDArray[np.intp]) -> SpaceInputs:
    """The inputs of the spaces ``idx`` only."""
    changes: dict[str, Any] = {"n": int(idx.size)}
    for f in dataclasses.fields(s):
        v = getattr(s, f.name)
        if isinstance(v, np.ndarray):
            changes[f.name] = v[idx]
        elif isinstance(v, dict):
            changes[f.name] = {k: a[idx] for k, a in v.items()}
        elif isinstance(v, tuple) and len(v) == s.n:
            changes[f.name] = tuple(v[int(i)] for i in idx)
    return dataclasses.replace(s, **changes)


def merge_tables(n: int, parts: list[tuple[npt.NDArray[np.intp], IndexTable]]) -> IndexTable:
    """One table over ``n`` spaces from tables of subsets; columns missing for a space (its
    computation failed) are absent with :data:`COMPUTATION_FAILED`."""
    names: dict[str, IndexColumn] = {}
    for _, t in parts:
        for name, col in t.items():
            names.setdefault(name, col)
    out: IndexTable = {}
    for name, proto in names.items():
        reasons: list[str] = ["", COMPUTATION_FAILED]
        values = np.full(n, np.nan)
        codes = np.ones(n, dtype=proto.codes.dtype)
        for idx, t in parts:
            part = t.get(name)
            if part is None:
                continue
            remap = np.array([0] + [_reason_code(reasons, r) for r in part.reasons[1:]],
                             dtype=proto.codes.dtype)
            values[idx] = part.values
            codes[idx] = remap[part.codes]
        out[name] = IndexColumn(values, codes, tuple(reasons), proto.unit, proto.method,
                                proto.labels)
    return out


def _reason_code(reasons: list[str], reason: str) -> int:
    if reason not in reasons:
        reasons.append(reason)
    return reasons.index(reason)


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
        self.failures: dict[int, tuple[str, str]] = {}
        """Space -> (index group that failed, the error), at the last computation."""
        self.failure_count = 0
        """Failed computations (space and group) since start, for the metrics."""
        self._phs_failures: dict[int, tuple[str, str]] = {}

    def indices(self, snap: Snapshot, now: float) -> IndexTable:
        """Every index of every space at ``now``; PHS columns are carried between their
        five-minutely refreshes. Records the WBGT into the 60-minute windows."""
        phs_due = bool(snap.inputs.hot_work.any()) and now - self.last_phs >= PHS_EVERY_S
        table = self._isolated(snap.inputs, phs_due)
        if phs_due:
            self.last_phs = now
            self.phs_columns = {k: v for k, v in table.items() if k.startswith("phs_")}
        else:
            table.update(self.phs_columns)
        self.state.record_wbgt(now, table["wbgt"].values)
        return table

    def _isolated(self, inputs: SpaceInputs, with_phs: bool) -> IndexTable:
        """:func:`compute_indices` for every space; a space whose inputs make it raise is
        found by splitting, retried without PHS, and left without those indices."""
        failed: dict[int, tuple[str, str]] = {}
        known_bad = [i for i in self.failures if self.failures[i][0] == ALL_GROUP
                     or (with_phs and self.failures[i][0] == PHS_GROUP)]
        try:
            if not known_bad:
                table = compute_indices(inputs, with_phs=with_phs)
                self._note(failed, with_phs)
                return table
        except Exception:  # noqa: BLE001 - found and isolated below
            pass
        parts: list[tuple[npt.NDArray[np.intp], IndexTable]] = []
        bad = set(known_bad)
        good = np.array([i for i in range(self.n) if i not in bad], dtype=np.intp)
        self._split(inputs, good, with_phs, parts, failed)
        for i in sorted(bad):
            self._split(inputs, np.array([i], dtype=np.intp), with_phs, parts, failed)
        self._note(failed, with_phs)
        table = merge_tables(self.n, parts)
        phs_failed = [i for i, (group, _) in failed.items() if group == PHS_GROUP]
        if phs_failed:
            for name, col in table.items():
                if name.startswith("phs_"):
                    col.codes[phs_failed] = col.reasons.index(COMPUTATION_FAILED)
                    col.values[phs_failed] = np.nan
        return table

    def _split(self, inputs: SpaceInputs, idx: npt.NDArray[np.intp], with_phs: bool,
               parts: list[tuple[npt.NDArray[np.intp], IndexTable]],
               failed: dict[int, tuple[str, str]]) -> None:
        if idx.size == 0:
            return
        try:
            parts.append((idx, compute_indices(take_inputs(inputs, idx), with_phs=with_phs)))
            return
        except Exception as exc:  # noqa: BLE001 - isolated to the spaces that fail
            error = f"{type(exc).__name__}: {exc}"[:300]
        if idx.size > 1:
            half = idx.size // 2
            self._split(inputs, idx[:half], with_phs, parts, failed)
            self._split(inputs, idx[half:], with_phs, parts, failed)
            return
        i = int(idx[0])
        if with_phs:
            try:
                parts.append((idx, compute_indices(take_inputs(inputs, idx), with_phs=False)))
                failed[i] = (PHS_GROUP, error)
                return
            except Exception as exc:  # noqa: BLE001
                error = f"{type(exc).__name__}: {exc}"[:300]
        failed[i] = (ALL_GROUP, error)

    def _note(self, failed: dict[int, tuple[str, str]], with_phs: bool) -> None:
        """Keep the failures of this computation (PHS ones until PHS is computed again)."""
        if with_phs:
            self._phs_failures = {i: f for i, f in failed.items() if f[0] == PHS_GROUP}
        self.failure_count += len(failed)
        merged = dict(self._phs_failures)
        merged.update({i: f for i, f in failed.items() if f[0] == ALL_GROUP})
        self.failures = merged

    def failure_columns(self) -> dict[str, FloatArray]:
        """Per space: ``failed_phs`` 1 where ISO 7933 PHS failed, ``failed_indices`` 1
        where every index failed, at the last computation."""
        cols = {"failed_phs": np.zeros(self.n), "failed_indices": np.zeros(self.n)}
        for i, (group, _) in self.failures.items():
            cols["failed_phs" if group == PHS_GROUP else "failed_indices"][i] = 1.0
        return cols

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
        env.update(self.failure_columns())
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

