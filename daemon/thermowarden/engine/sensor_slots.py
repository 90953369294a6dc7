"""Combining the sensors of a space: the points of one quantity (or one plane, or one
height) of each space are a slot; a slot's fresh readings give one value per space and time
(a weighted mean, ISO 7726's height weighting where the space asks for it, or an extreme)
and the spread between redundant sensors."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.site_model import HEIGHT_WEIGHTS, SITE, SiteModel

IntArray = npt.NDArray[np.int64]


@dataclass
class Slot:
    """The points that make one quantity of each space (``spaces[k]`` is the space of point
    ``pids[k]``, ``weights[k]`` its weight when they are combined)."""

    pids: IntArray
    spaces: IntArray
    weights: FloatArray
    flux: BoolArray | None = None
    """For plane slots: which points measure radiant flux (converted to a temperature)."""
    one_a_space: bool = field(init=False)
    """No space has two points here (the common case): combining assigns each point's term."""

    def __post_init__(self) -> None:
        self.one_a_space = bool(np.unique(self.spaces).size == self.spaces.size)


def build_slots(model: SiteModel) -> dict[str, Slot]:
    """The slots of the site's points as they are now (see :class:`Slot`)."""
    groups: dict[str, tuple[list[int], list[int], list[float]]] = {}
    combine = [s.combine for s in model.config.spaces]

    def add(slot: str, pid: int, space: int, w: float) -> None:
        g = groups.setdefault(slot, ([], [], []))
        g[0].append(pid)
        g[1].append(space)
        g[2].append(w)

    for pid, p in enumerate(model.points):
        if p.space == SITE:
            add(p.quantity, pid, 0, 1.0)
            continue
        w = HEIGHT_WEIGHTS[p.height] if combine[p.space] == "height_weighted" else 1.0
        if p.quantity in ("plane_radiant_temperature", "radiant_flux"):
            add(f"plane:{p.side}", pid, p.space, 1.0)
        elif p.quantity == "air_temperature":
            add("air_temperature", pid, p.space, w)
            if p.height in ("head", "ankle"):
                add(f"air_temperature_{p.height}", pid, p.space, 1.0)
        else:
            add(p.quantity, pid, p.space, w)
        # redundant sensors are compared only with sensors at the same height (and
        # radiant sensors only with sensors facing the same side, below)
        if p.side is None:
            add(f"height:{p.height or 'any'}:{p.quantity}", pid, p.space, 1.0)
    slots = {k: Slot(np.array(v[0], dtype=np.int64), np.array(v[1], dtype=np.int64),
                     np.array(v[2], dtype=np.float64)) for k, v in groups.items()}
    for name, slot in slots.items():
        if name.startswith("plane:"):
            slot.flux = np.array([model.points[p].quantity == "radiant_flux"
                                  for p in slot.pids], dtype=bool)
    return slots


def combine(slot: Slot, values: FloatArray, fresh: BoolArray, n: int
            ) -> tuple[FloatArray, FloatArray]:
    """Weighted mean per row (time x space) of fresh values, and the spread (max - min).

    ``values`` and ``fresh`` are (K, points); the results are (K * n,)."""
    k = values.shape[0]
    v = values[:, slot.pids]
    ok = fresh[:, slot.pids] & np.isfinite(v)
    rows = (np.arange(k)[:, None] * n + slot.spaces[None, :]).ravel()
    w = np.where(ok, slot.weights[None, :], 0.0).ravel()
    okr = ok.ravel()
    vr = v.ravel()
    if slot.one_a_space:
        # one point a space (the common case): no spread, and each row's sums are its one
        # term, added to 0.0 as bincount does (so -0.0 becomes 0.0 there too)
        num = np.zeros(k * n)
        den = np.zeros(k * n)
        num[rows] = 0.0 + np.where(okr, vr, 0.0) * w
        den[rows] = 0.0 + w
        with np.errstate(invalid="ignore", divide="ignore"):
            single: FloatArray = np.where(den > 0, num / den, np.nan)
        return single, np.full(k * n, np.nan)
    num = np.bincount(rows, weights=np.where(okr, vr, 0.0) * w, minlength=k * n)
    den = np.bincount(rows, weights=w, minlength=k * n)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(den > 0, num / den, np.nan)
    hi = np.full(k * n, -np.inf)
    lo = np.full(k * n, np.inf)
    np.maximum.at(hi, rows[okr], vr[okr])
    np.minimum.at(lo, rows[okr], vr[okr])
    count = np.bincount(rows[okr], minlength=k * n)
    spread = np.where(count >= 2, hi - lo, np.nan)
    return mean, spread


def extreme(slot: Slot, values: FloatArray, fresh: BoolArray, n: int,
            highest: bool) -> FloatArray:
    """Highest (or lowest) fresh value per row (time x space), NaN if none."""
    k = values.shape[0]
    v = values[:, slot.pids]
    ok = (fresh[:, slot.pids] & np.isfinite(v)).ravel()
    rows = (np.arange(k)[:, None] * n + slot.spaces[None, :]).ravel()[ok]
    out = np.full(k * n, -np.inf if highest else np.inf)
    (np.maximum if highest else np.minimum).at(out, rows, v.ravel()[ok])
    result: FloatArray = np.where(np.isfinite(out), out, np.nan)
    return result
