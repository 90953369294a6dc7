"""Whole-body thermal comfort, vectorised over spaces.

PMV/PPD per ISO 7730:2005 (Fanger), PMV/PPD per ASHRAE 55-2020 (the elevated-air-speed
method through SET and the cooling effect), SET (Gagge two-node model as in ASHRAE 55
Normative Appendix D), the cooling effect of elevated air speed, and the air speed that
would bring a warm space back to a target PMV. The models themselves come from
pythermalcomfort (version pinned in pyproject.toml); applicability is decided here.

Units: temperatures °C, air speed m/s, RH %, metabolic rate met, clothing clo.
"""

from __future__ import annotations

import warnings

import numpy as np

from thermowarden.core.columns import FloatArray
from thermowarden.core.ptc_models import model

STILL_AIR = 0.1
"""m/s: the still-air speed of ASHRAE 55's elevated-air-speed method."""

MAX_ELEVATED_AIR_SPEED = 2.0
"""m/s: upper air speed of the ASHRAE 55 SET-based method (and of the search for the speed
needed)."""


def relative_air_speed(air_speed: FloatArray, met: FloatArray) -> FloatArray:
    """Relative air speed (m/s) by ASHRAE 55's rule for the body's own movement.

    ASHRAE 55-2020 5.3.2 (and its Appendix B): vr = v + 0.3 (M - 1) for M > 1 met, else v,
    with v the average air speed. This is ASHRAE 55's rule only: ISO 7730:2005 takes the
    relative air speed as an input (Table D.1, Annex E) and has no such addition, so the
    ISO 7730 PMV gets a measured relative air speed, or the air speed itself.
    """
    v = np.asarray(air_speed, dtype=np.float64)
    m = np.asarray(met, dtype=np.float64)
    result: FloatArray = np.where(m > 1.0, v + 0.3 * (m - 1.0), v)
    return result


def dynamic_clothing(clo: FloatArray, met: FloatArray) -> FloatArray:
    """Dynamic clothing insulation (clo) for active people, ASHRAE 55's rule.

    ASHRAE 55-2020 5.2.2.2: Icl,dyn = Icl (0.6 + 0.4 / M) for M > 1.2 met. Used for the
    ASHRAE 55 PMV and its cooling effect only. ISO 7730:2005 uses the static (basic)
    clothing insulation (its Table D.1 and Annex E are computed that way; its own
    correction for clothing in motion is ISO 9920's, which needs walking speed), and SET
    (ASHRAE 55 Appendix D) is computed with the static clothing, as in its check table.
    """
    c = np.asarray(clo, dtype=np.float64)
    m = np.asarray(met, dtype=np.float64)
    result: FloatArray = np.where(m > 1.2, c * (0.6 + 0.4 / m), c)
    return result


def clothing_from_outdoor(outdoor_6am_c: FloatArray) -> FloatArray:
    """Typical clothing (clo) predicted from the 06:00 outdoor temperature (°C).

    Schiavon and Lee (2013), the dynamic clothing model of ASHRAE 55-2020 5.2.2.2, via
    pythermalcomfort ``clo_tout``. NaN where the temperature is missing.
    """
    t = np.asarray(outdoor_6am_c, dtype=np.float64)
    ok = np.isfinite(t)
    out = np.full(t.shape, np.nan)
    if ok.any():
        _ptc_clo_tout = model("clo_tout")

        out[ok] = np.asarray(_ptc_clo_tout(tout=t[ok]).clo_tout, dtype=np.float64)
    return out


def ppd_from_pmv(pmv: FloatArray) -> FloatArray:
    """PPD (%) from PMV, ISO 7730:2005 eq. (5)."""
    p = np.asarray(pmv, dtype=np.float64)
    result: FloatArray = 100.0 - 95.0 * np.exp(-0.03353 * p**4 - 0.2179 * p**2)
    return result


def pmv_fanger(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray, rh: FloatArray,
               met: FloatArray, clo: FloatArray) -> FloatArray:
    """Fanger's PMV, ISO 7730:2005 eq. (1)-(4), external work 0; no range checks here."""
    n = np.asarray(air_c).shape[0]
    out = np.full(n, np.nan)
    ok = (np.isfinite(air_c) & np.isfinite(mrt_c) & np.isfinite(rel_speed) & np.isfinite(rh)
          & np.isfinite(met) & np.isfinite(clo))
    if ok.any():
        _ptc_pmv_ppd_iso = model("pmv_ppd_iso")

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = _ptc_pmv_ppd_iso(tdb=air_c[ok], tr=mrt_c[ok], vr=rel_speed[ok], rh=rh[ok],
                                   met=met[ok], clo=clo[ok], limit_inputs=False,
                                   round_output=False)
        out[ok] = np.asarray(res.pmv, dtype=np.float64)
    return out


# pythermalcomfort and the compiled SET kernels (core/set_kernels.py) are imported where
# they are used: loading them costs seconds, and `check` or a parse error needs neither.

PARALLEL_FROM = 512
"""Batches of at least this many spaces use the multi-core SET kernels."""


def _p_sat_torr(t_c: FloatArray) -> FloatArray:
    """Saturation pressure (torr) as the two-node model computes it (Antoine form)."""
    result: FloatArray = np.exp(18.6686 - 4030.183 / (np.asarray(t_c) + 235.0))
    return result


def set_temperature(air_c: FloatArray, mrt_c: FloatArray, speed: FloatArray, rh: FloatArray,
                    met: FloatArray, clo: FloatArray, *, for_cooling_effect: bool = False,
                    pressure_pa: FloatArray | float = 101_325.0) -> FloatArray:
    """Standard Effective Temperature (°C), Gagge two-node model, ASHRAE 55-2020 Appendix D.

    ``for_cooling_effect`` selects the variant ASHRAE 55 uses inside the cooling-effect
    calculation (no metabolic correction of the still-air reference). NaN where any input
    is missing; no range checks here. Each distinct row of inputs is computed once and
    remembered (``comfort_kernels.SET_MEMO``): readings at the sensors' resolution repeat.
    """
    n = np.asarray(air_c).shape[0]
    out = np.full(n, np.nan)
    ok = (np.isfinite(air_c) & np.isfinite(mrt_c) & np.isfinite(speed) & np.isfinite(rh)
          & np.isfinite(met) & np.isfinite(clo))
    if not ok.any():
        return out
    from thermowarden.core import comfort_kernels
    from thermowarden.core import set_kernels as k

    p = np.broadcast_to(np.asarray(pressure_pa, dtype=np.float64), (n,))
    ta = air_c[ok]
    vp = rh[ok] * _p_sat_torr(ta) / 100.0

    def solve(c: list[FloatArray]) -> FloatArray:
        ta_, tr_, v_, met_, clo_, vp_, p_, _ = c
        if ta_.size >= PARALLEL_FROM:
            kernel = k.kernel("set_for_ce_compiled" if for_cooling_effect else "set_compiled")
            result: FloatArray = kernel(ta_, tr_, v_, met_, clo_, vp_, p_)
            return result
        return k.set_serial(ta_, tr_, v_, met_, clo_, vp_, p_,  # type: ignore[no-any-return]
                            for_cooling_effect)

    variant = np.full(ta.size, 1.0 if for_cooling_effect else 0.0)
    with np.errstate(all="ignore"):
        out[ok] = comfort_kernels.SET_MEMO.apply(
            [ta, mrt_c[ok], speed[ok], met[ok], clo[ok], vp, p[ok], variant], solve)
    return out


def cooling_effect(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray, rh: FloatArray,
                   met: FloatArray, clo: FloatArray) -> FloatArray:
    """Cooling effect (K) of elevated air speed, ASHRAE 55-2020 5.3.2.1 and Appendix D.

    CE is the equal drop of air and mean radiant temperature that gives, at still air
    (0.1 m/s), the SET of the actual conditions. 0 where vr <= 0.1 m/s. Solved per space by
    bracketed regula falsi (Illinois) on [0, 40] K until the SET residual is within 0.01 K
    (CE to about 0.01 K: SET falls about 1 K per K of CE): the upper bracket starts just
    beyond that estimate (1.2 K per K of SET difference, plus 0.05 K) and widens to 40 K
    only where it does not bracket. No bracket: the elevated speed does not cool (CE 0), as
    ASHRAE 55 / pythermalcomfort. Compiled per space (core/comfort_kernels.py).
    """
    ta = np.asarray(air_c, dtype=np.float64)
    tr = np.asarray(mrt_c, dtype=np.float64)
    ce = np.where(np.asarray(rel_speed) <= STILL_AIR, 0.0, np.nan)
    todo = np.flatnonzero(np.isnan(ce) & np.isfinite(ta) & np.isfinite(tr)
                          & np.isfinite(rel_speed) & np.isfinite(rh) & np.isfinite(met)
                          & np.isfinite(clo))
    if todo.size == 0:
        return ce
    from thermowarden.core import comfort_kernels

    with np.errstate(all="ignore"):
        ce[todo] = comfort_kernels.cooling_effect_rows(
            ta[todo], tr[todo], np.asarray(rel_speed)[todo], np.asarray(rh)[todo],
            np.asarray(met)[todo], np.asarray(clo)[todo], parallel=todo.size >= PARALLEL_FROM)
    return ce


def pmv_ashrae(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray, rh: FloatArray,
               met: FloatArray, clo: FloatArray, ce: FloatArray | None = None) -> FloatArray:
    """PMV per ASHRAE 55-2020 5.3.2: above 0.1 m/s, Fanger's PMV at still air after
    subtracting the cooling effect from both air and mean radiant temperature."""
    if ce is None:
        ce = cooling_effect(air_c, mrt_c, rel_speed, rh, met, clo)
    speed = np.where(ce > 0, STILL_AIR, rel_speed)
    return pmv_fanger(air_c - ce, mrt_c - ce, speed, rh, met, clo)


SPEED_GRID_POINTS = 12
"""Log-spaced speeds scanned between still air and the bound before refining."""


def air_speed_for_pmv(air_c: FloatArray, mrt_c: FloatArray, rel_speed: FloatArray,
                      rh: FloatArray, met: FloatArray, clo: FloatArray, target_pmv: FloatArray,
                      max_speed: float = MAX_ELEVATED_AIR_SPEED) -> FloatArray:
    """Relative air speed (m/s) at which the ASHRAE 55 PMV falls to ``target_pmv``.

    The number behind fan advice. Steps (ASHRAE 55-2020 5.3.2 and Appendix D):
    1. the cooling effect needed, CEn: Fanger's PMV at still air with ta - CEn and
       tr - CEn equals the target (regula falsi on [0, 15] K, to 0.002 K or a PMV residual
       of 0.001);
    2. the SET that cooling effect stands for: SET(ta - CEn, tr - CEn, 0.1 m/s);
    3. the air speed whose SET equals it: SET is close to linear in log(speed), but not
       monotone in speed everywhere (the convective coefficient has a floor at low speeds),
       so a bracket from the two ends can miss a root: log-spaced speeds between still air
       and ``max_speed`` (:data:`SPEED_GRID_POINTS`) are scanned from the lowest, and regula
       falsi in log(speed) refines between the first pair that brackets the target (to
       0.005 in log speed or 0.01 K of SET).
    NaN where the space is not warmer than the target (no speed needed; the caller
    reports the current speed) or where even ``max_speed`` does not suffice. Still air
    where it already suffices. Compiled per space (core/comfort_kernels.py).
    """
    ta = np.asarray(air_c, dtype=np.float64)
    tr = np.asarray(mrt_c, dtype=np.float64)
    n = ta.shape[0]
    out = np.full(n, np.nan)
    still_pmv = pmv_fanger(ta, tr, np.full(n, STILL_AIR), rh, met, clo)
    warm = np.flatnonzero(np.isfinite(still_pmv) & (still_pmv > target_pmv))
    if warm.size == 0:
        return out
    from thermowarden.core import comfort_kernels

    tgt = np.broadcast_to(np.asarray(target_pmv, dtype=np.float64), (n,))[warm]
    grid = np.linspace(np.log(STILL_AIR), np.log(max_speed), SPEED_GRID_POINTS)
    with np.errstate(all="ignore"):
        out[warm] = comfort_kernels.air_speed_rows(
            ta[warm], tr[warm], np.asarray(rh)[warm], np.asarray(met)[warm],
            np.asarray(clo)[warm], tgt, grid, parallel=warm.size >= PARALLEL_FROM)
    return out
