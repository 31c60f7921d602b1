"""Backtests of a learning curve: its own track record on the study.

- :func:`rolling_origin` is the rolling-origin evaluation of forecasting (Tashman 2000,
  "Out-of-sample tests of forecasting accuracy"): for every origin k (the first k measured
  budgets, k at least the family's parameter count and 3), refit each curve family on those
  budgets only, with the same bootstrap over repeats, and predict every later measured
  budget up to ``BACKTEST_RATIO`` times the origin. Each prediction is one record of
  (extrapolation ratio, predicted, measured); the plan weights the families and calibrates
  its intervals on these records.
- :func:`backtest_curve` is the single leave-the-largest-budget-out check of one curve.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._errors import PlanError
from ._bootstrap import bootstrap_curve, draw_resamples, family_samples
from ._curves import MAX_EXTRAPOLATION, fit_learning_curve, min_levels
from ._families import FAMILIES

__all__ = ["BACKTEST_RATIO", "Backtest", "OriginForecast", "backtest_curve", "rolling_origin"]

#: Furthest a backtest forecast reaches (target / origin): a little beyond the plan's own
#: limit, because budget grids are rounded (a doubling grid from 4 gives 4, 8, 17, 34, 69,
#: 140, so four doublings are 4.1x) and the 4x forecasts need a track record too.
BACKTEST_RATIO = 1.25 * MAX_EXTRAPOLATION


@dataclass(frozen=True)
class Backtest:
    """Predicted against measured metric at the largest budget (higher is better).

    ``error`` is predicted mean minus measured mean; ``covered`` says whether the interval
    held the measured mean. When no backtest was possible, ``reason`` says why and the
    numbers are NaN.
    """

    n_labels: int
    mean: float
    low: float
    high: float
    measured: float
    covered: bool | None
    error: float
    fit: str = ""
    reason: str = ""

    def to_dict(self) -> dict:
        def num(v: float) -> float | None:
            return None if not np.isfinite(v) else float(v)

        return {
            "n_labels": int(self.n_labels),
            "predicted": {"mean": num(self.mean), "low": num(self.low), "high": num(self.high)},
            "measured": num(self.measured),
            "covered": self.covered,
            "error": num(self.error),
            "fit": self.fit,
            "reason": self.reason,
        }


def _finite_cells(n, values, repeat):
    """Flat float budgets and values and the repeat ids of the cells with a finite value."""
    n = np.asarray(n, dtype=float).ravel()
    values = np.asarray(values, dtype=float).ravel()
    repeat = np.asarray(repeat).ravel()
    keep = np.isfinite(values)
    return n[keep], values[keep], repeat[keep]


def backtest_curve(
    n: np.ndarray,
    metric: np.ndarray,
    repeat: np.ndarray,
    *,
    n_boot: int = 200,
    seed: int = 0,
    interval: float = 0.9,
) -> Backtest:
    """Refit the curve of a higher-is-better ``metric`` without its largest budget, predict
    that budget, and compare with the measured mean there."""
    n, metric, repeat = _finite_cells(n, metric, repeat)
    levels = np.unique(n)
    nan = float("nan")
    if levels.size < 3:
        last = int(levels[-1]) if levels.size else 0
        return Backtest(last, nan, nan, nan, nan, None, nan,
                        reason=f"needs at least 3 measured budgets, found {levels.size}")
    largest, previous = float(levels[-1]), float(levels[-2])
    measured = float(metric[n == largest].mean())
    if largest > MAX_EXTRAPOLATION * previous:
        return Backtest(int(largest), nan, nan, nan, measured, None, nan,
                        reason=f"the largest budget {largest:g} is more than "
                               f"{MAX_EXTRAPOLATION:g}x the next one ({previous:g})")
    train = n < largest
    try:
        band = bootstrap_curve(n[train], 1.0 - metric[train], repeat[train],
                               np.array([largest]), n_boot=n_boot, seed=seed,
                               interval=interval)
    except PlanError as exc:
        return Backtest(int(largest), nan, nan, nan, measured, None, nan, reason=str(exc))
    mean = float(1.0 - band.point[0])
    low, high = float(1.0 - band.high[0]), float(1.0 - band.low[0])
    covered = bool(low - 1e-9 <= measured <= high + 1e-9)
    return Backtest(int(largest), mean, low, high, measured, covered, mean - measured,
                    fit=band.fit.kind)


@dataclass(frozen=True)
class OriginForecast:
    """Forecasts of the later budgets from one origin, per family (error rates).

    ``origin`` is the largest budget fitted; ``targets`` the later measured budgets
    predicted (at most ``BACKTEST_RATIO`` times ``origin``); ``measured`` their mean error
    over repeats and ``measured_se`` its standard error (sd / sqrt(repeats); NaN with one
    repeat); ``points[family]`` the fitted curve at ``targets`` and ``samples[family]`` its
    bootstrap refits there, shape (n_boot, n_targets); ``n_repeats`` the repeats fitted.
    """

    origin: float
    targets: np.ndarray
    measured: np.ndarray
    measured_se: np.ndarray
    points: dict[str, np.ndarray]
    samples: dict[str, np.ndarray]
    n_repeats: int

    @property
    def ratios(self) -> np.ndarray:
        return self.targets / self.origin


def rolling_origin(
    n: np.ndarray,
    err: np.ndarray,
    repeat: np.ndarray,
    *,
    families: tuple[str, ...] = tuple(FAMILIES),
    n_boot: int = 50,
    seed: int = 0,
    max_ratio: float = BACKTEST_RATIO,
) -> list[OriginForecast]:
    """Rolling-origin forecasts of a curve's error rates by every family.

    Parameters
    ----------
    n, err, repeat : arrays of shape (n_points,)
        Budget, error rate and repeat id of each measured cell.
    families : names in ``FAMILIES`` to refit.
    n_boot : bootstrap resamples per origin (shared by the families).
    seed : seed of the resampling.
    max_ratio : largest target / origin ratio predicted.

    Returns
    -------
    list of :class:`OriginForecast`, smallest origin first; an origin with no later budget in
    reach, or where no family has enough budgets, is left out.
    """
    n, err, repeat = _finite_cells(n, err, repeat)
    levels = np.unique(n)
    rng = np.random.default_rng(seed)
    out = []
    for k in range(3, levels.size):
        origin = float(levels[k - 1])
        targets = levels[k:][levels[k:] <= max_ratio * origin * (1 + 1e-9)]
        usable = [f for f in families if min_levels(f) <= k]
        if targets.size == 0 or not usable:
            continue
        train = n <= origin
        res = draw_resamples(repeat[train], n_boot, rng)
        points, samples = {}, {}
        for fam in usable:
            fit = fit_learning_curve(n[train], err[train], kind=fam)
            points[fam] = fit.predict(targets, allow_beyond=True)
            samples[fam] = family_samples(fit, n[train], err[train], targets, res)[0]
        measured = np.array([err[n == t].mean() for t in targets])
        counts = np.array([(n == t).sum() for t in targets])
        sds = np.array([err[n == t].std(ddof=1) if c > 1 else np.nan
                        for t, c in zip(targets, counts, strict=True)])
        out.append(OriginForecast(origin, targets, measured, sds / np.sqrt(counts), points,
                                  samples, res.n_repeats))
    return out
