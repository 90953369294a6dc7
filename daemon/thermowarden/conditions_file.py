"""The conditions of every space over time, written during a replay so that an integrator
can plot why a rule fired: the measured inputs and every index, one row per space and time.

CSV by default; Parquet when the file name ends in ``.parquet`` (needs ``pyarrow``, which
is not a dependency: install it to use this). Values are in the units of the published
conditions (°C, %, m/s, ...); an index that does not apply is empty (CSV) or null.
"""

from __future__ import annotations

import csv
import datetime as dt
import math
from typing import IO, Any, Final

import numpy as np

from thermowarden.core.radiation import SIDES
from thermowarden.engine import Engine

INPUTS: Final = ("air_temperature", "relative_humidity", "globe_temperature",
                 "mean_radiant_temperature", "air_speed", "turbulence_intensity",
                 "natural_wet_bulb", "psychrometric_wet_bulb", "floor_temperature",
                 "surface_temperature_min")
"""Measured inputs (as combined per space), written as ``input_<name>``."""


class ConditionsFileError(ValueError):
    """The conditions file cannot be written (for example Parquet without pyarrow)."""


class ConditionsWriter:
    """Collects rows from the engine after each batch of ticks; one row per space every
    ``every_s`` seconds of feed time."""

    def __init__(self, path: str, every_s: float = 60.0) -> None:
        self.path = path
        self.every_s = every_s
        self.parquet = path.endswith(".parquet")
        if self.parquet:
            try:
                import pyarrow  # noqa: F401
            except ImportError:
                raise ConditionsFileError(
                    f"{path}: writing Parquet needs pyarrow (pip install pyarrow); "
                    "or name the file .csv") from None
        self._columns: list[str] | None = None
        self._rows: list[list[Any]] = []
        self._fh: IO[str] | None = None
        self._csv: Any = None
        self._last = -math.inf
        self.rows_written = 0

    def __call__(self, engine: Engine, _result: object = None) -> None:
        if engine.last_batch is None:
            return
        snap, table = engine.last_batch
        n = engine.n
        s = snap.inputs
        names = list(table)
        if self._columns is None:
            self._columns = (["at", "space", "occupied"]
                             + [f"input_{q}" for q in INPUTS]
                             + [f"input_plane_radiant_temperature_{side}" for side in SIDES]
                             + [f"state_{q}" for q in snap.states] + names)
            if not self.parquet:
                self._fh = open(self.path, "w", newline="", encoding="utf-8")  # noqa: SIM115
                self._csv = csv.writer(self._fh)
                self._csv.writerow(self._columns)
        nan = np.full(s.n, np.nan)
        inputs = [getattr(s, q) for q in INPUTS] + [s.plane_radiant.get(side, nan)
                                                    for side in SIDES]
        states = list(snap.states.values())
        cols = [np.where(table[c].present, table[c].values, np.nan) for c in names]
        labels = [table[c].labels for c in names]
        for j, t in enumerate(snap.times.tolist()):
            if t - self._last < self.every_s:
                continue
            self._last = t
            at = dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace(
                "+00:00", "Z")
            for i in range(n):
                r = j * n + i
                row: list[Any] = [at, engine.model.space_ids[i], bool(snap.occupied[r])]
                row += [_value(a[r]) for a in inputs]
                row += [_value(a[r]) for a in states]
                for c, lab in zip(cols, labels, strict=True):
                    v = _value(c[r])
                    row.append(lab[int(v)] if lab is not None and v is not None else v)
                self._emit(row)

    def _emit(self, row: list[Any]) -> None:
        self.rows_written += 1
        if self.parquet:
            self._rows.append(row)
        else:
            self._csv.writerow(["" if v is None else v for v in row])

    def close(self) -> None:
        """Finish the file (Parquet is written here, in one piece)."""
        if self._fh is not None:
            self._fh.close()
            self._fh = None
        if self.parquet and self._columns is not None:
            import pyarrow as pa
            import pyarrow.parquet as pq

            data = {name: [r[k] for r in self._rows] for k, name in enumerate(self._columns)}
            pq.write_table(pa.table(data), self.path)


def _value(v: Any) -> float | None:
    x = float(v)
    return round(x, 4) if math.isfinite(x) else None
