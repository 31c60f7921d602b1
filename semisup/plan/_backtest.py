"""Backtest of a learning curve: refit without the largest budget and predict it.

This is the curve's own track record on the study: the same fit, bootstrap and extrapolation
widening the plan uses, judged on the one budget it did not see.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._errors import PlanError
from ._bootstrap import bootstrap_curve
from ._curves import MAX_EXTRAPOLATION

__all__ = ["Backtest", "backtest_curve"]


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
    n = np.asarray(n, dtype=float).ravel()
    metric = np.asarray(metric, dtype=float).ravel()
    repeat = np.asarray(repeat).ravel()
    keep = np.isfinite(metric)
    n, metric, repeat = n[keep], metric[keep], repeat[keep]
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
