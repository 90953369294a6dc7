"""ASHRAE 55's cooling effect and the air speed needed for a target PMV, compiled per row.

The same steps as :func:`thermowarden.core.comfort.cooling_effect` and
:func:`~thermowarden.core.comfort.air_speed_for_pmv` described there (the same brackets,
grid, tolerances and Illinois regula falsi of :func:`thermowarden.core.solve.illinois`, per
row), run for each row in compiled code: each row iterates only as long as it needs, and no
step builds arrays of the rows still searching. A row's result depends on that row's
inputs alone, whether it is computed alone or among thousands, on one core or several.

Kept apart from :mod:`thermowarden.core.comfort` (as the SET kernels are, in
:mod:`thermowarden.core.set_kernels`): numba loads, or compiles once and caches, these
kernels the first time a process computes a cooling effect.

Models: the two-node SET model (Gagge; ASHRAE 55-2020 Appendix D) and Fanger's PMV
(ISO 7730:2005), both pythermalcomfort's own kernels (version pinned in pyproject.toml).
Units: °C, m/s, %RH, met, clo; cooling effect in K.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable
from typing import Any

import numpy as np
from numba import njit, prange

from thermowarden.core.ptc_models import model

_gagge = model("two_nodes_gagge", "_gagge_two_nodes_optimized")


def _python_function(ufunc: Any) -> Any:
    """The Python function behind a pythermalcomfort ``@vectorize`` kernel (deferred or
    built), to compile as a scalar function here."""
    deferred = getattr(ufunc, "_py_func", None)
    if deferred is not None:
        return deferred
    return ufunc._dispatcher.py_func


_pmv = njit(_python_function(model("_pmv_ppd_optimized")))

STILL_AIR = 0.1
"""m/s (as :data:`thermowarden.core.comfort.STILL_AIR`)."""
BODY_SURFACE_AREA_SET = 1.8258
"""m² (as :data:`thermowarden.core.set_kernels.BODY_SURFACE_AREA_SET`)."""
STANDARD_PRESSURE_PA = 101_325.0

_CE = 0  # residual kinds: SET after an equal drop x of air and radiant temperature
_PMV = 1  # the target PMV less Fanger's PMV at still air after a drop x
_SPEED = 2  # the target SET less SET at the speed exp(x)


@njit(cache=True)
def _set_ce(ta: float, tr: float, v: float, rh: float, met: float, clo: float
            ) -> float:  # pragma: no cover - numba
    """SET as ASHRAE 55's cooling effect computes it (``set_tmp(calculate_ce=True)``),
    NaN where an input is missing; as ``comfort.set_temperature(for_cooling_effect=True)``."""
    if not (math.isfinite(ta) and math.isfinite(tr) and math.isfinite(v)
            and math.isfinite(rh) and math.isfinite(met) and math.isfinite(clo)):
        return math.nan
    vp = rh * math.exp(18.6686 - 4030.183 / (ta + 235.0)) / 100.0
    return _gagge(ta, tr, v, met, clo, vp, 0.0, BODY_SURFACE_AREA_SET,  # type: ignore[no-any-return]
                  STANDARD_PRESSURE_PA, 1, True)[0]


@njit(cache=True)
def _pmv_still(ta: float, tr: float, rh: float, met: float, clo: float
               ) -> float:  # pragma: no cover - numba
    """Fanger's PMV at still air (as ``comfort.pmv_fanger``), NaN where an input is missing."""
    if not (math.isfinite(ta) and math.isfinite(tr) and math.isfinite(rh)
            and math.isfinite(met) and math.isfinite(clo)):
        return math.nan
    return _pmv(ta, tr, STILL_AIR, rh, met, clo, 0.0)  # type: ignore[no-any-return]


@njit(cache=True)
def _residual(kind: int, x: float, ta: float, tr: float, rh: float, met: float, clo: float,
              target: float) -> float:  # pragma: no cover - numba
    if kind == _CE:
        return _set_ce(ta - x, tr - x, STILL_AIR, rh, met, clo) - target
    if kind == _PMV:
        return target - _pmv_still(ta - x, tr - x, rh, met, clo)
    return target - _set_ce(ta, tr, math.exp(x), rh, met, clo)


@njit(cache=True)
def _illinois(kind: int, a: float, b: float, fa: float, fb: float, tolerance: float,
              residual_tolerance: float, ta: float, tr: float, rh: float, met: float,
              clo: float, target: float) -> float:  # pragma: no cover - numba
    """:func:`thermowarden.core.solve.illinois` for one row (40 iterations at most)."""
    if not (math.isfinite(fa) and math.isfinite(fb) and np.sign(fa) * np.sign(fb) <= 0):
        return math.nan
    if fa == 0:
        return a
    if fb == 0:
        return b
    side = 0
    for _ in range(40):
        c = (a * fb - b * fa) / (fb - fa)
        if not math.isfinite(c):
            c = 0.5 * (a + b)
        fc = _residual(kind, c, ta, tr, rh, met, clo, target)
        same_as_a = np.sign(fc) == np.sign(fa)
        if same_as_a:
            a, fa = c, fc
            kept = 1
        else:
            b, fb = c, fc
            kept = -1
        if side == kept:
            if same_as_a:
                fb *= 0.5
            else:
                fa *= 0.5
        side = kept
        if abs(b - a) < tolerance or abs(fc) <= residual_tolerance or not math.isfinite(fc):
            return c if math.isfinite(fc) else math.nan
    return 0.5 * (a + b)


@njit(cache=True)
def _cooling_effect_row(ta: float, tr: float, vr: float, rh: float, met: float, clo: float
                        ) -> float:  # pragma: no cover - numba
    target = _set_ce(ta, tr, vr, rh, met, clo)
    f_lo = _residual(_CE, 0.0, ta, tr, rh, met, clo, target)
    hi = math.nan if math.isnan(f_lo) else min(max(f_lo * 1.2 + 0.05, 0.05), 40.0)
    f_hi = _residual(_CE, hi, ta, tr, rh, met, clo, target)
    if f_hi > 0:
        hi = 40.0
        f_hi = _residual(_CE, hi, ta, tr, rh, met, clo, target)
    sol = _illinois(_CE, 0.0, hi, f_lo, f_hi, 0.005, 0.01, ta, tr, rh, met, clo, target)
    if math.isnan(sol):
        return 0.0 if math.isfinite(f_lo) else math.nan
    return max(sol, 0.0)


@njit(cache=True)
def _speed_row(ta: float, tr: float, rh: float, met: float, clo: float, target_pmv: float,
               grid: Any) -> float:  # pragma: no cover - numba
    r_lo = _residual(_PMV, 0.0, ta, tr, rh, met, clo, target_pmv)
    r_hi = _residual(_PMV, 15.0, ta, tr, rh, met, clo, target_pmv)
    ce_needed = _illinois(_PMV, 0.0, 15.0, r_lo, r_hi, 0.002, 0.001, ta, tr, rh, met, clo,
                          target_pmv)
    if not math.isfinite(ce_needed):
        return math.nan
    target_set = _set_ce(ta - ce_needed, tr - ce_needed, STILL_AIR, rh, met, clo)
    f_prev = _residual(_SPEED, grid[0], ta, tr, rh, met, clo, target_set)
    if f_prev >= 0:
        return STILL_AIR  # still air already suffices
    for j in range(1, grid.shape[0]):
        f_next = _residual(_SPEED, grid[j], ta, tr, rh, met, clo, target_set)
        if f_prev <= 0 and f_next >= 0:  # the first pair of grid speeds that brackets it
            log_v = _illinois(_SPEED, grid[j - 1], grid[j], f_prev, f_next, 0.005, 0.01,
                              ta, tr, rh, met, clo, target_set)
            return math.exp(log_v)
        f_prev = f_next
    return math.nan


@njit(cache=True)
def _cooling_effect_serial(ta: Any, tr: Any, vr: Any, rh: Any, met: Any, clo: Any,
                           out: Any) -> None:  # pragma: no cover - numba
    for i in range(ta.shape[0]):
        out[i] = _cooling_effect_row(ta[i], tr[i], vr[i], rh[i], met[i], clo[i])


@njit(cache=True, parallel=True)
def _cooling_effect_parallel(ta: Any, tr: Any, vr: Any, rh: Any, met: Any, clo: Any,
                             out: Any) -> None:  # pragma: no cover - numba
    for i in prange(ta.shape[0]):
        out[i] = _cooling_effect_row(ta[i], tr[i], vr[i], rh[i], met[i], clo[i])


@njit(cache=True)
def _speed_serial(ta: Any, tr: Any, rh: Any, met: Any, clo: Any, target: Any, grid: Any,
                  out: Any) -> None:  # pragma: no cover - numba
    for i in range(ta.shape[0]):
        out[i] = _speed_row(ta[i], tr[i], rh[i], met[i], clo[i], target[i], grid)


@njit(cache=True, parallel=True)
def _speed_parallel(ta: Any, tr: Any, rh: Any, met: Any, clo: Any, target: Any, grid: Any,
                    out: Any) -> None:  # pragma: no cover - numba
    for i in prange(ta.shape[0]):
        out[i] = _speed_row(ta[i], tr[i], rh[i], met[i], clo[i], target[i], grid)


def _f64(a: Any) -> Any:
    return np.ascontiguousarray(a, dtype=np.float64)


MEMO_SLOTS = 1 << 18
"""Results remembered per solver, at most: 28 bytes a slot, 7.3 MB per solver, 22 MB for
the three. On the bench's 72-hour replay (bench/replay_bench.py: 238,463 distinct rows for
the cooling effect, 163,374 for the air speed, 376,401 for SET) the rows solved again after
their slot was taken over fall from 84,000, 53,000 and 173,000 (131,072 slots, one place a
row) to 21,500, 8,500 and 66,500, about 5 % of the replay's CPU time."""

_MIX = (np.uint64(0xBF58476D1CE4E5B9), np.uint64(0x94D049BB133111EB))
_SEEDS = (np.uint64(0x9E3779B97F4A7C15), np.uint64(0xD1B54A32D192ED03))


def _mixed(z: Any) -> Any:
    """The splitmix64 finaliser (Steele, Lea and Flood 2014) of uint64 ``z``, per element."""
    z = (z ^ (z >> np.uint64(30))) * _MIX[0]
    z = (z ^ (z >> np.uint64(27))) * _MIX[1]
    return z ^ (z >> np.uint64(31))


def _row_hashes(m: Any) -> tuple[Any, Any]:
    """Two independent 64-bit hashes of the bits of each row of the float64 matrix ``m``."""
    bits = m.view(np.uint64)
    h1 = np.full(m.shape[0], _SEEDS[0])
    h2 = np.full(m.shape[0], _SEEDS[1])
    for j in range(bits.shape[1]):
        x = bits[:, j]
        h1 = _mixed(h1 ^ x)
        h2 = _mixed(h2 + _mixed(x ^ _SEEDS[1]))
    return h1, h2


class _Memo:
    """Results of a per-row solver by the bits of the row's inputs.

    A row's result depends on its inputs alone (the solvers are deterministic per row), so
    a remembered result is the one computing it again would give, bit for bit. Sensors
    report to a resolution (0.1 K, 1 %RH, 0.01 m/s) and people settings seldom change, so
    the same inputs recur: in the same space from one minute to the next, in other
    spaces, on other days. Thread-safe (a report thread may compute indices too).

    A fixed table of ``slots`` results (28 bytes each, whatever the number of inputs): a
    row is known by two independent 64-bit hashes of its inputs' bits, and may sit in one
    of two slots, the first chosen by the first hash, the second by the second (two-way,
    as a set-associative cache); a new result takes the one of its two slots used least
    recently (by the number of the call that last stored or found a result there). Two rows
    of different inputs are taken for each other only if both hashes agree (a chance of
    about 2**-128 per pair of rows), which no replay or service life comes near."""

    def __init__(self, slots: int = MEMO_SLOTS) -> None:
        assert slots & (slots - 1) == 0, "a power of two"
        self.mask = np.uint64(slots - 1)
        self.key1 = np.zeros(slots, dtype=np.uint64)
        self.key2 = np.zeros(slots, dtype=np.uint64)  # (0, 0): empty
        self.values = np.zeros(slots)
        self.used = np.zeros(slots, dtype=np.uint32)  # the call that last used the slot
        self.calls = 0
        self.lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def __len__(self) -> int:
        """Results held."""
        return int(np.count_nonzero((self.key1 != 0) | (self.key2 != 0)))

    @property
    def nbytes(self) -> int:
        return int(self.key1.nbytes + self.key2.nbytes + self.values.nbytes
                   + self.used.nbytes)

    def apply(self, columns: list[Any], solve: Callable[[list[Any]], Any]) -> Any:
        """``solve(columns)`` of every row, solving only the rows whose inputs it has not
        seen (once per distinct row)."""
        m = np.ascontiguousarray(np.column_stack([_f64(c) for c in columns]))
        h1, h2 = _row_hashes(m)
        first = (h1 & self.mask).astype(np.intp)
        second = (h2 & self.mask).astype(np.intp)
        with self.lock:
            self.calls += 1
            call = self.calls
            in_first = (self.key1[first] == h1) & (self.key2[first] == h2)
            in_second = ~in_first & (self.key1[second] == h1) & (self.key2[second] == h2)
            slot = np.where(in_second, second, first)
            known = in_first | in_second
            out = np.where(known, self.values[slot], math.nan)
            self.used[slot[known]] = call
        rows = np.flatnonzero(~known)
        if rows.size == 0:
            self.hits += int(known.size)
            return out
        # the first row of each distinct input among those not known
        pair = np.column_stack([h1[rows], h2[rows]])
        _, once, inverse = np.unique(pair, axis=0, return_index=True, return_inverse=True)
        todo = rows[once]
        solved = np.asarray(solve([np.asarray(c)[todo] for c in columns]), dtype=np.float64)
        out[rows] = solved[inverse.ravel()]
        self.hits += int(known.size - todo.size)
        self.misses += int(todo.size)
        with self.lock:
            a, b = first[todo], second[todo]
            at = np.where(self.used[b] < self.used[a], b, a)
            self.key1[at] = h1[todo]
            self.key2[at] = h2[todo]
            self.values[at] = solved
            self.used[at] = call
        return out


_CE_MEMO = _Memo()
SET_MEMO = _Memo()
"""SET of rows (core/comfort.set_temperature)."""
_SPEED_MEMO = _Memo()


def cooling_effect_rows(ta: Any, tr: Any, vr: Any, rh: Any, met: Any, clo: Any,
                        parallel: bool) -> Any:
    """Cooling effect (K) of each row (rows above still air); NaN where it cannot be
    solved. ``parallel``: over all cores (from the engine thread only)."""
    def solve(c: list[Any]) -> Any:
        out = np.empty(c[0].shape[0])
        kernel: Any = _cooling_effect_parallel if parallel else _cooling_effect_serial
        kernel(*(_f64(x) for x in c), out)
        return out

    return _CE_MEMO.apply([ta, tr, vr, rh, met, clo], solve)


def air_speed_rows(ta: Any, tr: Any, rh: Any, met: Any, clo: Any, target_pmv: Any,
                   log_grid: Any, parallel: bool) -> Any:
    """Relative air speed (m/s) bringing each row's ASHRAE 55 PMV to its target (rows
    warmer than it at still air); NaN where no grid speed suffices."""
    grid = _f64(log_grid)

    def solve(c: list[Any]) -> Any:
        out = np.empty(c[0].shape[0])
        kernel: Any = _speed_parallel if parallel else _speed_serial
        kernel(*(_f64(x) for x in c[:6]), grid, out)
        return out

    n = np.shape(ta)[0]
    grid_key = [np.full(n, grid[0]), np.full(n, grid[-1]), np.full(n, float(grid.size))]
    return _SPEED_MEMO.apply([ta, tr, rh, met, clo, target_pmv, *grid_key], solve)
