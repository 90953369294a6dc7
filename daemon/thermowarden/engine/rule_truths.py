"""One rule's conditions over the spaces, three-valued (true / false / unknown): the raise
condition (or its levels), the clear, hold-back and acted-on conditions, and whether an
input it needs is missing. Unknown never raises and never clears; where the rule does not
apply it is false and clear."""

from __future__ import annotations

from collections import ChainMap
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import BoolArray, FloatArray
from thermowarden.core.expressions import Truth
from thermowarden.rules import CompiledRule


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
    assumed_only = np.zeros(n, dtype=bool)
    for name in cfg.measured:  # an assumption may not stand in for these: unknown there
        flags = base["_assumed"].get(name)
        if flags is not None:
            assumed_only |= flags
    if assumed_only.any():
        cond = Truth(cond.value & ~assumed_only, cond.known & ~assumed_only)
    occupied = base["occupied"]
    if cfg.occupied_only:
        cond = Truth(cond.value & occupied, cond.known | ~occupied)
    cond = Truth(cond.value & mask, cond.known | ~mask)
    clear = rule.clear.evaluate_truth(env, n) if rule.clear else Truth(~cond.value, cond.known)
    if assumed_only.any():
        clear = Truth(clear.value & ~assumed_only, clear.known & ~assumed_only)
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
        elif isinstance(base.get(name), np.ndarray) and base[name].dtype != np.bool_:
            lacking |= ~np.isfinite(base[name])  # a derived need (wbgt): its value
    lacking |= assumed_only
    acted = rule.acted_on.evaluate_truth(env, n).true if rule.acted_on is not None else None
    return RuleTruths(cond, clear, hold, level_idx, lacking, acted)
