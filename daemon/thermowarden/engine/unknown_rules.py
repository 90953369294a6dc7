"""Rules that cannot decide: unknown for want of an input for ``UNKNOWN_LONG_S`` or more in a
space. Counted per space (``rules_unknown_long``, which the sensor-health rules read) and
named in words with the inputs they lack (``rules_unknown_detail``)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Final

import numpy as np

from thermowarden.core.columns import FloatArray
from thermowarden.core.labels import value_label
from thermowarden.engine.rule_runtime import RuleRuntime

UNKNOWN_LONG_S: Final = 1800.0
"""A rule unknown this long in a space (an input it needs missing) counts for sensor health."""


def count_long(rules: list[RuleRuntime], n: int, now: float) -> FloatArray:
    """Per space: how many rules (other than those of health packs) have been unknown for
    want of an input for at least ``UNKNOWN_LONG_S``."""
    since = [rt.unknown_since for rt in rules if not rt.rule.health]
    if not since:
        return np.zeros(n)
    counts: FloatArray = (now - np.stack(since) >= UNKNOWN_LONG_S).sum(
        axis=0, dtype=np.float64)  # one array operation, not one per rule
    return counts


def detail(rules: list[RuleRuntime], env: Mapping[str, Any], i: int, now: float) -> str:
    """Which rules of space ``i`` have been unknown for ``UNKNOWN_LONG_S`` and the names
    they read that are not known in ``env`` (the evaluation's values), in words: ``Lower
    the shading (Mean radiant temperature)``."""
    parts: list[str] = []
    for rt in rules:
        if rt.rule.health or not now - rt.unknown_since[i] >= UNKNOWN_LONG_S:
            continue
        exprs = [e for _, e in rt.rule.levels] + [
            e for e in (rt.rule.condition, rt.rule.clear) if e is not None]
        names = sorted({n for e in exprs for n in e.names
                        if n not in rt.params and isinstance(env.get(n), np.ndarray)
                        and env[n].dtype != np.bool_ and not np.isfinite(env[n][i])})
        # in words: the rule's title and the inputs it lacks ("Too warm (PMV, ISO 7730)")
        lacking = ", ".join(value_label(n) for n in names) or "inputs out of range"
        parts.append(f"{rt.rule.config.title} ({lacking})")
    return "; ".join(parts)
