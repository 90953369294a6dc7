"""A batch of K ticks evaluated as K x N rows (replay, and a live tick as K = 1): one
tick's view of the batch's environment, whether a rule's conditions repeat those of the
tick before, re-evaluated truths patched into the batch, since when each space has been
unknown, and the names a rule reads."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from typing import Any

import numpy as np

from thermowarden.core.columns import FloatArray
from thermowarden.engine.rule_truths import RuleTruths
from thermowarden.rules import CompiledRule


def reads(rule: CompiledRule) -> set[str]:
    """Every name a rule's conditions read."""
    exprs = [e for _, e in rule.levels] + [e for e in (rule.condition, rule.clear,
                                                        rule.hold_back, rule.acted_on) if e]
    return {name for e in exprs for name in e.names}


def patch_rows(truths: RuleTruths, one: RuleTruths, rows: slice) -> None:
    """Write one tick's re-evaluated truths into the batch's rows."""
    truths.raise_.value[rows] = one.raise_.value
    truths.raise_.known[rows] = one.raise_.known
    truths.clear.value[rows] = one.clear.value
    truths.clear.known[rows] = one.clear.known
    truths.hold[rows] = one.hold
    truths.level[rows] = one.level
    truths.lacking[rows] = one.lacking
    if truths.acted_on is not None and one.acted_on is not None:
        truths.acted_on[rows] = one.acted_on


def repeated_ticks(truths: RuleTruths, k: int, n: int) -> list[bool]:
    """Per tick: are the rule's conditions in every space the same as at the tick before?
    (The first tick of a batch is never a repeat.)"""
    out = np.zeros(k, dtype=bool)
    if k > 1:
        same = np.ones(k - 1, dtype=bool)
        parts = [truths.raise_.value, truths.raise_.known, truths.clear.value,
                 truths.clear.known, truths.hold, truths.level, truths.lacking]
        if truths.acted_on is not None:
            parts.append(truths.acted_on)
        for a in parts:
            grid = a.reshape(k, n)
            same &= (grid[1:] == grid[:-1]).all(axis=1)
        out[1:] = same
    result: list[bool] = out.tolist()
    return result


def unknown_trajectory(u: Any, since: FloatArray, times: FloatArray) -> FloatArray:
    """Since when each space has been unknown for want of an input, after each tick, as
    :meth:`Advisories.step` keeps it: the time the current run of ``u`` (K x N) began, or
    the earlier ``since`` when the run started before these ticks."""
    k, n = u.shape
    last_known = np.maximum.accumulate(np.where(~u, np.arange(k)[:, None], -1), axis=0)
    began = np.where(last_known >= 0, times[np.minimum(last_known + 1, k - 1)],
                     np.fmin(since, times[0])[None, :])
    result: FloatArray = np.where(u, began, np.nan)
    return result


class RowView(Mapping[str, Any]):
    """One tick's rows of the rules' environment (arrays are sliced when read)."""

    def __init__(self, env: Mapping[str, Any], rows: slice) -> None:
        self._env = env
        self._rows = rows

    def __getitem__(self, name: str) -> Any:
        v = self._env[name]
        if isinstance(v, np.ndarray):
            return v[self._rows]
        if isinstance(v, dict):
            return {q: a[self._rows] for q, a in v.items()}
        return v

    def __iter__(self) -> Iterator[str]:
        return iter(self._env)

    def __len__(self) -> int:
        return len(self._env)
