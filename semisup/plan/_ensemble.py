"""Weights of the curve families from their backtests, and the weighted curve.

Each family's track record is the mean squared error of its rolling-origin forecasts
(``_backtest.rolling_origin``), compared on the (origin, target) pairs every candidate family
forecast, never its fit residual. One curve has only a handful of such pairs, so its
mean squared error is shrunk toward the family's error pooled over every curve of the study
(same metric) as if ``PRIOR_PAIRS`` pooled pairs were added (our own rule, common practice,
no source). The weights are inversely proportional to the shrunk mean squared errors: the
inverse-MSE combination of forecasts of Bates & Granger (1969, "The combination of
forecasts"), which Stock & Watson (2004) found hard to beat.

Pure functions: forecasts in, weights and combined arrays out.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ._backtest import OriginForecast

__all__ = [
    "PRIOR_PAIRS",
    "BacktestRecord",
    "combine",
    "ensemble_records",
    "family_errors",
    "family_weights",
    "pool_errors",
]

#: Pooled pairs a curve's own backtest errors are shrunk with.
PRIOR_PAIRS = 4.0
_MSE_FLOOR = 1e-6


def _candidates(origins: Sequence[OriginForecast]) -> list[str]:
    """Families with a forecast at the last origin (every family forecast anywhere is)."""
    return list(origins[-1].points) if origins else []


def family_errors(origins: Sequence[OriginForecast]) -> dict[str, np.ndarray]:
    """Squared forecast errors per family on the pairs every candidate family forecast."""
    cands = _candidates(origins)
    out: dict[str, list[float]] = {f: [] for f in cands}
    for o in origins:
        if not all(f in o.points for f in cands):
            continue
        for f in cands:
            out[f].extend(((o.points[f] - o.measured) ** 2).tolist())
    return {f: np.asarray(v, dtype=float) for f, v in out.items()}


def pool_errors(per_curve: Iterable[Mapping[str, np.ndarray]]) -> dict[str, tuple[float, int]]:
    """Pooled (mean squared error, number of pairs) per family over many curves."""
    sums: dict[str, float] = {}
    counts: dict[str, int] = {}
    for errs in per_curve:
        for f, e in errs.items():
            sums[f] = sums.get(f, 0.0) + float(np.sum(e))
            counts[f] = counts.get(f, 0) + int(e.size)
    return {f: (sums[f] / counts[f], counts[f]) for f in sums if counts[f] > 0}


def family_weights(errors: Mapping[str, np.ndarray],
                   pooled: Mapping[str, tuple[float, int]] | None = None,
                   *, prior_pairs: float = PRIOR_PAIRS) -> tuple[dict[str, float],
                                                                  dict[str, float]]:
    """Inverse-MSE weights of the families with backtest errors on this curve.

    Returns ``(weights, mse)``: weights summing to 1 over the families of ``errors`` that
    have at least one pair, and the shrunk mean squared error behind each.
    """
    pooled = pooled or {}
    mse = {}
    for f, e in errors.items():
        if e.size == 0:
            continue
        pm, pn = pooled.get(f, (float(np.mean(e)), 0))
        m0 = prior_pairs if pn > 0 else 0.0
        mse[f] = (float(np.sum(e)) + m0 * pm) / (e.size + m0)
    if not mse:
        return {}, {}
    inv = {f: 1.0 / max(v, _MSE_FLOOR) for f, v in mse.items()}
    total = sum(inv.values())
    return {f: v / total for f, v in inv.items()}, mse


def combine(points: Mapping[str, np.ndarray], samples: Mapping[str, np.ndarray] | None,
            weights: Mapping[str, float]) -> tuple[np.ndarray, np.ndarray | None]:
    """Weighted curve (and its samples) over the families present in ``points``; weights are
    renormalised over those families."""
    fams = [f for f in points if weights.get(f, 0.0) > 0]
    if not fams:
        raise ValueError("no family with a positive weight to combine")
    w = np.array([weights[f] for f in fams])
    w = w / w.sum()
    point = sum(wi * np.asarray(points[f], dtype=float) for wi, f in zip(w, fams, strict=True))
    if samples is None:
        return point, None
    samp = sum(wi * np.asarray(samples[f], dtype=float) for wi, f in zip(w, fams, strict=True))
    return point, samp


@dataclass(frozen=True)
class BacktestRecord:
    """One rolling-origin forecast of the weighted curve (error rates).

    ``sd`` is the spread of the bootstrap refits (already scaled for few repeats),
    ``measured_se`` the standard error of the measured mean (0 when unknown) and ``largest``
    the curve's largest measured budget (NaN when unknown).
    """

    origin: float
    n_labels: float
    predicted: float
    sd: float
    measured: float
    measured_se: float
    largest: float = float("nan")

    @property
    def ratio(self) -> float:
        return self.n_labels / self.origin

    @property
    def weight(self) -> float:
        """How much the record counts in the calibration: 1 for an origin at half the
        largest budget or above, halved for every doubling further down (1 when ``largest``
        is unknown).

        The plan extrapolates from the largest budget, where curves are flattest; a forecast
        from the steep part of the curve (20 labels of 160) says less about that than one
        from 80 (our own rule, common practice, no source).
        """
        if not np.isfinite(self.largest) or self.largest <= 0:
            return 1.0
        return float(min(1.0, 2.0 * self.origin / self.largest))


def ensemble_records(origins: Sequence[OriginForecast], weights: Mapping[str, float],
                     spread_factor: float | Mapping[int, float] = 1.0, *,
                     largest: float = float("nan")) -> list[BacktestRecord]:
    """Backtest records of the weighted curve at every origin.

    ``spread_factor`` scales the bootstrap spread (a number, or a mapping from the number
    of repeats to the factor); ``largest`` is the curve's largest measured budget (it sets
    each record's :attr:`BacktestRecord.weight`).
    """
    out = []
    for o in origins:
        if not any(weights.get(f, 0.0) > 0 for f in o.points):
            continue
        point, samp = combine(o.points, o.samples, weights)
        factor = (spread_factor.get(o.n_repeats, 1.0) if isinstance(spread_factor, Mapping)
                  else float(spread_factor))
        sd = factor * np.std(samp, axis=0, ddof=1) if samp.shape[0] > 1 else np.zeros_like(point)
        se = np.nan_to_num(o.measured_se, nan=0.0)
        for j, t in enumerate(o.targets):
            out.append(BacktestRecord(o.origin, float(t), float(point[j]), float(sd[j]),
                                      float(o.measured[j]), float(se[j]), float(largest)))
    return out
