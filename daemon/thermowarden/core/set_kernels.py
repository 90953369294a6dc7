"""The Gagge two-node SET model compiled as numpy ufuncs (numba), for all spaces at once.

Kept apart from :mod:`thermowarden.core.comfort` so that importing the core stays cheap:
numba compiles (or loads from its cache) each kernel the first time :func:`kernel` is asked
for it: building a ufunc costs CPU even when its code loads from the cache (most of it for
the multi-core ones), so a process pays only for the variants it uses (``assess`` of one
space: the single-core SET alone).

Units: temperatures °C, air speed m/s, metabolic rate met, clothing clo, vapour pressure
torr, pressure Pa; returns SET in °C.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
from numba import float64, njit, vectorize

from thermowarden.core.ptc_models import model

_gagge_two_nodes_optimized = model("two_nodes_gagge", "_gagge_two_nodes_optimized")

BODY_SURFACE_AREA_SET = 1.8258
"""m²: the body surface area pythermalcomfort's ``set_tmp`` uses by default."""


_SET_SIGNATURE = [float64(float64, float64, float64, float64, float64, float64, float64)]


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


def set_for_ce_compiled(tdb: float, tr: float, v: float, met: float, clo: float,
                         vapor_pressure_torr: float, p_atm: float
                         ) -> float:  # pragma: no cover - numba
    """The SET variant ASHRAE 55's cooling effect uses (``set_tmp(calculate_ce=True)``)."""
    return _gagge_two_nodes_optimized(tdb, tr, v, met, clo, vapor_pressure_torr, 0.0,  # type: ignore[no-any-return]
                                      BODY_SURFACE_AREA_SET, p_atm, 1, True)[0]


def set_compiled_serial(tdb: float, tr: float, v: float, met: float, clo: float,
                         vapor_pressure_torr: float, p_atm: float
                         ) -> float:  # pragma: no cover - numba
    """:func:`set_compiled` on one core, for small batches (thread start-up costs more)."""
    return _gagge_two_nodes_optimized(tdb, tr, v, met, clo, vapor_pressure_torr, 0.0,  # type: ignore[no-any-return]
                                      BODY_SURFACE_AREA_SET, p_atm, 1, False)[0]


def set_for_ce_compiled_serial(tdb: float, tr: float, v: float, met: float, clo: float,
                                vapor_pressure_torr: float, p_atm: float
                                ) -> float:  # pragma: no cover - numba
    """:func:`set_for_ce_compiled` on one core, for small batches."""
    return _gagge_two_nodes_optimized(tdb, tr, v, met, clo, vapor_pressure_torr, 0.0,  # type: ignore[no-any-return]
                                      BODY_SURFACE_AREA_SET, p_atm, 1, True)[0]


@njit(cache=True)
def _set_loop(tdb: Any, tr: Any, v: Any, met: Any, clo: Any, vapor_pressure_torr: Any,
              p_atm: Any, for_cooling_effect: bool, out: Any) -> None:  # pragma: no cover
    """SET of each row into ``out``, one core (numba; loading it costs no ufunc build)."""
    for i in range(tdb.shape[0]):
        out[i] = _gagge_two_nodes_optimized(tdb[i], tr[i], v[i], met[i], clo[i],
                                            vapor_pressure_torr[i], 0.0,
                                            BODY_SURFACE_AREA_SET, p_atm[i], 1,
                                            for_cooling_effect)[0]


_PARALLEL = {"set_compiled": True, "set_for_ce_compiled": True,
             "set_compiled_serial": False, "set_for_ce_compiled_serial": False}
_BUILT: dict[str, Callable[..., Any]] = {}


def set_serial(tdb: Any, tr: Any, v: Any, met: Any, clo: Any, vapor_pressure_torr: Any,
               p_atm: Any, for_cooling_effect: bool) -> Any:
    """SET (°C) of each row on one core: the single-core kernels' results, without building
    a ufunc (a ufunc's wrapper is built in every process, even from the cache)."""
    out = np.empty(tdb.shape[0])
    _set_loop(np.ascontiguousarray(tdb, dtype=np.float64),
              np.ascontiguousarray(tr, dtype=np.float64),
              np.ascontiguousarray(v, dtype=np.float64),
              np.ascontiguousarray(met, dtype=np.float64),
              np.ascontiguousarray(clo, dtype=np.float64),
              np.ascontiguousarray(vapor_pressure_torr, dtype=np.float64),
              np.ascontiguousarray(p_atm, dtype=np.float64), bool(for_cooling_effect), out)
    return out


def kernel(name: str) -> Callable[..., Any]:
    """The compiled ufunc of the function ``name`` of this module (built on first use)."""
    built = _BUILT.get(name)
    if built is None:
        py_func = globals()[name]
        options: dict[str, Any] = {"cache": True}
        if _PARALLEL[name]:
            options["target"] = "parallel"
        built = vectorize(_SET_SIGNATURE, **options)(py_func)  # type: ignore[no-untyped-call]
        _BUILT[name] = built
    return built
