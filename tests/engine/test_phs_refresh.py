"""The engine's ISO 7933 PHS refresh (every ``PHS_EVERY_S``) computes the PHS columns alone,
with what they read (humidity, mean radiant temperature), not every index family again; the
columns are those of computing every index."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from tests.engine.test_distinct_rows import assert_same_tables, spaces
from tests.engine.test_faults import foundry, hot_bays
from thermowarden.core.indices import FAMILIES, compute_indices, compute_phs, heat_stress
from thermowarden.engine.evaluation import PHS_EVERY_S
from thermowarden.engine.index_rows import take_inputs


def phs_only(table: dict) -> dict:
    return {name: col for name, col in table.items() if name.startswith("phs_")}


@pytest.mark.parametrize("editions", [("2023",) * 5, ("2023", "2004", "2004", "2023", "2004")])
def test_phs_alone_gives_the_columns_of_every_index(editions) -> None:
    s = take_inputs(dataclasses.replace(spaces(), phs_edition=editions),
                    np.array([0, 1, 2, 3, 4, 2, 4]))
    alone = compute_phs(s)
    every = compute_indices(s, with_phs=True)
    assert list(alone) == [name for name in every if name.startswith("phs_")]
    assert_same_tables(alone, phs_only(every))
    assert np.isfinite(alone["phs_rectal_temperature"].values[[2, 4, 5, 6]]).all()  # hot work


def test_the_refresh_computes_no_other_family(tmp_path, monkeypatch) -> None:
    # every family's compute is counted, with whether PHS was asked of that computation
    calls: list[tuple[str, bool, int]] = []

    def counted(name, real):
        def compute(s, d, out):
            calls.append((name, d.with_phs, s.n))
            return real(s, d, out)
        return compute

    for family in FAMILIES:
        monkeypatch.setattr(family, "compute", counted(family.__name__, family.compute))
    monkeypatch.setattr(heat_stress, "compute_phs", counted("phs", heat_stress.compute_phs))

    engine = foundry(tmp_path, ["standing", "crouching", "seated"])
    per_tick: dict[float, list[tuple[str, bool, int]]] = {}
    for t in np.arange(0.0, 3 * PHS_EVERY_S + 1, 60.0).tolist():
        hot_bays(engine, t, 3)  # the same readings every minute
        calls.clear()
        engine.tick(t)
        per_tick[t] = list(calls)

    refreshes = [t for t, c in per_tick.items() if ("phs", True, 3) in c]
    assert refreshes == [0.0, PHS_EVERY_S, 2 * PHS_EVERY_S, 3 * PHS_EVERY_S]
    # no family other than PHS is ever computed for PHS, and only PHS when PHS is asked
    assert [c for cs in per_tick.values() for c in cs if c[1] and c[0] != "phs"] == []
    # the readings did not change: after the first tick nothing but PHS is computed
    for t in refreshes[1:]:
        assert per_tick[t] == [("phs", True, 3)], t
    # and the PHS the engine holds is that of computing every index of the same inputs
    snap = engine.state.snapshot(3 * PHS_EVERY_S)
    every = compute_indices(snap.inputs, with_phs=True)
    for i in range(3):
        got = engine.conditions_payload(i)["indices"]
        for name, col in phs_only(every).items():
            assert got[name] == col.as_dict(i), (i, name)
