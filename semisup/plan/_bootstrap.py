"""Bootstrap samples of a learning curve, and the bands and probabilities drawn from them.

Resampling unit: the repeat. A study's draws are nested within a repeat (the budget-100 draw
contains the budget-50 draw), so whole repeats are drawn with replacement and every resample
is refitted in the form of the full fit (every family for all resamples at once with
:func:`fit_family_batch`, or the monotone fallback). With a single repeat there is nothing
to resample, so the residuals of the full fit at each point are resampled instead (residual
bootstrap; Efron & Tibshirani 1993, section 9.5). :func:`draw_resamples` draws the resamples
once so that several families can be refitted on the very same ones and averaged.

A percentile interval of a mean over R repeats is too narrow for small R (it ignores the
(R-1)/R bias of the plug-in variance and uses normal rather than Student-t tails), so
:func:`small_sample_factor` scales the spread of the resampled curves by
``t_{R-1}(q) / z(q) * sqrt(R / (R - 1))``: with it, the band of a plain mean equals the
Student-t interval of that mean.

The legacy :func:`bootstrap_curve` widens the spread beyond the largest measured budget by
``1 + log2(n / n_max)`` (our own rule, common practice, no source); the plan replaces that
rule by the calibration of ``_calibrate`` when the study has enough backtests.

When every repeat is scored on the same evaluation rows (a fixed holdout or a test file),
resampling repeats cannot see those rows' own sampling error. When their number is known,
each resample adds one shared shift ``z * sqrt(p * (1 - p) / n_eval)`` (z standard normal, p
the predicted error rate): the binomial standard error of a proportion measured on n_eval
rows. It is exact for accuracy and an approximation for balanced accuracy and macro-F1.

Pure functions: arrays and a seed in, arrays out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm
from scipy.stats import t as student_t

from .._errors import PlanError
from ._curves import CurveFit, budget_weights, fit_learning_curve
from ._families import FAMILIES, fit_family_batch

__all__ = [
    "CurveBand",
    "Resamples",
    "band_from_samples",
    "bootstrap_curve",
    "draw_resamples",
    "eval_noise",
    "extrapolation_factor",
    "family_samples",
    "probability_meets",
    "small_sample_factor",
]


def extrapolation_factor(n: np.ndarray, n_max: float) -> np.ndarray:
    """How much the legacy interval widens at budget ``n``: 1 inside the measured range,
    ``1 + log2(n / n_max)`` beyond it."""
    n = np.asarray(n, dtype=float)
    return np.where(n > n_max, 1.0 + np.log2(np.maximum(n, n_max) / n_max), 1.0)


def small_sample_factor(n_repeats: int, interval: float) -> float:
    """Spread multiplier that turns the bootstrap percentile band of a mean over
    ``n_repeats`` repeats into its Student-t interval; 1 for fewer than two repeats."""
    if n_repeats < 2:
        return 1.0
    q = 0.5 + interval / 2.0
    return float(student_t.ppf(q, n_repeats - 1) / norm.ppf(q)
                 * np.sqrt(n_repeats / (n_repeats - 1)))


def probability_meets(samples: np.ndarray, threshold: float, *, higher_is_better: bool = True):
    """Share of bootstrap samples that meet ``threshold`` (along axis 0).

    For a higher-is-better metric a sample meets the target when it is ``>= threshold``.
    """
    samples = np.asarray(samples, dtype=float)
    hit = samples >= threshold if higher_is_better else samples <= threshold
    return hit.mean(axis=0)


@dataclass(frozen=True)
class Resamples:
    """Bootstrap resamples of a curve's cells, shared by every family refitted on them.

    ``mult`` (n_boot, n_points) is how often each cell enters each resample (whole repeats);
    with a single repeat it is all ones and ``resid_idx`` (n_boot, n_points) says which
    residual each cell gets instead (residual bootstrap).
    """

    mult: np.ndarray
    resid_idx: np.ndarray | None
    n_repeats: int

    @property
    def n_boot(self) -> int:
        return int(self.mult.shape[0])


def draw_resamples(repeat: np.ndarray, n_boot: int, rng: np.random.Generator) -> Resamples:
    """Resample whole repeats with replacement (or residuals, with a single repeat)."""
    repeat = np.asarray(repeat).ravel()
    if n_boot < 1:
        raise PlanError(f"n_boot must be at least 1, got {n_boot}")
    reps = np.unique(repeat)
    if reps.size >= 2:
        picks = rng.choice(reps.size, size=(n_boot, reps.size), replace=True)
        mult = np.zeros((n_boot, reps.size))
        np.add.at(mult, (np.repeat(np.arange(n_boot), reps.size), picks.ravel()), 1.0)
        return Resamples(mult[:, np.searchsorted(reps, repeat)], None, int(reps.size))
    idx = rng.integers(0, repeat.size, size=(n_boot, repeat.size))
    return Resamples(np.ones((n_boot, repeat.size)), idx, 1)


def family_samples(fit: CurveFit, n: np.ndarray, err: np.ndarray, grid: np.ndarray,
                   res: Resamples) -> tuple[np.ndarray, int]:
    """Refit ``fit``'s form on every resample and evaluate it on ``grid``.

    Returns ``(samples, n_failed)``: error rates of shape (n_boot, n_grid), unclipped
    deviations kept (the caller clips), and how many monotone refits failed (those repeat
    the point estimate).
    """
    n = np.asarray(n, dtype=float).ravel()
    err = np.asarray(err, dtype=float).ravel()
    grid = np.asarray(grid, dtype=float).ravel()
    point = fit.predict(grid, allow_beyond=True)
    if res.resid_idx is not None:
        fitted = fit.predict(n)
        err_b = np.clip(fitted[None, :] + (err - fitted)[res.resid_idx], 0.0, 1.0)
    else:
        err_b = np.broadcast_to(err, res.mult.shape)
    n_failed = 0
    if fit.kind in FAMILIES:
        levels = np.unique(n)
        onehot = (n[:, None] == levels[None, :]).astype(float)       # (n_points, n_levels)
        wb = res.mult * budget_weights(n)[None, :]
        w_lv = wb @ onehot
        mean_lv = (wb * err_b) @ onehot / np.where(w_lv > 0, w_lv, 1.0)
        params = fit_family_batch(fit.kind, levels, mean_lv, w_lv)
        samples = np.clip(FAMILIES[fit.kind].predict(grid, params), 0.0, 1.0)
    else:
        samples = np.empty((res.n_boot, grid.size))
        for i in range(res.n_boot):
            keep = res.mult[i] > 0
            idx = np.repeat(np.flatnonzero(keep), res.mult[i][keep].astype(int))
            try:
                samples[i] = fit_learning_curve(n[idx], err_b[i][idx], kind="monotone"
                                                ).predict(grid, allow_beyond=True)
            except PlanError:
                samples[i] = point
                n_failed += 1
    return samples, n_failed


def eval_noise(point: np.ndarray, n_eval: int | None, n_boot: int,
               rng: np.random.Generator) -> np.ndarray:
    """One shared binomial shift per resample for error rates ``point`` measured on
    ``n_eval`` rows (zeros when ``n_eval`` is None or 0); shape (n_boot, len(point))."""
    point = np.asarray(point, dtype=float)
    if not n_eval:
        return np.zeros((n_boot, point.size))
    z = rng.standard_normal((n_boot, 1))
    return z * np.sqrt(np.clip(point * (1 - point), 0, None) / n_eval)


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


def band_from_samples(fit: CurveFit, grid: np.ndarray, point: np.ndarray, samples: np.ndarray,
                      interval: float, n_failed: int = 0) -> CurveBand:
    """Clip ``samples`` to [0, 1] and take their percentiles at ``interval`` coverage."""
    samples = np.clip(samples, 0.0, 1.0)
    tail = (1.0 - interval) / 2.0 * 100.0
    low = np.minimum(np.percentile(samples, tail, axis=0), point)
    high = np.maximum(np.percentile(samples, 100.0 - tail, axis=0), point)
    return CurveBand(fit, grid, point, samples, low, high, fit.extrapolated(grid), interval,
                     samples.shape[0], n_failed)


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
    """Fit one curve to (``n``, ``err``) and bootstrap it over repeats on ``grid``, widened
    beyond the largest budget by :func:`extrapolation_factor` (not calibrated).

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
    holdout_rows : size of the shared evaluation set that measured every point; adds its
        sampling error.
    """
    n = np.asarray(n, dtype=float).ravel()
    err = np.asarray(err, dtype=float).ravel()
    repeat = np.asarray(repeat).ravel()
    grid = np.asarray(grid, dtype=float).ravel()
    if not (n.shape == err.shape == repeat.shape):
        raise PlanError("bootstrap needs one budget, error and repeat per measured cell")
    if not 0 < interval < 1:
        raise PlanError(f"interval must lie in (0, 1), got {interval}")
    full = fit if fit is not None else fit_learning_curve(n, err)
    point = full.predict(grid)
    rng = np.random.default_rng(seed)
    res = draw_resamples(repeat, n_boot, rng)
    samples, n_failed = family_samples(full, n, err, grid, res)
    factor = extrapolation_factor(grid, full.n_max)
    samples = point + factor * (samples - point) + eval_noise(point, holdout_rows, n_boot, rng)
    return band_from_samples(full, grid, point, samples, interval, n_failed)
