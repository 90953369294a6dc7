"""Vectorised root finding used by the comfort and psychrometric inversions.

The functions here solve f(x) = 0 for many spaces at once. Each iteration evaluates ``f``
only on the spaces not yet converged, so an expensive model (the two-node SET model) is
called on shrinking subsets.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import numpy.typing as npt

from thermowarden.core.columns import FloatArray

IndexArray = npt.NDArray[np.intp]
SubsetFunction = Callable[[FloatArray, IndexArray], FloatArray]
"""f(x, idx): residuals for the spaces ``idx`` at trial points ``x`` (same length as idx)."""


def illinois(f: SubsetFunction, lo: FloatArray, hi: FloatArray, f_lo: FloatArray,
             f_hi: FloatArray, tolerance: float, max_iterations: int = 40,
             residual_tolerance: float = 0.0) -> FloatArray:
    """Bracketed regula falsi with the Illinois modification, per element.

    Requires f(lo) and f(hi) of opposite signs (elements without a bracket come back NaN).
    Converges superlinearly on smooth monotone functions; stops an element when its
    bracket is narrower than ``tolerance`` or its residual is within ``residual_tolerance``.
    """
    a = np.asarray(lo, dtype=np.float64).copy()
    b = np.asarray(hi, dtype=np.float64).copy()
    fa = np.asarray(f_lo, dtype=np.float64).copy()
    fb = np.asarray(f_hi, dtype=np.float64).copy()
    n = a.shape[0]
    result = np.full(n, np.nan)
    bracketed = np.isfinite(fa) & np.isfinite(fb) & (np.sign(fa) * np.sign(fb) <= 0)
    zero_a = bracketed & (fa == 0)
    result[zero_a] = a[zero_a]
    zero_b = bracketed & (fb == 0) & ~zero_a
    result[zero_b] = b[zero_b]
    active = np.flatnonzero(bracketed & ~zero_a & ~zero_b)
    side = np.zeros(n, dtype=np.int8)  # which end was retained last time (-1 a, +1 b)
    for _ in range(max_iterations):
        if active.size == 0:
            break
        ai, bi, fai, fbi = a[active], b[active], fa[active], fb[active]
        c = (ai * fbi - bi * fai) / (fbi - fai)
        bad = ~np.isfinite(c)
        c[bad] = 0.5 * (ai[bad] + bi[bad])
        fc = f(c, active)
        same_as_a = np.sign(fc) == np.sign(fai)
        # replace a where f(c) has the sign of f(a), else replace b
        a[active] = np.where(same_as_a, c, ai)
        fa[active] = np.where(same_as_a, fc, fai)
        b[active] = np.where(same_as_a, bi, c)
        fb[active] = np.where(same_as_a, fbi, fc)
        # Illinois: halve the retained end's value when the same end is kept twice
        kept = np.where(same_as_a, 1, -1).astype(np.int8)
        repeat = side[active] == kept
        halve_b = repeat & same_as_a
        halve_a = repeat & ~same_as_a
        fb[active[halve_b]] *= 0.5
        fa[active[halve_a]] *= 0.5
        side[active] = kept
        done = ((np.abs(b[active] - a[active]) < tolerance)
                | (np.abs(fc) <= residual_tolerance) | ~np.isfinite(fc))
        finished = active[done]
        result[finished] = np.where(np.isfinite(fc[done]), c[done], np.nan)
        active = active[~done]
    if active.size:
        result[active] = 0.5 * (a[active] + b[active])
    return result
