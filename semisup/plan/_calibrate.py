"""Calibration of the curve's extrapolation by the errors its backtests actually made.

Model. A rolling-origin forecast ``i`` (``_ensemble.BacktestRecord``) extrapolates by the
ratio ``r_i = n_i / origin_i``; write ``u_i = log2(r_i)`` (1 at twice the largest fitted
budget, 2 at four times). Its error ``e_i = measured - predicted`` (error-rate scale; on the
metric scale it is predicted - measured, positive when the forecast was optimistic) is
modelled as

    e_i ~ Normal(beta * u_i, v_i + kappa**2 * u_i**2),

where ``v_i`` is the variance the bootstrap already accounts for (the spread of the refits
plus the standard error of the measured mean), ``beta`` a systematic shift per doubling of
the budget and ``kappa`` the standard deviation per doubling that the bootstrap cannot see
(the curve's form being wrong further out). Both are pooled over every curve of the study.

Estimation is the Paule-Mandel method of random-effects meta-analysis (Paule & Mandel 1982;
DerSimonian & Kacker 2007), with ``u_i`` as the covariate of the mean and of the extra
variance: ``beta`` is the weighted least-squares slope for weights
``a_i / (v_i + kappa**2 u_i**2)``, and ``kappa**2`` the root of the generalised Q statistic
``sum a_i w_i (e_i - beta u_i)**2 = sum a_i - 1`` (0 when Q is already below it). With every
``u_i = 1`` and ``a_i = 1`` it is the usual Paule-Mandel estimate of tau**2 and the
random-effects mean.

The record weights ``a_i`` (``BacktestRecord.weight``) count a forecast from an origin near
the largest budget fully and one from the steep, small-budget part of the curve less
(halved per doubling below half the largest budget): the plan extrapolates from the top of
the curve, and backtests from 20 labels of 160 mostly describe the steep part. They act as
frequency weights (a record of weight 2 is two copies of it, so the estimate equals
Paule-Mandel on the replicated records), and the standard error of ``beta`` counts the
weighted records only.

A plan's curve at budget ``n`` (``u = log2(n / n_max)`` beyond the largest measured budget,
0 inside) is then shifted by ``beta * u`` and given the extra spread
``u * sqrt(kappa**2 + se(beta)**2)`` (one normal draw per bootstrap resample), so its
intervals and probabilities carry the track record. With fewer than ``MIN_RECORDS``
records (our own threshold, common practice, no source) the plan keeps the uncalibrated
widening of ``extrapolation_factor`` and says so.

Pure functions: arrays in, numbers out.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy.stats import norm

from ._bootstrap import extrapolation_factor
from ._ensemble import BacktestRecord

__all__ = [
    "MIN_RECORDS",
    "RATIO_BINS",
    "Calibration",
    "calibrate",
    "calibrated_samples",
    "paule_mandel",
    "ratio_table",
]

#: Fewest backtest records a calibration is made from.
MIN_RECORDS = 5
#: Extrapolation-ratio bins of the evidence table: (label, low exclusive, high inclusive).
RATIO_BINS = (("1-1.5x", 1.0, 1.5), ("1.5-2.5x", 1.5, 2.5), ("2.5-5x", 2.5, 5.0 + 1e-9))


@dataclass(frozen=True)
class Calibration:
    """Shift and extra spread per doubling beyond the largest measured budget.

    ``calibrated`` is False when there were too few records (then ``shift`` and ``sd`` are 0
    and the uncalibrated widening is used); ``reason`` says why.
    """

    shift_per_doubling: float
    shift_se: float
    sd_per_doubling: float
    n_records: int
    calibrated: bool
    reason: str = ""
    q_statistic: float = float("nan")
    extra: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {
            "calibrated": self.calibrated,
            "method": ("Paule-Mandel fit of rolling-origin backtest errors: error ~ "
                       "Normal(shift * u, bootstrap variance + (sd * u)^2), u = "
                       "log2(budget / largest budget fitted); a backtest from an origin "
                       "below half the largest measured budget counts half per doubling "
                       "further down"),
            # on the metric scale (higher is better): added to the metric per doubling
            "metric_shift_per_doubling": -self.shift_per_doubling,
            "shift_se": self.shift_se,
            "sd_per_doubling": self.sd_per_doubling,
            "n_backtests": self.n_records,
            "q_statistic": self.q_statistic,
            "reason": self.reason,
            **self.extra,
        }


def paule_mandel(e: np.ndarray, v: np.ndarray, u: np.ndarray | None = None, *,
                 a: np.ndarray | None = None, tol: float = 1e-12,
                 max_iter: int = 200) -> tuple[float, float, float, float]:
    """Paule-Mandel estimate for ``e_i ~ Normal(beta u_i, v_i + kappa2 u_i**2)``.

    Returns ``(beta, se_beta, kappa2, q0)`` where ``q0`` is the Q statistic at kappa2 = 0.
    ``u`` defaults to ones (the plain random-effects model of meta-analysis); ``a`` are
    frequency weights of the records (default ones).
    """
    e = np.asarray(e, dtype=float)
    v = np.maximum(np.asarray(v, dtype=float), 1e-12)
    u = np.ones_like(e) if u is None else np.asarray(u, dtype=float)
    a = np.ones_like(e) if a is None else np.asarray(a, dtype=float)
    k = float(np.sum(a))

    def slope(kappa2: float) -> tuple[float, float, float]:
        w = a / (v + kappa2 * u * u)
        beta = float(np.sum(w * u * e) / np.sum(w * u * u))
        q = float(np.sum(w * (e - beta * u) ** 2))
        return beta, q, float(np.sqrt(1.0 / np.sum(w * u * u)))

    beta, q0, se = slope(0.0)
    if k <= 1 or q0 <= k - 1:
        return beta, se, 0.0, q0
    lo, hi = 0.0, max(float(np.max((e - beta * u) ** 2 / np.maximum(u * u, 1e-12))), 1e-12)
    while slope(hi)[1] > k - 1:
        hi *= 2.0
    for _ in range(max_iter):
        mid = 0.5 * (lo + hi)
        if slope(mid)[1] > k - 1:
            lo = mid
        else:
            hi = mid
        if hi - lo <= tol * max(hi, 1e-300):
            break
    kappa2 = 0.5 * (lo + hi)
    beta, _, se = slope(kappa2)
    return beta, se, kappa2, q0


def _arrays(records: Sequence[BacktestRecord]):
    u = np.log2(np.array([r.ratio for r in records], dtype=float))
    e = np.array([r.measured - r.predicted for r in records], dtype=float)
    v = np.array([r.sd ** 2 + r.measured_se ** 2 for r in records], dtype=float)
    a = np.array([r.weight for r in records], dtype=float)
    return u, e, v, a


def calibrate(records: Sequence[BacktestRecord], *, min_records: int = MIN_RECORDS
              ) -> Calibration:
    """Shift and extra spread per doubling from the backtest records (pooled)."""
    records = [r for r in records if r.ratio > 1 and np.isfinite(r.measured - r.predicted)]
    if len(records) < min_records:
        return Calibration(0.0, 0.0, 0.0, len(records), False,
                           f"only {len(records)} backtest forecast(s) (at least {min_records} "
                           "needed); the uncalibrated widening 1 + log2(n / n_max) is used")
    u, e, v, a = _arrays(records)
    beta, se, kappa2, q0 = paule_mandel(e, v, u, a=a)
    return Calibration(beta, se, float(np.sqrt(kappa2)), len(records), True, "", q0,
                       {"weighted_backtests": float(np.sum(a))})


def calibrated_samples(point: np.ndarray, samples: np.ndarray, grid: np.ndarray, n_max: float,
                       cal: Calibration, rng: np.random.Generator, *,
                       spread_factor: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Bootstrap samples of error rates on ``grid`` with the calibration applied.

    Returns ``(point, samples)``: the shifted point curve and the samples around it (spread
    scaled by ``spread_factor``; beyond ``n_max`` shifted and widened per ``cal``, or by the
    uncalibrated widening when ``cal.calibrated`` is False). Not clipped.
    """
    grid = np.asarray(grid, dtype=float)
    point = np.asarray(point, dtype=float)
    dev = spread_factor * (np.asarray(samples, dtype=float) - point)
    if not cal.calibrated:
        return point, point + extrapolation_factor(grid, n_max) * dev
    u = np.log2(np.maximum(grid, n_max) / n_max)
    shifted = point + cal.shift_per_doubling * u
    extra = u * np.sqrt(cal.sd_per_doubling ** 2 + cal.shift_se ** 2)
    z = rng.standard_normal((dev.shape[0], 1))
    return shifted, shifted + dev + z * extra


def ratio_table(records: Sequence[BacktestRecord], cal: Calibration, interval: float
                ) -> list[dict]:
    """Backtest evidence per extrapolation-ratio bin, on the metric scale.

    Per bin: number of forecasts, mean error (predicted - measured metric; positive =
    optimistic), mean absolute error, and the share of measured values inside the stated
    interval of the bootstrap alone and after calibration (normal approximation of the bands;
    in-sample for the calibrated one, since the calibration was fitted to these records).
    """
    z = float(norm.ppf(0.5 + interval / 2.0))
    out = []
    if not records:
        return out
    u, e, v, a = _arrays(records)
    ratio = 2.0 ** u
    for label, lo, hi in RATIO_BINS:
        m = (ratio > lo) & (ratio <= hi)
        if not np.any(m):
            out.append({"ratio": label, "n": 0})
            continue
        row = {"ratio": label, "n": int(m.sum()),
               "mean_ratio": float(np.mean(ratio[m])),
               "mean_error": float(np.mean(e[m])), "mae": float(np.mean(np.abs(e[m]))),
               "weight": float(np.sum(a[m])),
               "covered_bootstrap_only": float(np.mean(np.abs(e[m]) <= z * np.sqrt(v[m])))}
        if cal.calibrated:
            cal_sd = np.sqrt(v[m] + (cal.sd_per_doubling ** 2 + cal.shift_se ** 2) * u[m] ** 2)
            resid = e[m] - cal.shift_per_doubling * u[m]
            row["covered_calibrated"] = float(np.mean(np.abs(resid) <= z * cal_sd))
            row["mean_error_after_shift"] = float(np.mean(resid))
        out.append(row)
    return out
