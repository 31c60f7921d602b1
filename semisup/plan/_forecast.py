"""One curve's forecast: family fits, their backtests, the weighted curve and its band.

The plan runs this in two passes over the curves of its metric: first every curve's
rolling-origin backtests (:func:`prepare_curve`), then, with the family errors pooled and the
calibration fitted over all curves, each curve's weighted, calibrated band
(:func:`forecast_band`). Pure: arrays and seeds in, arrays out.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from ._backtest import OriginForecast, rolling_origin
from ._bootstrap import (
    CurveBand,
    band_from_samples,
    bootstrap_curve,
    draw_resamples,
    eval_noise,
    family_samples,
    small_sample_factor,
)
from ._calibrate import Calibration, calibrated_samples
from ._curves import (
    CurveFit,
    budget_weights,
    fit_learning_curve,
    min_levels,
    residual_vs_limit,
)
from ._ensemble import combine, family_errors, family_weights
from ._families import FAMILIES

__all__ = ["CurveModel", "MixedFit", "forecast_band", "prepare_curve", "weigh_curve"]

N_BOOT_BACKTEST = 50


@dataclass(frozen=True)
class MixedFit:
    """The weighted curve of several fitted families (what a ``CurveBand`` holds as fit).

    ``kind`` names the family with the largest weight; ``weights`` has them all.
    """

    fits: dict[str, CurveFit]
    weights: dict[str, float]
    n_min: float
    n_max: float
    rmse: float
    flagged: bool = False
    reason: str = ""

    @property
    def kind(self) -> str:
        return max(self.weights, key=lambda f: self.weights[f])

    def predict(self, n, *, allow_beyond: bool = False) -> np.ndarray:
        pts = {f: self.fits[f].predict(n, allow_beyond=allow_beyond) for f in self.weights}
        return np.clip(combine(pts, None, self.weights)[0], 0.0, 1.0)

    def extrapolated(self, n) -> np.ndarray:
        return np.atleast_1d(np.asarray(n, dtype=float)) > self.n_max * (1 + 1e-9)


@dataclass
class CurveModel:
    """A curve's data, its family fits and backtests, and (after :func:`weigh_curve`) the
    family weights."""

    n: np.ndarray
    err: np.ndarray
    repeat: np.ndarray
    fits: dict[str, CurveFit]
    origins: list[OriginForecast]
    errors: dict[str, np.ndarray]
    n_repeats: int
    weights: dict[str, float] = field(default_factory=dict)
    mse: dict[str, float] = field(default_factory=dict)
    fit: CurveFit | MixedFit | None = None

    @property
    def levels(self) -> np.ndarray:
        return np.unique(self.n)


def prepare_curve(n: np.ndarray, err: np.ndarray, repeat: np.ndarray, *, seed: int,
                  backtest: bool = True, n_boot: int = N_BOOT_BACKTEST) -> CurveModel:
    """Fit every family that has enough budgets and run its rolling-origin backtests."""
    n = np.asarray(n, dtype=float)
    err = np.asarray(err, dtype=float)
    repeat = np.asarray(repeat)
    levels = np.unique(n)
    fits = {f: fit_learning_curve(n, err, kind=f) for f in FAMILIES
            if min_levels(f) <= levels.size}
    origins = (rolling_origin(n, err, repeat, families=tuple(fits), n_boot=n_boot, seed=seed)
               if backtest and fits else [])
    return CurveModel(n, err, repeat, fits, origins, family_errors(origins),
                      int(np.unique(repeat).size))


def _poor_fit_limit(n: np.ndarray, err: np.ndarray, poor_rmse: float) -> float:
    """The tolerance of ``fit_learning_curve``'s poor-fit rule for these cells."""
    levels = np.unique(n)
    sds = np.array([err[n == v].std(ddof=1) if (n == v).sum() > 1 else np.nan for v in levels])
    counts = np.array([(n == v).sum() for v in levels])
    se = (sds / np.sqrt(counts))
    se = se[np.isfinite(se)]
    return max(poor_rmse, 2.0 * float(np.median(se))) if se.size else poor_rmse


def weigh_curve(model: CurveModel, pooled: Mapping[str, tuple[float, int]], *,
                poor_rmse: float = 0.02) -> CurveModel:
    """Set the family weights (own backtests shrunk toward the pooled ones) and the fit.

    A curve without backtests of its own takes the pooled errors of the families it can fit;
    without those, the power law alone. When the weighted curve fits the measured means
    poorly (the rule of ``fit_learning_curve``) or no family can be fitted, the fit is the
    flagged monotone fallback.
    """
    n, err = model.n, model.err
    if not model.fits:
        model.fit = fit_learning_curve(n, err)  # the fallback with its reason
        return model
    errors = {f: e for f, e in model.errors.items() if f in model.fits}
    if any(e.size for e in errors.values()):
        weights, mse = family_weights(errors, pooled)
    else:
        avail = {f: pooled[f] for f in model.fits if f in pooled}
        if avail:
            weights, mse = family_weights({f: np.array([v[0]]) for f, v in avail.items()})
        else:
            weights, mse = {"power_law": 1.0}, {}
    model.weights, model.mse = weights, mse
    levels = model.levels
    w = budget_weights(n)
    means = np.array([err[n == v].mean() for v in levels])
    wsum = np.array([w[n == v].sum() for v in levels])
    mixed = MixedFit({f: model.fits[f] for f in weights}, weights, float(levels[0]),
                     float(levels[-1]), 0.0)
    fitted = mixed.predict(levels)
    rmse = float(np.sqrt(np.average((fitted - means) ** 2, weights=wsum)))
    limit = _poor_fit_limit(n, err, poor_rmse)
    if rmse > limit:
        fb = fit_learning_curve(n, err, kind="monotone")
        model.fit = CurveFit(fb.kind, fb.params, True,
                             f"the weighted curve fits poorly ({residual_vs_limit(rmse, limit)})",
                             fb.n_min, fb.n_max, fb.rmse, fb.knots_n,
                             fb.knots_err)
        return model
    model.fit = MixedFit(mixed.fits, weights, mixed.n_min, mixed.n_max, rmse)
    return model


def forecast_band(model: CurveModel, grid: np.ndarray, cal: Calibration, *, n_boot: int,
                  seed: int, interval: float, eval_rows: float | None,
                  eval_floor_rows: int | None = None) -> tuple[CurveBand, np.ndarray]:
    """The weighted, calibrated band of a weighed curve on ``grid``.

    ``eval_rows``: size of an evaluation set shared by every repeat (its binomial error is
    added). ``eval_floor_rows``: under cross-fitting, the labeled rows evaluated in all; the
    spread over a handful of folds is a downward-biased estimate of the evaluation error of
    their mean (Bengio & Grandvalet 2004, "No unbiased estimator of the variance of K-fold
    cross-validation"), so where the band's variance is below the binomial
    ``p (1 - p) / eval_floor_rows`` the difference is added as one shared shift per resample
    (a floor, not a second copy of the evaluation error).

    Returns ``(band, own_var)``: the band (error rates) and, per grid budget, the variance of
    the samples without the shared evaluation noise (what the method's own uncertainty is,
    used against the winner's curse).
    """
    fit = model.fit
    grid = np.asarray(grid, dtype=float)
    rng = np.random.default_rng(seed)
    if not isinstance(fit, MixedFit):  # monotone fallback: uncalibrated, flat beyond
        band = bootstrap_curve(model.n, model.err, model.repeat, grid, n_boot=n_boot,
                               seed=seed, interval=interval, fit=fit, holdout_rows=eval_rows)
        return band, np.var(band.samples, axis=0)
    res = draw_resamples(model.repeat, n_boot, rng)
    points, samples = {}, {}
    for f in fit.weights:
        points[f] = model.fits[f].predict(grid)
        samples[f] = family_samples(model.fits[f], model.n, model.err, grid, res)[0]
    point, samp = combine(points, samples, fit.weights)
    factor = small_sample_factor(model.n_repeats, interval)
    point, samp = calibrated_samples(point, samp, grid, fit.n_max, cal, rng,
                                     spread_factor=factor)
    own_var = np.var(samp, axis=0)
    samp = samp + eval_noise(point, eval_rows, n_boot, rng)
    if eval_floor_rows:
        p = np.clip(point, 0.0, 1.0)
        short = p * (1 - p) / eval_floor_rows - np.var(samp, axis=0)
        samp = samp + rng.standard_normal((n_boot, 1)) * np.sqrt(np.clip(short, 0.0, None))
    point = np.clip(point, 0.0, 1.0)
    return band_from_samples(fit, grid, point, samp, interval), own_var
