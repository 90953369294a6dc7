"""Index results for many spaces at once: a value array plus a reason wherever it is absent.

An :class:`IndexColumn` is what every index function in the core returns. Values are
float64 arrays of shape (N,); where an index does not apply to a space the value is NaN
inside the core and the reason code says why. NaN never leaves the core: callers use
:meth:`IndexColumn.value_at` / :meth:`IndexColumn.as_dict`, which turn it into ``None`` with
a reason.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]
CodeArray = npt.NDArray[np.int16]

NOT_COMPUTABLE = "the method gave no finite value for these inputs"


class Applicability:
    """Collects, per space, the first reason an index does not apply.

    Reasons are stored as small integer codes into a per-index table so that checking
    10,000 spaces costs a few vectorised comparisons, not 10,000 string operations.
    Code 0 means "applies".
    """

    def __init__(self, n: int) -> None:
        self._codes: CodeArray = np.zeros(n, dtype=np.int16)
        self._texts: list[str] = [""]

    def require(self, ok: BoolArray | np.bool_ | bool, reason: str) -> None:
        """Mark spaces where ``ok`` is false with ``reason`` unless they already have one."""
        bad = ~np.asarray(ok, dtype=bool)
        if not bad.any():
            return
        if reason in self._texts:
            code = self._texts.index(reason)
        else:
            self._texts.append(reason)
            code = len(self._texts) - 1
        mask = bad & (self._codes == 0)
        if mask.ndim == 0:
            if bool(mask):
                self._codes[:] = code
            return
        self._codes[mask] = code

    def require_present(self, names_values: Sequence[tuple[str, FloatArray]]) -> None:
        """Require every named input to be present (not NaN)."""
        for name, values in names_values:
            self.require(~np.isnan(values), f"input missing or stale: {name}")

    def require_from(self, other: Applicability) -> None:
        """Take over ``other``'s reason wherever this one has none yet."""
        for code in np.unique(other._codes[other._codes != 0]):
            self.require(other._codes != code, other._texts[int(code)])

    @property
    def ok(self) -> BoolArray:
        """True where the index applies so far."""
        result: BoolArray = self._codes == 0
        return result

    def column(self, values: FloatArray, unit: str, method: str,
               labels: tuple[str, ...] | None = None) -> IndexColumn:
        """Build the column: values kept where applicable and finite, else absent."""
        vals = np.asarray(values, dtype=np.float64)
        if vals.ndim == 0:
            vals = np.full(self._codes.shape, float(vals))
        codes = self._codes.copy()
        texts = list(self._texts)
        unexplained = (codes == 0) & ~np.isfinite(vals)
        if unexplained.any():
            texts.append(NOT_COMPUTABLE)
            codes[unexplained] = len(texts) - 1
        out = np.where(codes == 0, vals, np.nan)
        return IndexColumn(out, codes, tuple(texts), unit, method, labels)


@dataclass(frozen=True)
class IndexColumn:
    """One index for N spaces.

    Attributes:
        values: float64 (N,), NaN where absent.
        codes: int16 (N,), 0 where present, else an index into ``reasons``.
        reasons: reason texts; ``reasons[0]`` is the empty string.
        unit: unit of the values (for example ``"°C"``, ``"%"``, ``"1"``).
        method: the published method, for example ``"ISO 7730:2005"``.
        labels: for a category index, the label of each integer value (value 0 ->
            ``labels[0]``); ``None`` for a numeric index.
    """

    values: FloatArray
    codes: CodeArray
    reasons: tuple[str, ...]
    unit: str
    method: str
    labels: tuple[str, ...] | None = None

    def __len__(self) -> int:
        return int(self.values.shape[0])

    @property
    def present(self) -> BoolArray:
        """True where the index has a value."""
        result: BoolArray = self.codes == 0
        return result

    def value_at(self, i: int) -> float | None:
        """The value for space ``i`` or ``None`` when absent."""
        if self.codes[i] != 0:
            return None
        return float(self.values[i])

    def reason_at(self, i: int) -> str | None:
        """Why the index is absent for space ``i``; ``None`` when present."""
        code = int(self.codes[i])
        return None if code == 0 else self.reasons[code]

    def as_dict(self, i: int, digits: int | None = None) -> dict[str, object]:
        """JSON-ready description for space ``i``: value, unit, method and reason.

        Values are rounded to ``digits`` (default: 5 for a humidity ratio, else 2).
        """
        if digits is None:
            digits = 5 if self.unit == "kg/kg" else 2
        value = self.value_at(i)
        shown: object
        if value is None:
            shown = None
        elif self.labels is not None:
            shown = self.labels[int(value)]
        else:
            shown = round(value, digits)
        out: dict[str, object] = {
            "value": shown,
            "unit": self.unit,
            "method": self.method,
        }
        if value is None:
            out["reason"] = self.reason_at(i)
        return out

    def take(self, index: npt.NDArray[np.intp]) -> IndexColumn:
        """The same index for a subset of spaces."""
        return IndexColumn(self.values[index], self.codes[index], self.reasons, self.unit,
                           self.method, self.labels)


def absent(n: int, reason: str, unit: str, method: str) -> IndexColumn:
    """A column absent for every space with one reason."""
    app = Applicability(n)
    app.require(np.zeros(n, dtype=bool), reason)
    return app.column(np.full(n, np.nan), unit, method)
