"""Index tables by rows: a subset of the rows of the inputs, each distinct row of inputs
computed once, tables of parts merged back into one (rows not computed absent with
:data:`COMPUTATION_FAILED`), columns joined."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import fields
from typing import Any, Final

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import FloatArray, IndexColumn
from thermowarden.core.indices import (
    IndexTable,
    SpaceInputs,
    compute_indices,
    compute_phs,
    select,
)

COMPUTATION_FAILED: Final = "the computation failed for this space's inputs"


def take_inputs(s: SpaceInputs, idx: npt.NDArray[np.intp]) -> SpaceInputs:
    """The inputs of the spaces ``idx`` only."""
    changes: dict[str, Any] = {"n": int(idx.size)}
    for f in dataclasses.fields(s):
        v = getattr(s, f.name)
        if isinstance(v, np.ndarray):
            changes[f.name] = v[idx]
        elif isinstance(v, dict):
            changes[f.name] = {k: a[idx] for k, a in v.items()}
        elif isinstance(v, tuple) and len(v) == s.n:
            changes[f.name] = tuple(v[int(i)] for i in idx)
    return dataclasses.replace(s, **changes)


def merge_tables(n: int, parts: list[tuple[npt.NDArray[np.intp], IndexTable]],
                 template: IndexTable | None = None) -> IndexTable:
    """One table over ``n`` spaces (or rows) from tables of subsets; columns missing for a
    space (its computation failed) are absent with :data:`COMPUTATION_FAILED`. Columns of
    ``template`` (an earlier table) that no part has are absent for every space."""
    names: dict[str, IndexColumn] = {}
    for _, t in [*parts, (np.zeros(0, dtype=np.intp), template or {})]:
        for name, col in t.items():
            names.setdefault(name, col)
    out: IndexTable = {}
    for name, proto in names.items():
        reasons: list[str] = ["", COMPUTATION_FAILED]
        values = np.full(n, np.nan)
        codes = np.ones(n, dtype=proto.codes.dtype)
        for idx, t in parts:
            part = t.get(name)
            if part is None:
                continue
            remap = np.array([0] + [_reason_code(reasons, r) for r in part.reasons[1:]],
                             dtype=proto.codes.dtype)
            values[idx] = part.values
            codes[idx] = remap[part.codes]
        out[name] = IndexColumn(values, codes, tuple(reasons), proto.unit, proto.method,
                                proto.labels)
    return out


def _reason_code(reasons: list[str], reason: str) -> int:
    if reason not in reasons:
        reasons.append(reason)
    return reasons.index(reason)


def rows_of(s: SpaceInputs, index: npt.NDArray[np.intp]) -> SpaceInputs:
    """The same inputs for a subset of rows."""
    given: dict[str, object] = {}
    at: list[int] | None = None  # the rows as Python ints, for the tuples
    for f in fields(s):
        v = getattr(s, f.name)
        if f.name == "n":
            continue
        if isinstance(v, np.ndarray):
            given[f.name] = v[index]
        elif isinstance(v, dict):
            given[f.name] = {k: a[index] for k, a in v.items()}
        elif isinstance(v, tuple):
            if at is None:
                at = index.tolist()
            given[f.name] = tuple([v[i] for i in at])
        else:
            given[f.name] = v
    return SpaceInputs.create(int(index.size), **given)


def _row_keys(s: SpaceInputs) -> npt.NDArray[np.void]:
    """One opaque key per row: the bytes of the row's inputs (arrays, plane radiant
    temperatures, and the posture and PHS edition as codes), of those that are not the same
    bits in every row. Equal keys: equal inputs."""
    cols = [getattr(s, f.name) for f in fields(s) if isinstance(getattr(s, f.name), np.ndarray)]
    cols += [s.plane_radiant[k] for k in sorted(s.plane_radiant)]
    for texts in (s.posture, s.phs_edition):
        if isinstance(texts, tuple) and len(set(texts)) > 1:
            codes = {t: float(c) for c, t in enumerate(sorted(set(texts)))}
            cols.append(np.array([codes[t] for t in texts]))
    m = np.column_stack([c.astype(np.float64) for c in cols])
    bits = m.view(np.uint64)
    # only the columns whose bits vary (most inputs are the same in every row: defaults,
    # people)
    varies = (bits != bits[:1]).any(axis=0)
    m = np.ascontiguousarray(m[:, varies] if varies.any() else m[:, :1])
    keys: npt.NDArray[np.void] = m.view(np.dtype((np.void, m.dtype.itemsize * m.shape[1]))
                                        ).ravel()
    return keys


def compute_distinct(s: SpaceInputs, with_phs: bool) -> IndexTable:
    """:func:`compute_indices` of ``s``, each distinct row of inputs computed once (rows of
    many ticks or spaces often repeat: sensors report to a resolution, equipment and
    occupancy change seldom). Every index of a row depends on that row's inputs alone, and
    the rows computed hold every distinct input, so the table is the one of computing every
    row (the column's reasons and methods, which depend on which inputs occur, included)."""
    return _distinct(s, lambda rows: compute_indices(rows, with_phs=with_phs))


def compute_phs_distinct(s: SpaceInputs) -> IndexTable:
    """:func:`compute_phs` (the ISO 7933 PHS columns alone) of ``s``, each distinct row of
    inputs computed once, as :func:`compute_distinct`."""
    return _distinct(s, compute_phs)


def _distinct(s: SpaceInputs, compute: Callable[[SpaceInputs], IndexTable]) -> IndexTable:
    if s.n < 2:
        return compute(s)
    _, first, inverse = np.unique(_row_keys(s), return_index=True, return_inverse=True)
    if first.size == s.n:
        return compute(s)
    order = np.argsort(first)  # the distinct rows in the order they first occur
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    table = compute(rows_of(s, first[order]))
    return select(table, rank[inverse.ravel()])


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


def input_matrix(s: SpaceInputs) -> FloatArray:
    """Every per-row input that indices depend on (the time-weighted WBGT excepted: it is
    applied afterwards), one column each."""
    cols = [getattr(s, f.name) for f in fields(s)
            if f.name != "wbgt_time_weighted" and isinstance(getattr(s, f.name), np.ndarray)]
    cols += [s.plane_radiant[k] for k in sorted(s.plane_radiant)]
    return np.column_stack([c.astype(np.float64) for c in cols])
