"""Evaluation: a snapshot of the site -> indices -> the environment rules see (the rules'
truths over it: :mod:`thermowarden.engine.rule_truths`).

Indices are computed for all spaces in one vectorised call (ISO 7933 PHS, which simulates a
whole work period, only every ``PHS_EVERY_S``, on its own: with the humidity and mean radiant
temperature it reads, not the other families again). Rule conditions are three-valued over the
spaces (true / false / unknown); unknown never raises and never clears.

A computation that raises for one space's inputs fails for that space alone: the spaces are
split until the failing ones are found, the others are computed as usual, and the failing
space's indices are absent with the reason ``COMPUTATION_FAILED``. Each failure is kept in
:attr:`Evaluation.failures` (space -> index group and error) for the health columns, the
integrator's advisory and the metrics.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from typing import Any, Final

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import BoolArray, FloatArray, IndexColumn
from thermowarden.core.indices import (
    IndexTable,
    SpaceInputs,
    compute_indices,
    compute_phs,
    relative_humidity_method,
    select,
    with_time_weighted_wbgt,
)
from thermowarden.core.radiation import SIDES
from thermowarden.engine.foresight import Foresight
from thermowarden.engine.health import PointHealth
from thermowarden.engine.index_rows import (
    COMPUTATION_FAILED,
    compute_distinct,
    compute_phs_distinct,
    concat_columns,
    input_matrix,
    merge_tables,
    rows_of,
    take_inputs,
    with_method,
)
from thermowarden.engine.state import SiteState, Snapshot

PHS_EVERY_S: Final = 300.0
"""ISO 7933 PHS simulates a whole work period per space: it is refreshed every 5 minutes."""
PHS_GROUP: Final = "phs"
_NOT_COMPUTED: Final = -1e300
"""Remembered input of a space whose indices were not computed (never a real input)."""
ALL_GROUP: Final = "indices"



def _without_phs(inputs: SpaceInputs) -> IndexTable:
    """Every index family but ISO 7933 PHS (refreshed on its own)."""
    return compute_indices(inputs, with_phs=False)

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
        self.failures: dict[int, tuple[str, str]] = {}
        """Space -> (index group that failed, the error), at the last computation."""
        self.failure_count = 0
        """Failed computations (space and group) since start, for the metrics."""
        self._phs_failures: dict[int, tuple[str, str]] = {}
        self._all_failures: dict[int, tuple[str, str]] = {}
        self.foresight: Foresight | None = None
        """Builds the ahead-of-time columns (engine/foresight.py); None: none."""
        self.owned: BoolArray | None = None
        """The spaces this instance evaluates (None: all). Indices of the others are not
        computed after the first evaluation (their rows keep the last values, unused)."""

    def _changed_only(self, s: SpaceInputs) -> IndexTable:
        """Indices of every row, computed only for the rows whose inputs differ from the
        same space's previous row (the previous evaluation's for the first tick)."""
        n = self.n
        rows = s.n
        k = rows // n
        m = input_matrix(s)
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
        if self.owned is not None and have_prev:
            # spaces of other instances: not computed; computed again when they come back
            # (their remembered inputs never equal real ones)
            same |= ~np.tile(self.owned, k)
            self._last_inputs = self._last_inputs.copy()
            self._last_inputs[~self.owned] = _NOT_COMPUTED
        if not same.any():
            todo = np.arange(rows)
            table = self._computed(s, todo)
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
                parts.append(self._computed(rows_of(s, todo), todo))
            pos = np.where(src >= 0, offset + np.searchsorted(todo, np.maximum(src, 0)),
                           np.tile(np.arange(n), k))
            if len(parts) == 1:
                table = select(parts[0], pos)
            else:
                table = {name: concat_columns([p[name] for p in parts]).take(pos)
                         for name in parts[-1]}
        self._last_table = select(table, np.arange(rows - n, rows))
        return table

    def _computed(self, s: SpaceInputs, rows: npt.NDArray[np.intp]) -> IndexTable:
        """Indices without PHS of the inputs ``s`` (rows ``rows`` of the batch, in order),
        isolated per row; records which spaces failed at their latest computed row."""
        n = self.n
        table, failed = self._isolated(s, rows % n)
        self.failure_count += len(failed)
        latest = np.full(n, -1)
        np.maximum.at(latest, rows % n, np.arange(rows.size))
        for i in np.flatnonzero(latest >= 0).tolist():
            f = failed.get(int(latest[i]))
            if f is None:
                self._all_failures.pop(i, None)
            else:
                self._all_failures[i] = f
        self._note()
        return table

    def _note(self) -> None:
        """The failures of the latest computation of each space (PHS ones until PHS is
        computed again)."""
        merged = dict(self._phs_failures)
        merged.update(self._all_failures)
        self.failures = merged

    def indices(self, snap: Snapshot) -> IndexTable:
        """Every index of every row (space x tick) of ``snap``. ISO 7933 PHS is refreshed
        every ``PHS_EVERY_S`` and carried between refreshes; the time-weighted WBGT of each
        tick comes from the spot WBGT recorded at the ticks before it (60-minute windows).
        A computation that raises for one space's inputs fails for that space alone."""
        s = snap.inputs
        n = self.n
        k = snap.k
        times = snap.times.tolist()
        table = self._changed_only(s)
        due: list[int] = []
        hot = s.hot_work[:n] if self.owned is None else s.hot_work[:n] & self.owned
        if bool(hot.any()):
            for j, t in enumerate(times):
                if t - self.last_phs >= PHS_EVERY_S:
                    due.append(j)
                    self.last_phs = t
        if due:
            rows = np.concatenate([np.arange(j * n, (j + 1) * n) for j in due])
            fresh, failed = self._phs_isolated(rows_of(s, rows), rows % n,
                                               self._every_failed(table)[rows])
            self.failure_count += len(failed)
            last = (len(due) - 1) * n
            self._phs_failures = {r - last: f for r, f in failed.items() if r >= last}
            self._note()
            refreshed = fresh
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
        ahead = self.foresight.begin(k, table, s) if self.foresight is not None else None
        for j, t in enumerate(times):
            twa[j * n:(j + 1) * n] = self.state.wbgt_time_weighted(t)
            if ahead is not None:
                ahead(j, t)
            self.state.record_wbgt(t, wbgt[j * n:(j + 1) * n])
        with_time_weighted_wbgt(table, twa, s.clothing_adjustment_k)
        if self.foresight is not None:
            table.update(self.foresight.wbgt_columns(s.hot_work))
            table.update(self.foresight.sun_columns(snap.times, snap.outdoor["solar_irradiance"]))
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

    def _phs_isolated(self, inputs: SpaceInputs, space: npt.NDArray[np.intp],
                      every_failed: BoolArray
                      ) -> tuple[IndexTable, dict[int, tuple[str, str]]]:
        """The ISO 7933 PHS columns alone (:func:`compute_phs`) of every row of ``inputs``
        (row r is of space ``space[r]``); the other families are not computed again. Rows
        whose other indices failed (``every_failed``) are left without PHS too, as a
        computation of every index would; a row whose inputs make PHS raise is found by
        splitting and left without PHS. Returns the columns and, per failed row, the group
        (PHS) and the error."""
        failed: dict[int, tuple[str, str]] = {}
        known_bad = [i for i, (group, _) in self.failures.items() if group == PHS_GROUP]
        bad_rows = np.isin(space, known_bad) & ~every_failed
        if not bad_rows.any() and not every_failed.any():
            try:
                return compute_phs_distinct(inputs), failed
            except Exception:  # noqa: BLE001 - found and isolated below
                pass
        parts: list[tuple[npt.NDArray[np.intp], IndexTable]] = []
        self._split(inputs, np.flatnonzero(~bad_rows & ~every_failed), parts, failed,
                    compute_phs, PHS_GROUP)
        for r in np.flatnonzero(bad_rows).tolist():
            self._split(inputs, np.array([r], dtype=np.intp), parts, failed, compute_phs,
                        PHS_GROUP)
        template = {name: col for name, col in (self._last_table or {}).items()
                    if name.startswith("phs_")}
        return merge_tables(inputs.n, parts, template), failed

    def _isolated(self, inputs: SpaceInputs, space: npt.NDArray[np.intp]
                  ) -> tuple[IndexTable, dict[int, tuple[str, str]]]:
        """:func:`compute_indices` without PHS for every row of ``inputs`` (row r is of
        space ``space[r]``); a row whose inputs make it raise is found by splitting and left
        without indices. Returns the table and, per failed row, the group and the error."""
        failed: dict[int, tuple[str, str]] = {}
        known_bad = [i for i, (group, _) in self.failures.items() if group == ALL_GROUP]
        bad_rows = np.isin(space, known_bad)
        if not bad_rows.any():
            try:
                return compute_distinct(inputs, False), failed
            except Exception:  # noqa: BLE001 - found and isolated below
                pass
        parts: list[tuple[npt.NDArray[np.intp], IndexTable]] = []
        self._split(inputs, np.flatnonzero(~bad_rows), parts, failed)
        for r in np.flatnonzero(bad_rows).tolist():
            self._split(inputs, np.array([r], dtype=np.intp), parts, failed)
        return merge_tables(inputs.n, parts, self._last_table), failed

    def _split(self, inputs: SpaceInputs, idx: npt.NDArray[np.intp],
               parts: list[tuple[npt.NDArray[np.intp], IndexTable]],
               failed: dict[int, tuple[str, str]],
               compute: Callable[[SpaceInputs], IndexTable] = _without_phs,
               group: str = ALL_GROUP) -> None:
        """``compute`` of the rows ``idx`` into ``parts``; where it raises, each half again,
        down to the single rows that fail (kept in ``failed`` with ``group`` and the error)."""
        if idx.size == 0:
            return
        try:
            parts.append((idx, compute(take_inputs(inputs, idx))))
            return
        except Exception as exc:  # noqa: BLE001 - isolated to the rows that fail
            error = f"{type(exc).__name__}: {exc}"[:300]
        if idx.size > 1:
            half = idx.size // 2
            self._split(inputs, idx[:half], parts, failed, compute, group)
            self._split(inputs, idx[half:], parts, failed, compute, group)
            return
        failed[int(idx[0])] = (group, error)

    @staticmethod
    def _every_failed(table: IndexTable) -> BoolArray:
        """Per row: every index failed (its computation raised for the row's inputs)."""
        col = table["relative_humidity"]
        if COMPUTATION_FAILED not in col.reasons:
            return np.zeros(col.codes.size, dtype=bool)
        result: BoolArray = col.codes == col.reasons.index(COMPUTATION_FAILED)
        return result

    @staticmethod
    def failure_columns(table: Mapping[str, IndexColumn]) -> dict[str, FloatArray]:
        """Per row: ``failed_phs`` 1 where ISO 7933 PHS failed, ``failed_indices`` 1 where
        every index failed (read from the reasons of the table's columns)."""
        def failed(col: IndexColumn) -> BoolArray:
            if COMPUTATION_FAILED not in col.reasons:
                return np.zeros(col.codes.size, dtype=bool)
            result: BoolArray = col.codes == col.reasons.index(COMPUTATION_FAILED)
            return result

        every = failed(table["relative_humidity"])
        phs = np.zeros(every.size, dtype=bool)
        for name in table:
            if name.startswith("phs_"):
                phs |= failed(table[name])
        return {"failed_phs": (phs & ~every).astype(np.float64),
                "failed_indices": every.astype(np.float64)}

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
        env.update(self.failure_columns(table))
        env["rules_unknown_long"] = np.full(n, np.nan)  # set once the other rules are known
        env["_present"] = snap.present
        env["_assumed"] = snap.assumed
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
