"""Evaluation: a snapshot of the site -> indices -> the environment rules see -> rule truths.

Indices are computed for all spaces in one vectorised call (ISO 7933 PHS, which simulates a
whole work period, only every ``PHS_EVERY_S``). Rule conditions are three-valued over the
spaces (true / false / unknown); unknown never raises and never clears.
"""

from __future__ import annotations

from collections import ChainMap
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, fields
from typing import Any, Final

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import BoolArray, FloatArray, IndexColumn
from thermowarden.core.expressions import Truth
from thermowarden.core.indices import (
    IndexTable,
    SpaceInputs,
    compute_indices,
    relative_humidity_method,
    select,
    with_time_weighted_wbgt,
)
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

    def rows(self, rows: slice) -> RuleTruths:
        """The same truths for a slice of rows (one tick of a batch)."""
        return RuleTruths(Truth(self.raise_.value[rows], self.raise_.known[rows]),
                          Truth(self.clear.value[rows], self.clear.known[rows]),
                          self.hold[rows], self.level[rows], self.lacking[rows],
                          None if self.acted_on is None else self.acted_on[rows])



def rows_of(s: SpaceInputs, index: npt.NDArray[np.intp]) -> SpaceInputs:
    """The same inputs for a subset of rows."""
    given: dict[str, object] = {}
    for f in fields(s):
        v = getattr(s, f.name)
        if f.name == "n":
            continue
        if isinstance(v, np.ndarray):
            given[f.name] = v[index]
        elif isinstance(v, dict):
            given[f.name] = {k: a[index] for k, a in v.items()}
        elif isinstance(v, tuple):
            given[f.name] = tuple(v[int(i)] for i in index)
        else:
            given[f.name] = v
    return SpaceInputs.create(int(index.size), **given)


def with_method(col: IndexColumn, method: str) -> IndexColumn:
    return IndexColumn(col.values, col.codes, col.reasons, col.unit, method, col.labels)


def concat_columns(parts: list[IndexColumn]) -> IndexColumn:
    """One column from columns of the same index computed in separate calls (their reason
    tables differ: codes are mapped onto one table)."""
    reasons: list[str] = list(parts[0].reasons)
    codes = []
    for col in parts:
        for r in col.reasons:
            if r not in reasons:
                reasons.append(r)
        remap = np.array([reasons.index(r) for r in col.reasons], dtype=np.int16)
        codes.append(remap[col.codes])
    first = parts[0]
    return IndexColumn(np.concatenate([c.values for c in parts]), np.concatenate(codes),
                       tuple(reasons), first.unit, first.method, first.labels)


def _input_matrix(s: SpaceInputs) -> FloatArray:
    """Every per-row input that indices depend on (the time-weighted WBGT excepted: it is
    applied afterwards), one column each."""
    cols = [getattr(s, f.name) for f in fields(s)
            if f.name != "wbgt_time_weighted" and isinstance(getattr(s, f.name), np.ndarray)]
    cols += [s.plane_radiant[k] for k in sorted(s.plane_radiant)]
    return np.column_stack([c.astype(np.float64) for c in cols])


class Evaluation:
    """Computes indices and the rules' environment for one site, for one or many ticks."""

    def __init__(self, state: SiteState, health: PointHealth) -> None:
        self.state = state
        self.health = health
        self.n = state.model.n_spaces
        self.last_phs = -np.inf
        self.phs_columns: IndexTable = {}
        self._last_inputs: FloatArray | None = None
        self._last_table: IndexTable | None = None
        self.computed_rows = 0
        """Rows (space x tick) whose indices were computed (the others were unchanged)."""

    def _changed_only(self, s: SpaceInputs) -> IndexTable:
        """Indices of every row, computed only for the rows whose inputs differ from the
        same space's previous row (the previous evaluation's for the first tick)."""
        n = self.n
        rows = s.n
        k = rows // n
        m = _input_matrix(s)
        prev = self._last_inputs
        have_prev = (prev is not None and prev.shape[1] == m.shape[1]
                     and self._last_table is not None)
        before = np.concatenate([prev, m[:-n]]) if have_prev and prev is not None else None
        if before is None:
            same = np.zeros(rows, dtype=bool)
            if k > 1:
                a, b = m[n:], m[:-n]
                same[n:] = ((a == b) | (np.isnan(a) & np.isnan(b))).all(axis=1)
        else:
            same = ((m == before) | (np.isnan(m) & np.isnan(before))).all(axis=1)
        self._last_inputs = m[-n:]
        if not same.any():
            table = compute_indices(s, with_phs=False)
            self.computed_rows += rows
        else:
            grid = np.where(same, -1, np.arange(rows)).reshape(k, n)
            src = np.maximum.accumulate(grid, axis=0).ravel()  # -1: the previous evaluation
            todo = np.flatnonzero(~same)
            self.computed_rows += int(todo.size)
            parts: list[IndexTable] = []
            offset = 0
            if before is not None and self._last_table is not None and (src < 0).any():
                parts.append(self._last_table)
                offset = n
            if todo.size:
                parts.append(compute_indices(rows_of(s, todo), with_phs=False))
            pos = np.where(src >= 0, offset + np.searchsorted(todo, np.maximum(src, 0)),
                           np.tile(np.arange(n), k))
            if len(parts) == 1:
                table = select(parts[0], pos)
            else:
                table = {name: concat_columns([p[name] for p in parts]).take(pos)
                         for name in parts[-1]}
        self._last_table = select(table, np.arange(rows - n, rows))
        return table

    def indices(self, snap: Snapshot) -> IndexTable:
        """Every index of every row (space x tick) of ``snap``. ISO 7933 PHS is refreshed
        every ``PHS_EVERY_S`` and carried between refreshes; the time-weighted WBGT of each
        tick comes from the spot WBGT recorded at the ticks before it (60-minute windows)."""
        s = snap.inputs
        n = self.n
        k = snap.k
        times = snap.times.tolist()
        table = self._changed_only(s)
        due: list[int] = []
        if bool(s.hot_work[:n].any()):
            for j, t in enumerate(times):
                if t - self.last_phs >= PHS_EVERY_S:
                    due.append(j)
                    self.last_phs = t
        if due:
            rows = np.concatenate([np.arange(j * n, (j + 1) * n) for j in due])
            fresh = compute_indices(rows_of(s, rows), with_phs=True)
            refreshed = {name: col for name, col in fresh.items() if name.startswith("phs_")}
        else:
            refreshed = {}
        if refreshed or self.phs_columns:
            # row (tick j, space i) takes the latest refresh at or before tick j
            last_due = np.full(k, -1)
            for d, j in enumerate(due):
                last_due[j] = d
            last_due = np.maximum.accumulate(last_due)
            space = np.tile(np.arange(n), k)
            tick_due = np.repeat(last_due, n)
            pos = np.where(tick_due >= 0, n + tick_due * n + space, space)
            names = refreshed.keys() if refreshed else self.phs_columns.keys()
            for name in names:
                before = self.phs_columns.get(name, table[name].take(np.arange(n)))
                parts = [before] + ([refreshed[name]] if refreshed else [])
                table[name] = concat_columns(parts).take(pos)
            self.phs_columns = {name: table[name].take(np.arange((k - 1) * n, k * n))
                                for name in names}
        wbgt = table["wbgt"].values
        twa = np.empty(k * n)
        for j, t in enumerate(times):
            twa[j * n:(j + 1) * n] = self.state.wbgt_time_weighted(t)
            self.state.record_wbgt(t, wbgt[j * n:(j + 1) * n])
        with_time_weighted_wbgt(table, twa, s.clothing_adjustment_k)
        if k == 1:
            table["relative_humidity"] = with_method(table["relative_humidity"],
                                                     relative_humidity_method(
                                                         np.isfinite(s.relative_humidity)))
        return table

    @staticmethod
    def tick_rows(table: IndexTable, s: SpaceInputs, rows: slice) -> Mapping[str, IndexColumn]:
        """One tick's rows of a batch's table (sliced when read), described as that tick
        alone would be: the relative humidity's method names how that tick's spaces got it."""
        return TickRows(table, rows, relative_humidity_method(
            np.isfinite(s.relative_humidity[rows])))


    def environment(self, snap: Snapshot, table: IndexTable, start: float) -> dict[str, Any]:
        """Name -> array over spaces: every index, the measured inputs, states, occupancy,
        the space's kind and the point-health columns; ``_present`` maps each quantity to
        whether the space has a fresh reading of it."""
        s = snap.inputs
        n = s.n
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
            "outdoor_air_temperature": np.repeat(snap.outdoor["outdoor_air_temperature"], self.n),
            "solar_irradiance": np.repeat(snap.outdoor["solar_irradiance"], self.n),
            "wind_speed": np.repeat(snap.outdoor["wind_speed"], self.n),
            "met": s.met, "clo": s.clo, "target_pmv": s.target_pmv,
            "occupied": snap.occupied, "hot_work": s.hot_work, "indoor": s.indoor,
            "outdoor": ~s.indoor, "naturally_ventilated": s.naturally_ventilated,
            "acclimatised": s.acclimatised, "solar_load": s.solar_load,
        })
        nan = np.full(n, np.nan)
        for side in SIDES:
            env[f"plane_radiant_temperature_{side}"] = s.plane_radiant.get(side, nan)
        env.update(snap.states)
        env.update(self.health.columns(snap, start))
        env["rules_unknown_long"] = np.full(n, np.nan)  # set once the other rules are known
        env["_present"] = snap.present
        return env


class TickRows(Mapping[str, IndexColumn]):
    """See :meth:`Evaluation.tick_rows`."""

    def __init__(self, table: IndexTable, rows: slice, rh_method: str) -> None:
        self._table = table
        self._rows = rows
        self._rh_method = rh_method

    def __getitem__(self, name: str) -> IndexColumn:
        c = self._table[name]
        return IndexColumn(c.values[self._rows], c.codes[self._rows], c.reasons, c.unit,
                           self._rh_method if name == "relative_humidity" else c.method,
                           c.labels)

    def __iter__(self) -> Iterator[str]:
        return iter(self._table)

    def __len__(self) -> int:
        return len(self._table)


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

