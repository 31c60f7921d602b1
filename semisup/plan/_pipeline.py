"""Every curve of a study, forecast together: backtests, family weights, calibration, bands,
shrinkage against the winner's curse, options and the evidence the plan states.

Order (all curves of the plan's metric at once, because the family errors and the
calibration are pooled over them):

1. per (method, strategy): fit every family, rolling-origin backtests (``_forecast``);
2. pool the family errors, weigh each curve's families (``_ensemble``);
3. fit the calibration to the weighted curves' backtest records (``_calibrate``);
4. per curve: the weighted, calibrated band on the budget grid; the shared evaluation
   set's binomial error is added only when every repeat was scored on the same rows;
5. per strategy and budget: shrink the methods' predictions toward their mean (``_honest``);
6. options of each curve (``_choose``).

Under cross-fitting the band's variance is floored at the binomial error of the evaluated
rows (see ``forecast_band``).

The report-only metrics reuse the family weights and the calibration of the plan's metric
for the same curve (their backtests would cost as much again and the metrics move
together).

Pure: a cells table and numbers in, records out.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.stats import norm

from .._seeding import derive_seed
from ._bootstrap import CurveBand, band_from_samples, small_sample_factor
from ._calibrate import Calibration, calibrate, calibrated_samples, ratio_table
from ._choose import Option, budget_grid, curve_options
from ._continuation import (
    Z90,
    ContinuationPrior,
    continue_curve,
    decision_discount,
    load_prior,
    summarize_curve,
)
from ._curves import MAX_EXTRAPOLATION
from ._ensemble import combine, ensemble_records, pool_errors
from ._forecast import CurveModel, forecast_band, prepare_curve, weigh_curve
from ._honest import shrink_toward_mean

__all__ = ["SHOW_MULTIPLES", "Forecasts", "forecast_all"]

#: Multiples of the largest measured budget every curve lists as options.
SHOW_MULTIPLES = (1.5, 2, 3, 4)


@dataclass
class Forecasts:
    """What :func:`forecast_all` returns."""

    bands: dict[tuple[str, str, str], CurveBand]
    models: dict[tuple[str, str], CurveModel]
    calibration: Calibration
    options: list[Option]
    records: list[dict]
    by_ratio: list[dict]
    curve_models: list[dict]
    backtest: list[dict]
    displays: dict[tuple[str, str, str], np.ndarray] = field(default_factory=dict)
    shrinkage: dict[tuple[str, str], dict[int, float]] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    #: per (method, strategy, metric) continued by the corpus prior: its level and slope
    continued: dict[tuple[str, str, str], dict] = field(default_factory=dict)
    #: the prior of the plan's metric (None when the fitted families extrapolate)
    prior: ContinuationPrior | None = None
    #: the plan's metric
    metric: str = ""
    #: per (method, strategy) of the plan's metric: what the stated probability of each grid
    #: budget subtracts from the samples (the prior's decision margin; 0 where measured)
    discounts: dict[tuple[str, str], np.ndarray] = field(default_factory=dict)


def _grid(levels: np.ndarray, extra: Iterable[float]) -> tuple[np.ndarray, np.ndarray]:
    limit = MAX_EXTRAPOLATION * levels[-1]
    display = np.unique(np.concatenate([np.round(np.geomspace(levels[0], limit, 40)), levels]))
    shown = [round(levels[-1] * f) for f in SHOW_MULTIPLES]
    return budget_grid(levels, limit, extra=[*display, *shown, *extra]), display


def _last_backtest(model: CurveModel, cal: Calibration, interval: float, seed: int) -> dict:
    """Leave the largest budget out: the weighted, calibrated forecast of it."""
    levels = model.levels
    base = {"n_labels": int(levels[-1]) if levels.size else 0, "fit": "", "reason": "",
            "predicted": {"mean": None, "low": None, "high": None}, "measured": None,
            "covered": None, "error": None}
    last = [o for o in model.origins if levels.size >= 2 and o.origin == levels[-2]]
    if not last or levels[-1] not in last[0].targets or not model.weights:
        base["reason"] = ("needs at least 4 measured budgets, the largest at most "
                          f"{MAX_EXTRAPOLATION:g}x the next one")
        if levels.size:
            base["measured"] = float(1 - model.err[model.n == levels[-1]].mean())
        return base
    o = last[0]
    j = int(np.flatnonzero(o.targets == levels[-1])[0])
    point, samp = combine(o.points, o.samples, model.weights)
    rng = np.random.default_rng(seed)
    point, samp = calibrated_samples(point[j:j + 1], samp[:, j:j + 1], o.targets[j:j + 1],
                                     o.origin, cal, rng,
                                     spread_factor=small_sample_factor(o.n_repeats, interval))
    # An error rate lives in [0, 1]; the calibrated shift and spread are not clipped.
    point, samp = np.clip(point, 0.0, 1.0), np.clip(samp, 0.0, 1.0)
    tail = (1 - interval) / 2 * 100
    low_e = min(float(np.percentile(samp, tail)), float(point[0]))
    high_e = max(float(np.percentile(samp, 100 - tail)), float(point[0]))
    mean, measured = 1 - float(point[0]), 1 - float(o.measured[j])
    low, high = 1 - high_e, 1 - low_e
    base.update({"predicted": {"mean": mean, "low": low, "high": high}, "measured": measured,
                 "covered": bool(low - 1e-9 <= measured <= high + 1e-9),
                 "error": mean - measured,
                 "fit": max(model.weights, key=lambda f: model.weights[f]),
                 "calibrated": cal.calibrated})
    return base


def _continue(band: CurveBand, own_var: np.ndarray, n: np.ndarray, metric: np.ndarray,
              prior: ContinuationPrior, *, model: CurveModel, eval_rows: float | None,
              seed: int) -> tuple[CurveBand, np.ndarray, dict, np.ndarray]:
    """Replace the band from the largest measured budget on by the corpus's continuation
    (``_continuation``): its mean, and samples from one normal draw per resample scaled so
    that the interval is the prior's (``scale * sd`` either side). ``own_var`` there becomes
    the measurement noise of the curve's level, what the winner's-curse step shrinks by.
    Last: per grid budget, what the stated probability of meeting a target subtracts from
    the samples (``decision_discount``; 0 below the largest measured budget)."""
    # the curve model fitted the power law to these cells already
    summary = summarize_curve(n, metric, eval_rows=eval_rows,
                              power_fit=model.fits.get("power_law"))
    beyond = band.grid >= summary.n_max * (1 - 1e-9)
    u = np.log2(band.grid[beyond] / summary.n_max)
    mean, sd, scale = continue_curve(summary, prior, u)
    eff = sd * scale / Z90
    # one normal draw per resample, taken at the normal's quantiles (i + 0.5) / B in a seeded
    # order: the samples' share above a target is then the normal probability itself, without
    # the Monte Carlo noise of B random draws (about 0.05 at B = 100)
    b = band.samples.shape[0]
    order = np.random.default_rng(seed).permutation(b)
    z = norm.ppf((order + 0.5) / b).reshape(-1, 1)
    point, samples = band.point.copy(), band.samples.copy()
    # The fitted curve meets the continuation at n_max: its offset there is phased in over
    # the last measured step (linear in log budget), so the line has no jump at n_max.
    budgets = np.unique(np.asarray(n, dtype=float))
    below = budgets[budgets < summary.n_max * (1 - 1e-9)]
    if below.size and beyond.any():
        at = int(np.argmax(beyond))
        offset = (1.0 - mean[0]) - point[at]
        step = (band.grid > below[-1]) & ~beyond
        w = np.log(band.grid[step] / below[-1]) / np.log(summary.n_max / below[-1])
        point[step] += offset * w
        samples[:, step] += offset * w
    point[beyond] = 1.0 - mean
    samples[:, beyond] = 1.0 - (mean + eff * z)
    own = own_var.copy()
    own[beyond] = summary.last_se ** 2
    discount = np.zeros(band.grid.size)
    discount[beyond] = decision_discount(sd, scale, prior.decision_margin)
    info = {"last": summary.last, "last_se": summary.last_se, "slope": summary.slope,
            "slope_se": summary.slope_se}
    return (band_from_samples(band.fit, band.grid, point, samples, band.interval,
                              band.n_failed), own, info, discount)


def _shrink(bands: dict, own_var: dict, keys: list[tuple[str, str]], metric: str,
            measured: dict[tuple[str, str], float]) -> tuple[dict, dict]:
    """James-Stein shrinkage of the methods' levels, per strategy (the winner's curse).

    The factor of each method is fitted where the study measured: at the largest budget
    every method of the strategy measured, from the methods' predictions and own variances
    there. The method's deviation from the methods' mean THERE is multiplied by that factor,
    and the same shift moves its whole curve: each method keeps its own shape (its slope and
    flattening), only its level is pulled toward the others by as much as the noise of what
    was measured warrants. (Shrinking the deviation at every budget, as an earlier version
    did, merged methods whose curves truly part further out into one curve.)
    """
    factors: dict[tuple[str, str], dict[int, float]] = {k: {} for k in keys}
    strategies = sorted({s for _, s in keys})
    for strategy in strategies:
        ks = [k for k in keys if k[1] == strategy]
        if len(ks) < 4:
            continue
        common = set(bands[(*ks[0], metric)].grid.tolist())
        for k in ks[1:]:
            common &= set(bands[(*k, metric)].grid.tolist())
        common_arr = np.array(sorted(common))
        anchor = min(measured[k] for k in ks)
        if common_arr.size == 0 or anchor not in common:
            continue
        idx = {k: np.searchsorted(bands[(*k, metric)].grid, common_arr) for k in ks}
        mu = np.array([bands[(*k, metric)].point[idx[k]] for k in ks])        # (K, G)
        a = int(np.searchsorted(common_arr, anchor))
        _, fac, _ = shrink_toward_mean(mu[:, a], np.array([own_var[k][idx[k][a]] for k in ks]))
        grand = mu[:, a].mean()
        for i, k in enumerate(ks):
            level = (fac[i] - 1.0) * (mu[i, a] - grand)
            shift = np.full_like(bands[(*k, metric)].point, level)
            factors[k] = {int(n): float(fac[i]) for n in common_arr}
            b = bands[(*k, metric)]
            bands[(*k, metric)] = band_from_samples(
                b.fit, b.grid, np.clip(b.point + shift, 0, 1), b.samples + shift,
                b.interval, b.n_failed)
    return bands, factors


def forecast_all(
    cells: pd.DataFrame,
    metric: str,
    metrics: Iterable[str],
    *,
    seed: int,
    interval: float,
    n_boot: int,
    eval_rows: float | None,
    eval_floor_rows: int | None = None,
    labels_owned: int,
    option_args: dict,
    prior: ContinuationPrior | None | str = "shipped",
) -> Forecasts:
    """Forecast every (method, strategy) curve of ``cells`` for ``metric`` (and the
    report-only ``metrics``), and list the options of the plan's metric.

    ``option_args`` are the keyword arguments of ``curve_options`` other than the band,
    method, strategy and ``show``. ``prior``: how curves continue beyond their largest
    measured budget, learned from real curves (``_continuation``); ``"shipped"`` reads the
    package's prior of each metric, None keeps the fitted families' extrapolation.
    """
    def prior_of(m: str) -> ContinuationPrior | None:
        if isinstance(prior, str):
            return load_prior(m)
        return prior if m == metric else None
    level_rows = eval_floor_rows or eval_rows
    continued: dict[tuple[str, str, str], dict] = {}
    groups = {k: g for k, g in cells.groupby(["method", "strategy"], sort=True)}
    keys = [k for k, g in groups.items() if g[metric].notna().any()]
    models: dict[tuple[str, str], CurveModel] = {}
    for k in keys:
        sub = groups[k][groups[k][metric].notna()]
        models[k] = prepare_curve(
            sub["n_labels"].to_numpy(float), 1.0 - sub[metric].to_numpy(float),
            sub["repeat"].astype(str).to_numpy(),
            seed=derive_seed(seed, "plan", "backtest", k[0], k[1], metric))
    pooled = pool_errors(m.errors for m in models.values())
    for m in models.values():
        weigh_curve(m, pooled)
    records = []
    raw_records = []
    for k, m in models.items():
        if not m.weights:
            continue
        for r in ensemble_records(m.origins, m.weights,
                                  small_sample_factor(m.n_repeats, interval),
                                  largest=float(m.levels[-1])):
            raw_records.append(r)
            records.append({"method": k[0], "strategy": k[1], "origin": int(r.origin),
                            "n_labels": int(r.n_labels), "ratio": r.ratio,
                            "predicted": 1 - r.predicted, "measured": 1 - r.measured,
                            "error": r.measured - r.predicted, "sd": r.sd,
                            "measured_se": r.measured_se, "weight": r.weight})
    cal = calibrate(raw_records)

    bands: dict[tuple[str, str, str], CurveBand] = {}
    own_var: dict[tuple[str, str], np.ndarray] = {}
    discounts: dict[tuple[str, str], np.ndarray] = {}
    displays: dict[tuple[str, str, str], np.ndarray] = {}
    for k, m in models.items():
        grid, display = _grid(m.levels, [labels_owned])
        band, var = forecast_band(m, grid, cal, n_boot=n_boot,
                                  seed=derive_seed(seed, "plan", "bootstrap", k[0], k[1],
                                                   metric),
                                  interval=interval, eval_rows=eval_rows,
                                  eval_floor_rows=eval_floor_rows)
        p = prior_of(metric)
        if p is not None:
            sub = groups[k][groups[k][metric].notna()]
            band, var, continued[(*k, metric)], discounts[k] = _continue(
                band, var, sub["n_labels"].to_numpy(float), sub[metric].to_numpy(float), p,
                model=m, eval_rows=level_rows,
                seed=derive_seed(seed, "plan", "continuation", k[0], k[1], metric))
        bands[(*k, metric)], own_var[k], displays[(*k, metric)] = band, var, display
    bands, factors = _shrink(bands, own_var, keys, metric,
                             {k: float(m.levels[-1]) for k, m in models.items()})

    for other in metrics:
        if other == metric:
            continue
        for k, g in groups.items():
            sub = g[g[other].notna()]
            if sub.empty:
                continue
            om = prepare_curve(sub["n_labels"].to_numpy(float), 1.0 - sub[other].to_numpy(float),
                               sub["repeat"].astype(str).to_numpy(), seed=0, backtest=False)
            plan_model = models.get(k)
            fam_prior = ({f: (v, 1) for f, v in plan_model.mse.items()}
                         if plan_model is not None and plan_model.mse else pooled)
            weigh_curve(om, fam_prior)
            grid, display = _grid(om.levels, [])
            band, _ = forecast_band(om, grid, cal, n_boot=max(n_boot // 2, 1),
                                    seed=derive_seed(seed, "plan", "bootstrap", k[0], k[1],
                                                     other),
                                    interval=interval, eval_rows=eval_rows,
                                    eval_floor_rows=eval_floor_rows)
            p = prior_of(other)
            if p is not None:
                band, _, continued[(*k, other)], _ = _continue(
                    band, np.var(band.samples, axis=0), sub["n_labels"].to_numpy(float),
                    sub[other].to_numpy(float), p, model=om, eval_rows=level_rows,
                    seed=derive_seed(seed, "plan", "continuation", k[0], k[1], other))
            bands[(*k, other)], displays[(*k, other)] = band, display

    options: list[Option] = []
    backtest: list[dict] = []
    curve_models: list[dict] = []
    warnings: list[str] = []
    for k, m in models.items():
        band = bands[(*k, metric)]
        levels = m.levels
        show = list(levels) + [round(levels[-1] * f) for f in SHOW_MULTIPLES]
        if levels[0] <= labels_owned <= MAX_EXTRAPOLATION * levels[-1]:
            show.append(labels_owned)
        options.extend(curve_options(band, method=k[0], strategy=k[1], show=show,
                                     discount=discounts.get(k), **option_args))
        bt = _last_backtest(m, cal, interval,
                            derive_seed(seed, "plan", "last-backtest", k[0], k[1]))
        backtest.append({"method": k[0], "strategy": k[1], **bt})
        fit = m.fit
        curve_models.append({
            "method": k[0], "strategy": k[1], "metric": metric,
            "fit": fit.kind if fit is not None else "",
            "winner": (max(m.weights, key=lambda f: m.weights[f]) if m.weights else ""),
            "weights": dict(m.weights), "backtest_mse": dict(m.mse),
            "n_backtests": int(max((e.size for e in m.errors.values()), default=0)),
            "flagged": bool(getattr(fit, "flagged", False)),
            "reason": getattr(fit, "reason", ""),
        })
        if fit is not None and getattr(fit, "flagged", False):
            warnings.append(f"{k[0]} ({k[1]}): {fit.reason}; a monotone interpolation is used "
                            "instead, flat beyond the largest measured budget")
    if not cal.calibrated:
        warnings.append(f"intervals are not calibrated: {cal.reason}")
    return Forecasts(bands, models, cal, options, records,
                     ratio_table(raw_records, cal, interval), curve_models, backtest,
                     displays, factors, warnings, continued, prior_of(metric), metric,
                     discounts)
