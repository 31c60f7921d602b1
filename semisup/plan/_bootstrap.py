"""Bootstrap intervals for a learning curve, widened where it is extrapolated.

Resampling unit: the repeat. A study's draws are nested within a repeat (the budget-100 draw
contains the budget-50 draw), so whole repeats are drawn with replacement and every resample
is refitted in the form of the full fit (the power law for all resamples at once with
:func:`fit_power_law_batch`, or the monotone fallback). With a single repeat there is nothing
to resample, so the residuals of the full fit at each point are resampled instead (residual
bootstrap; Efron & Tibshirani 1993, section 9.5).

Beyond the largest measured budget the spread of the resampled curves around the point
estimate is multiplied by ``1 + log2(n / n_max)`` (2 at twice the largest budget, 3 at four
times): the bootstrap only knows the noise of the measured budgets, not how wrong the curve's
form may be further out (our own rule, common practice, no source).

All repeats are scored on the same holdout, so resampling repeats cannot see the holdout's own
sampling error. When its size is known, each resample adds one shared shift
``z * sqrt(p * (1 - p) / n_holdout)`` (z standard normal, p the predicted error rate): the
binomial standard error of a proportion measured on n_holdout rows. It is exact for accuracy
and an approximation for balanced accuracy and macro-F1.

Pure functions: arrays and a seed in, arrays out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._errors import PlanError
from ._curves import (
    CurveFit,
    budget_weights,
    fit_learning_curve,
    fit_power_law_batch,
    power_law,
)

__all__ = ["CurveBand", "bootstrap_curve", "extrapolation_factor", "probability_meets"]


def extrapolation_factor(n: np.ndarray, n_max: float) -> np.ndarray:
    """How much the interval widens at budget ``n``: 1 inside the measured range,
    ``1 + log2(n / n_max)`` beyond it."""
    n = np.asarray(n, dtype=float)
    return np.where(n > n_max, 1.0 + np.log2(np.maximum(n, n_max) / n_max), 1.0)


def probability_meets(samples: np.ndarray, threshold: float, *, higher_is_better: bool = True):
    """Share of bootstrap samples that meet ``threshold`` (along axis 0).

    For a higher-is-better metric a sample meets the target when it is ``>= threshold``.
    """
    samples = np.asarray(samples, dtype=float)
    hit = samples >= threshold if higher_is_better else samples <= threshold
    return hit.mean(axis=0)


@dataclass(frozen=True)
class CurveBand:
    """A fitted curve on a grid of budgets with bootstrap samples and an interval.

    All values are error rates (lower is better). ``samples`` has shape (n_boot, n_grid) and is
    already widened where ``extrapolated`` is true; ``low``/``high`` are its percentiles at
    ``interval`` coverage and always contain ``point``.
    """

    fit: CurveFit
    grid: np.ndarray
    point: np.ndarray
    samples: np.ndarray
    low: np.ndarray
    high: np.ndarray
    extrapolated: np.ndarray
    interval: float
    n_boot: int
    n_failed: int


def bootstrap_curve(
    n: np.ndarray,
    err: np.ndarray,
    repeat: np.ndarray,
    grid: np.ndarray,
    *,
    n_boot: int = 200,
    seed: int = 0,
    interval: float = 0.9,
    fit: CurveFit | None = None,
    holdout_rows: int | None = None,
) -> CurveBand:
    """Fit the curve to (``n``, ``err``) and bootstrap it over repeats on ``grid``.

    Parameters
    ----------
    n, err, repeat : arrays of shape (n_points,)
        Budget, error rate and repeat id of each measured cell.
    grid : array of budgets where the curve is evaluated (each at most 4x the largest
        measured budget, otherwise ``PlanError``).
    n_boot : number of bootstrap resamples.
    seed : seed of the resampling.
    interval : coverage of the reported interval (0.9 -> 5th to 95th percentile).
    fit : the full-data fit, if already made.
    holdout_rows : size of the holdout that measured every point; adds its sampling error.
    """
    n = np.asarray(n, dtype=float).ravel()
    err = np.asarray(err, dtype=float).ravel()
    repeat = np.asarray(repeat).ravel()
    grid = np.asarray(grid, dtype=float).ravel()
    if not (n.shape == err.shape == repeat.shape):
        raise PlanError("bootstrap needs one budget, error and repeat per measured cell")
    if not 0 < interval < 1:
        raise PlanError(f"interval must lie in (0, 1), got {interval}")
    if n_boot < 1:
        raise PlanError(f"n_boot must be at least 1, got {n_boot}")
    full = fit if fit is not None else fit_learning_curve(n, err)
    point = full.predict(grid)
    rng = np.random.default_rng(seed)
    reps = np.unique(repeat)
    if reps.size >= 2:
        picks = rng.choice(reps.size, size=(n_boot, reps.size), replace=True)
        # multiplicity of each repeat in each resample: (n_boot, n_repeats)
        mult = np.zeros((n_boot, reps.size))
        np.add.at(mult, (np.repeat(np.arange(n_boot), reps.size), picks.ravel()), 1.0)
        cell_mult = mult[:, np.searchsorted(reps, repeat)]          # (n_boot, n_points)
        err_b = np.broadcast_to(err, cell_mult.shape)
    else:
        resid = err - full.predict(n)
        noise = rng.choice(resid, size=(n_boot, n.size), replace=True)
        err_b = np.clip(full.predict(n)[None, :] + noise, 0.0, 1.0)
        cell_mult = np.ones((n_boot, n.size))
    n_failed = 0
    if full.kind == "power_law":
        levels = np.unique(n)
        onehot = (n[:, None] == levels[None, :]).astype(float)       # (n_points, n_levels)
        w = budget_weights(n)
        wb = cell_mult * w[None, :]
        w_lv = wb @ onehot
        mean_lv = (wb * err_b) @ onehot / np.where(w_lv > 0, w_lv, 1.0)
        params = fit_power_law_batch(levels, mean_lv, w_lv)
        samples = np.clip(power_law(grid[None, :], params[:, :1], params[:, 1:2],
                                    params[:, 2:3]), 0.0, 1.0)
    else:
        samples = np.empty((n_boot, grid.size))
        for i in range(n_boot):
            keep = cell_mult[i] > 0
            idx = np.repeat(np.flatnonzero(keep), cell_mult[i][keep].astype(int))
            try:
                samples[i] = fit_learning_curve(n[idx], err_b[i][idx], kind="monotone"
                                                ).predict(grid)
            except PlanError:
                samples[i] = point
                n_failed += 1
    factor = extrapolation_factor(grid, full.n_max)
    samples = point + factor * (samples - point)
    if holdout_rows:
        z = rng.standard_normal((n_boot, 1))
        samples = samples + z * np.sqrt(np.clip(point * (1 - point), 0, None) / holdout_rows)
    samples = np.clip(samples, 0.0, 1.0)
    tail = (1.0 - interval) / 2.0 * 100.0
    low = np.minimum(np.percentile(samples, tail, axis=0), point)
    high = np.maximum(np.percentile(samples, 100.0 - tail, axis=0), point)
    return CurveBand(full, grid, point, samples, low, high, full.extrapolated(grid), interval,
                     n_boot, n_failed)
