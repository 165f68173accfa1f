"""Peak discharge and the design hydrograph: the Rational method and the NRCS dimensionless
unit hydrograph convolved with the excess-rainfall hyetograph.

Rational method: Q = C·i·A; in SI Q [m³/s] = C·i [mm/h]·A [ha] / 360 (i the intensity for
a duration equal to Tc; Mulvany 1851, Kuichling 1889).

NRCS unit hydrograph (NEH 630 ch. 16): for a unit excess of duration ΔD, the time to peak
is Tp = ΔD/2 + L with L = 0.6·Tc (the lag of ch. 15), and the peak
qp = K·A·Q/Tp, K = 484 in US units (cfs, mi², in, h) or 0.208 in SI (m³/s, km², mm, h).
The shape is table 16-1 (t/Tp against q/qp). ΔD is chosen as about 0.2·Tp and never
above 0.25·Tp, i.e. ΔD ≈ 0.133·Tc (NEH 630 ch. 16). For peak rate factors other than 484
the shape is the gamma equation q/qp = [ (t/Tp)·e^(1 − t/Tp) ]^m with m chosen so that
the area under it matches K (NEH 630 ch. 16 describes these; form as remembered).

The discrete unit hydrograph is rescaled so that its volume equals exactly 1 mm over the
catchment (the interpolated table holds it to a fraction of a per cent); the factor is
reported as ``unit_hydrograph_volume_ratio``.

References
----------
USDA NRCS (2007). National Engineering Handbook Part 630 Hydrology, ch. 16 Hydrographs.
Mulvany, T. J. (1851). On the use of self-registering rain and flood gauges.
Proceedings of the Institution of Civil Engineers of Ireland 4:18-33.
Kuichling, E. (1889). Transactions ASCE 20:1-56.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from .tables import (DUH_Q_OVER_QP, DUH_T_OVER_TP, PEAK_RATE_FACTOR_US, US_TO_SI_PEAK_RATE)

__all__ = ["rational_peak_m3_per_s", "dimensionless_unit_hydrograph", "gamma_shape_for",
           "unit_hydrograph", "choose_time_step_h", "convolve_excess", "summarise_hydrograph",
           "RATIONAL_MAX_AREA_HA", "NICE_STEPS_MIN"]

#: The Rational method is commonly limited to small catchments (about 80 ha / 200 acres;
#: common practice, the limit varies between drainage manuals).
RATIONAL_MAX_AREA_HA = 80.0
#: Time steps offered for the convolution (minutes).
NICE_STEPS_MIN = (0.5, 1.0, 2.0, 3.0, 5.0, 6.0, 10.0, 12.0, 15.0, 20.0, 30.0, 60.0, 120.0)
# cfs for 1 in over 1 mi² in 1 h: 640 acres × 43560 ft² / 12 / 3600 s = 645.33…
_Q_PER_INCH_MI2_HOUR = 640 * 43560 / 12 / 3600


def rational_peak_m3_per_s(c, intensity_mm_per_h, area_m2):
    """Q = C·i·A in SI: C·(i/1000/3600 m/s)·A m² = C·i[mm/h]·A[ha]/360 m³/s."""
    return float(c) * float(intensity_mm_per_h) * float(area_m2) / 3.6e6


def _check_prf(peak_rate_factor):
    k = float(peak_rate_factor)
    if not (np.isfinite(k) and 100.0 <= k <= 645.0):
        raise InputError(f"the peak rate factor must lie between 100 and 645 (US units; "
                         f"484 is the standard), got {peak_rate_factor!r}")
    return k


def gamma_shape_for(peak_rate_factor: float) -> float:
    """The exponent m of q/qp = [x·e^(1−x)]^m whose area ∫ q/qp d(t/Tp) = 645.33/K,
    i.e. e^m·Γ(m+1)/m^(m+1) = 645.33/K."""
    from scipy.optimize import brentq

    target = math.log(_Q_PER_INCH_MI2_HOUR / _check_prf(peak_rate_factor))

    def f(m):
        return m + math.lgamma(m + 1.0) - (m + 1.0) * math.log(m) - target

    return float(brentq(f, 0.05, 500.0))


def dimensionless_unit_hydrograph(t_over_tp, peak_rate_factor=PEAK_RATE_FACTOR_US):
    """q/qp at t/Tp: NEH 630 ch. 16 table 16-1 (linear between its rows, 0 beyond t/Tp = 5)
    for K = 484; the gamma equation for any other K."""
    x = np.asarray(t_over_tp, dtype=np.float64)
    k = _check_prf(peak_rate_factor)
    if k == PEAK_RATE_FACTOR_US:
        return np.interp(x, DUH_T_OVER_TP, DUH_Q_OVER_QP, left=0.0, right=0.0)
    m = gamma_shape_for(k)
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.where(x > 0, np.exp(m * (np.log(np.maximum(x, 1e-300)) + 1.0 - x)), 0.0)
    return y


def choose_time_step_h(tc_h: float, step_min: float | None = None) -> float:
    """The convolution step ΔD: the largest of NICE_STEPS_MIN not above 0.133·Tc
    (ΔD ≈ 0.2·Tp, NEH 630 ch. 16), or the user's ``step_min``, which must keep
    ΔD ≤ 0.25·Tp."""
    tc = float(tc_h)
    if step_min is not None:
        dt = float(step_min) / 60.0
        tp = dt / 2.0 + 0.6 * tc
        if not (dt > 0 and dt <= 0.25 * tp + 1e-12):
            raise InputError(f"a time step of {float(step_min):g} min is too long for a time "
                             f"of concentration of {tc * 60:.1f} min: the unit hydrograph "
                             f"step must not exceed 0.25·Tp ({0.25 * tp * 60:.1f} min; NEH "
                             "630 ch. 16); leave it out or shorten it")
        return dt
    limit_min = 0.133 * tc * 60.0
    ok = [s for s in NICE_STEPS_MIN if s <= limit_min + 1e-9]
    return (ok[-1] if ok else limit_min) / 60.0


def unit_hydrograph(area_m2, tc_h, step_h, peak_rate_factor=PEAK_RATE_FACTOR_US):
    """Ordinates (m³/s per mm of excess) at t = 0, Δ, 2Δ, … of the NRCS unit hydrograph
    for an excess of 1 mm falling uniformly over ``step_h`` on ``area_m2``.

    Returns
    -------
    ordinates : ndarray
    info : dict
        ``time_to_peak_uh_h`` (Tp), ``lag_uh_h`` (0.6·Tc), ``peak_rate_factor_us``,
        ``peak_rate_factor_si``, ``unit_peak_m3_per_s_per_mm`` (qp for 1 mm) and
        ``unit_hydrograph_volume_ratio`` (discrete volume before rescaling ÷ 1 mm × A).
    """
    k = _check_prf(peak_rate_factor)
    lag = 0.6 * float(tc_h)
    tp = step_h / 2.0 + lag
    area_km2 = float(area_m2) / 1e6
    k_si = k * US_TO_SI_PEAK_RATE
    qp = k_si * area_km2 * 1.0 / tp
    if k == PEAK_RATE_FACTOR_US:
        tmax = 5.0 * tp
    else:  # the gamma tail: until it falls below 1e-7 of the peak
        x = np.linspace(1.0, 200.0, 20000)
        tail = dimensionless_unit_hydrograph(x, k) < 1e-7
        tmax = float(x[np.argmax(tail)] if tail.any() else 200.0) * tp
    n = int(np.ceil(tmax / step_h)) + 1
    t = np.arange(n + 1) * step_h
    q = qp * dimensionless_unit_hydrograph(t / tp, k)
    vol = float(q.sum() * step_h * 3600.0)
    target = 1e-3 * float(area_m2)
    ratio = vol / target
    q = q / ratio
    while q.size > 1 and q[-1] == 0.0 and q[-2] == 0.0:
        q = q[:-1]
    return q, {"time_to_peak_uh_h": tp, "lag_uh_h": lag, "peak_rate_factor_us": k,
               "peak_rate_factor_si": k_si, "unit_peak_m3_per_s_per_mm": qp,
               "unit_hydrograph_volume_ratio": ratio}


def convolve_excess(excess_mm, uh):
    """Direct-runoff hydrograph (m³/s at t = 0, Δ, 2Δ, …): Σ_k e_k·U_{n−k}, with e_k the
    excess (mm) in step [kΔ, (k+1)Δ) and U the unit hydrograph for one step."""
    e = np.asarray(excess_mm, dtype=np.float64)
    return np.convolve(e, np.asarray(uh, dtype=np.float64))


def summarise_hydrograph(time_h, direct_m3_per_s, rain_mm, excess_mm, step_h,
                         base_flow_m3_per_s=0.0) -> dict:
    """Peak, time to peak, lags and volume of a hydrograph at steps of ``step_h``.

    Each step's rain and excess count at the step's middle. Lags:

    - ``lag_h``: from the centroid of the rainfall to the peak;
    - ``lag_excess_centroid_to_peak_h``: from the centroid of the excess rainfall to the
      peak (the NRCS definition of lag, NEH 630 ch. 15-16; for a short burst it is
      0.6·Tc, but for a long storm whose excess goes on after the peak it can be small or
      negative);
    - ``centroid_lag_h``: from the centroid of the excess to the centroid of the direct
      runoff (always positive; the centroid lag of the unit hydrograph).
    """
    q = np.asarray(direct_m3_per_s, dtype=np.float64)
    t = np.asarray(time_h, dtype=np.float64)
    k = int(np.argmax(q))
    rain = np.asarray(rain_mm, dtype=np.float64)
    ex = np.asarray(excess_mm, dtype=np.float64)
    mids = (np.arange(max(rain.size, ex.size)) + 0.5) * step_h

    def centroid(w, x):
        return float(np.sum(w * x[:w.size]) / w.sum()) if w.sum() > 0 else np.nan

    c_rain, c_ex, c_q = centroid(rain, mids), centroid(ex, mids), centroid(q, t)
    vol = float(q.sum() * step_h * 3600.0)
    return {"peak_discharge_m3_per_s": float(q[k] + base_flow_m3_per_s),
            "direct_runoff_peak_m3_per_s": float(q[k]),
            "time_to_peak_h": float(t[k]),
            "rain_centroid_h": c_rain, "excess_centroid_h": c_ex,
            "lag_h": float(t[k] - c_rain),
            "lag_excess_centroid_to_peak_h": float(t[k] - c_ex),
            "centroid_lag_h": float(c_q - c_ex),
            "hydrograph_volume_m3": vol}
