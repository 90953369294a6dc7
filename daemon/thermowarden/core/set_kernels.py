"""The Gagge two-node SET model compiled as numpy ufuncs (numba), for all spaces at once.

Kept apart from :mod:`thermowarden.core.comfort` so that importing the core stays cheap:
numba compiles (or loads from its cache) these kernels when this module is imported, the
first time a SET, cooling effect or ASHRAE 55 PMV is computed.

Units: temperatures °C, air speed m/s, metabolic rate met, clothing clo, vapour pressure
torr, pressure Pa; returns SET in °C.
"""

from __future__ import annotations

from numba import float64, vectorize
from pythermalcomfort.models.two_nodes_gagge import _gagge_two_nodes_optimized

BODY_SURFACE_AREA_SET = 1.8258
"""m²: the body surface area pythermalcomfort's ``set_tmp`` uses by default."""


_SET_SIGNATURE = [float64(float64, float64, float64, float64, float64, float64, float64)]


@vectorize(_SET_SIGNATURE, target="parallel", cache=True)  # type: ignore[untyped-decorator, no-untyped-call]
def set_compiled(tdb: float, tr: float, v: float, met: float, clo: float,
                  vapor_pressure_torr: float, p_atm: float) -> float:  # pragma: no cover - numba
    """SET of a standing person, compiled as a numpy ufunc over all cores.

    pythermalcomfort 4.8.0 compiles only the cooling-effect variant as a (single-threaded)
    ufunc; its public ``set_tmp`` loops over spaces in Python for the plain SET (about
    8 us per space). This calls the same pinned two-node kernel for all spaces in compiled
    code; a test checks it against ``set_tmp``. Call it from one thread at a time (numba's
    default threading layer is not re-entrant): the engine thread is the only caller.
    """
    return _gagge_two_nodes_optimized(tdb, tr, v, met, clo, vapor_pressure_torr, 0.0,  # type: ignore[no-any-return]
                                      BODY_SURFACE_AREA_SET, p_atm, 1, False)[0]


@vectorize(_SET_SIGNATURE, target="parallel", cache=True)  # type: ignore[untyped-decorator, no-untyped-call]
def set_for_ce_compiled(tdb: float, tr: float, v: float, met: float, clo: float,
                         vapor_pressure_torr: float, p_atm: float
                         ) -> float:  # pragma: no cover - numba
    """The SET variant ASHRAE 55's cooling effect uses (``set_tmp(calculate_ce=True)``)."""
    return _gagge_two_nodes_optimized(tdb, tr, v, met, clo, vapor_pressure_torr, 0.0,  # type: ignore[no-any-return]
                                      BODY_SURFACE_AREA_SET, p_atm, 1, True)[0]


@vectorize(_SET_SIGNATURE, cache=True)  # type: ignore[untyped-decorator, no-untyped-call]
def set_compiled_serial(tdb: float, tr: float, v: float, met: float, clo: float,
                         vapor_pressure_torr: float, p_atm: float
                         ) -> float:  # pragma: no cover - numba
    """:func:`set_compiled` on one core, for small batches (thread start-up costs more)."""
    return _gagge_two_nodes_optimized(tdb, tr, v, met, clo, vapor_pressure_torr, 0.0,  # type: ignore[no-any-return]
                                      BODY_SURFACE_AREA_SET, p_atm, 1, False)[0]


@vectorize(_SET_SIGNATURE, cache=True)  # type: ignore[untyped-decorator, no-untyped-call]
def set_for_ce_compiled_serial(tdb: float, tr: float, v: float, met: float, clo: float,
                                vapor_pressure_torr: float, p_atm: float
                                ) -> float:  # pragma: no cover - numba
    """:func:`set_for_ce_compiled` on one core, for small batches."""
    return _gagge_two_nodes_optimized(tdb, tr, v, met, clo, vapor_pressure_torr, 0.0,  # type: ignore[no-any-return]
                                      BODY_SURFACE_AREA_SET, p_atm, 1, True)[0]
