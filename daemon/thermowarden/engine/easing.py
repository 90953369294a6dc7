"""Easing: for rules with ``easing``, the trend of the quantity that eases (a least-squares
slope over the last ``TREND_WINDOW_S``), the projected minutes to the clearing, what an
advisory says while it eases, and the re-arming after a clearing (``easing.rearm_s``: the
lowest level is raised again only while the quantity moves against the easing)."""

from __future__ import annotations

import math
from collections import deque
from typing import Any, Final

import numpy as np

from thermowarden.core.columns import BoolArray
from thermowarden.engine.advisory import Advisory
from thermowarden.engine.rule_runtime import RuleRuntime
from thermowarden.engine.texts import RenderContext, number_at, numbers_at

TREND_WINDOW_S: Final = 900.0
"""The trend of an easing advisory's quantity is fitted over this long (least squares)."""
TREND_MIN_SPAN_S: Final = 300.0
"""... and only once its samples span this long."""
TREND_EVERY_S: Final = 60.0
"""An easing quantity is sampled at most this often."""
CLEAR_FORECAST_MAX_MIN: Final = 24 * 60.0
"""A projected clearing further away than this is not said."""


def rearming(rt: RuleRuntime, candidates: BoolArray, level_idx: Any, now: float,
             n: int) -> BoolArray:
    """Spaces where the rule may not raise now: just cleared (``easing.rearm_s``), at its
    lowest level only, while the easing quantity is not moving against the easing."""
    blocked = np.zeros(n, dtype=bool)
    easing = rt.rule.easing
    if easing is None or easing.rearm_s <= 0:
        return blocked
    rearm = candidates & (rt.rearm_until > now) & (level_idx <= rt.rule.lowest_level)
    for i in np.flatnonzero(rearm):
        s = slope(rt, int(i))
        rise = (None if s is None
                else (s if easing.falling else -s) * TREND_WINDOW_S)
        worsening = rise is not None and rise > max(easing.rearm_rise, 0.0) \
            and rise > 0
        blocked[i] = not worsening
    return blocked


def sample_trends(rules: list[RuleRuntime], ctx: RenderContext, now: float) -> None:
    """Sample the easing quantity of every live or re-arming advisory (at most once a
    minute) for its trend; once per tick, with the evaluation's numbers ``ctx``."""
    for rt in rules:
        easing = rt.rule.easing
        if easing is None:
            continue
        watched = set(rt.advisories)
        if rt.trends or watched:
            watched |= {int(i) for i in np.flatnonzero(rt.rearm_until > now)}
        for i in [i for i in rt.trends if i not in watched]:
            del rt.trends[i]
        due: list[tuple[int, deque[tuple[float, float]]]] = []
        for i in watched:
            if not ctx.has_numbers(i):
                continue
            q = rt.trends.setdefault(i, deque())
            if q and now - q[-1][0] < TREND_EVERY_S:
                continue
            due.append((i, q))
        if not due:
            continue
        values = numbers_at(easing.quantity, ctx.base, rt.params, [i for i, _ in due])
        for (_, q), v in zip(due, values, strict=True):
            if not math.isfinite(v):
                continue
            q.append((now, v))
            while q and q[0][0] < now - TREND_WINDOW_S:
                q.popleft()


def slope(rt: RuleRuntime, i: int) -> float | None:
    """The easing quantity's trend in space ``i`` (units per second; least squares over
    the last ``TREND_WINDOW_S``), or None with too short a record."""
    q = rt.trends.get(i)
    if not q or q[-1][0] - q[0][0] < TREND_MIN_SPAN_S:
        return None
    t = np.array([p[0] for p in q])
    v = np.array([p[1] for p in q])
    t = t - t.mean()
    return float((t * (v - v.mean())).sum() / (t * t).sum())


def clear_in_min(rt: RuleRuntime, i: int, now: float, ctx: RenderContext) -> float | None:
    """Minutes until space ``i``'s advisory clears at the present trend: to the easing
    quantity's ``clears_at``, then the off-delay (what is left of it once there);
    None when it is not moving that way or too far off."""
    easing = rt.rule.easing
    assert easing is not None
    off = rt.rule.config.off_delay_s
    if np.isfinite(rt.clear_since[i]):
        return max(0.0, off - (now - float(rt.clear_since[i]))) / 60
    v = number_at(easing.quantity, ctx.base, rt.params, i)
    target = number_at(easing.clears_at, ctx.base, rt.params, i)
    s = slope(rt, i)
    if s is None or not (math.isfinite(v) and math.isfinite(target)):
        return None
    gap = (v - target) if easing.falling else (target - v)
    rate = -s if easing.falling else s
    if gap <= 0 or rate <= 0:
        return None
    minutes = (gap / rate + off) / 60
    return minutes if minutes <= CLEAR_FORECAST_MAX_MIN else None


def mode(rt: RuleRuntime, i: int, adv: Advisory) -> str:
    """What the advisory says now: ``level`` (its level's texts) or ``easing`` (lowered
    and not escalated since, its level's condition no longer holding, or its raise
    condition false while it waits to clear), for rules with ``easing``."""
    if rt.rule.easing is None:
        return "level"
    level = int(rt.level[i])
    now_level = int(rt.now_level[i])
    if not rt.holds[i] or 0 <= now_level < level or adv.lowered:
        return "easing"
    return "level"
