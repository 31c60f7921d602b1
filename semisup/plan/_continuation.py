"""How real learning curves continue past the largest measured budget: a prior learned from a
corpus of real curves, applied to one study's curve.

A study measures a method's metric at budgets up to ``n_max``. What the plan needs is the
metric at ``r * n_max`` labels for ``r`` up to 4 (the user's final model, trained on that many
labels and scored on new rows). Fitting a curve family and extrapolating it was measured to
be worse than assuming the curve stays flat (the corpus in ``experiments/curves``; Kielhöfer,
Mohr & van Rijn 2024 find the last observed value a strong baseline once several sizes are
measured). So the continuation is learned from real curves instead:

    metric(r * n_max) - last = shift(u) + gain(u) * slope + power_gain(u) * rise(u)
                               + level_gain(u) * gap + error,

with ``u = log2(r)``, where ``last`` is the measured mean at ``n_max``, ``slope`` the measured
gain per doubling of the budget over the top of the curve (weighted least squares of the
per-budget means on ``log2(budget)``), ``rise(u)`` what an inverse power law fitted to the
curve adds from ``n_max`` to ``r * n_max`` (so the corpus learns how far to trust the power
law, the correction of Jain et al., CVPR 2023), ``gap`` the power law's value at ``n_max``
less ``last`` (the fit smooths the last budget's noise with the other budgets'; the corpus
learns how much of it to take); the shift and the three gains are fitted on the corpus per
ratio (each task weighs the same, whatever its number of curves; a small ridge keeps the
gains stable), and the error has a spread of its own
(``spread(u)``, what the corpus's curves did beyond what the measurement noise explains) plus
the measurement noise of this study's ``last`` and ``slope``. Intervals use the corpus's own
standardised errors: ``scale(u)`` is the factor that makes ``mean +- scale * sd`` hold 90% of
the corpus's truths (1.645 for normal errors), so heavy tails widen the interval.

``shift(0)`` is the average gap between what a study measures at ``n_max`` and what a model
trained on ``n_max`` labels scores on new rows, as the corpus measured it.

Pure functions and a frozen record; the learned prior is shipped as ``continuation.json``
beside this module and read by :func:`load_prior`.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from importlib import resources

import numpy as np

__all__ = [
    "CurveSummary",
    "ContinuationPrior",
    "continue_curve",
    "fit_prior",
    "decision_discount",
    "load_prior",
    "summarize_curve",
    "track_sentence",
]

#: The prior shipped with the package (written by experiments/curves/fit_prior.py).
PRIOR_FILE = "continuation.json"
#: Budgets from the top of the curve that the slope is measured over (our choice: the top
#: half of a 6-point geometric grid; common practice, no source).
SLOPE_POINTS = 3
#: Smallest standard error of a measured mean, as a fraction of a binomial one on 50 rows:
#: keeps a curve whose repeats agree by chance from getting a zero-width interval.
MIN_SE = 0.004
#: The normal quantile of a two-sided 90% interval (the prior's ``scale`` is set for it).
Z90 = 1.6448536269514722


@dataclass(frozen=True)
class CurveSummary:
    """What the continuation reads off one measured curve (metric scale, higher is better).

    ``last`` and ``last_se``: mean and standard error at the largest budget ``n_max``;
    ``slope`` and ``slope_se``: gain per doubling over the top ``SLOPE_POINTS`` budgets.
    """

    n_max: float
    last: float
    last_se: float
    slope: float
    slope_se: float
    n_levels: int
    #: (a, b, c) of the inverse power law ``a + b n**-c`` fitted to the error rate, or None
    power: tuple[float, float, float] | None = None

    @property
    def level_gap(self) -> float:
        """The fitted power law's metric at ``n_max`` less the measured ``last`` (0 without
        a fit): the fit smooths the noise of the last budget's repeats with the others."""
        if self.power is None:
            return 0.0
        a, b, c = self.power
        return float(np.clip(1.0 - (a + b * self.n_max ** -c), 0.0, 1.0) - self.last)

    def rise(self, u: np.ndarray) -> np.ndarray:
        """What the fitted power law adds to the metric from ``n_max`` to ``2**u * n_max``
        (0 without a fit), at most what is left below 1."""
        u = np.atleast_1d(np.asarray(u, dtype=float))
        if self.power is None:
            return np.zeros_like(u)
        a, b, c = self.power
        err = a + b * np.power(self.n_max * np.power(2.0, u), -c)
        gain = (a + b * self.n_max ** -c) - err
        return np.clip(gain, 0.0, max(1.0 - self.last, 0.0))


def summarize_curve(n_labels: np.ndarray, metric: np.ndarray, *,
                    eval_rows: float | None = None, power_fit=None) -> CurveSummary:
    """Summarise a curve's cells: ``n_labels`` and ``metric`` of each (budget, repeat).

    ``eval_rows``: rows the largest budget's repeats were scored on in all (under cross-fit
    every labeled row once); the binomial error of that many rows floors ``last_se``.
    ``power_fit``: the power law already fitted to these cells' error rates
    (``fit_learning_curve(n_labels, 1 - metric, kind="power_law")``, as the plan's curve
    model holds it); None fits it here.
    """
    n_labels = np.asarray(n_labels, dtype=float)
    metric = np.asarray(metric, dtype=float)
    ok = np.isfinite(n_labels) & np.isfinite(metric)
    n_labels, metric = n_labels[ok], metric[ok]
    if n_labels.size == 0:
        raise ValueError("a curve needs at least one measured cell")
    levels = np.unique(n_labels)
    means = np.array([metric[n_labels == b].mean() for b in levels])
    top = metric[n_labels == levels[-1]]
    last = float(means[-1])
    se = float(top.std(ddof=1) / np.sqrt(top.size)) if top.size > 1 else np.nan
    if eval_rows:
        p = min(max(last, 0.0), 1.0)
        se = np.nanmax([se, np.sqrt(p * (1 - p) / float(eval_rows))])
    se = float(np.nanmax([se, MIN_SE])) if np.isfinite(se) or eval_rows else 0.05
    if levels.size >= 2:
        k = min(SLOPE_POINTS, levels.size)
        x = np.log2(levels[-k:])
        yv = means[-k:]
        counts = np.array([np.sum(n_labels == b) for b in levels[-k:]], dtype=float)
        xm = np.average(x, weights=counts)
        sxx = float(np.sum(counts * (x - xm) ** 2))
        slope = float(np.sum(counts * (x - xm) * (yv - np.average(yv, weights=counts))) / sxx)
        # per-cell spread around the per-budget means, pooled over the top budgets
        resid = np.concatenate([metric[n_labels == b] - m for b, m in
                                zip(levels[-k:], yv, strict=True)])
        dof = max(resid.size - k, 1)
        s2 = float(np.sum(resid ** 2) / dof) if resid.size > k else se ** 2 * top.size
        slope_se = float(np.sqrt(s2 / sxx))
    else:
        slope, slope_se = 0.0, 0.0
    power = None
    if levels.size >= 3:
        from ._curves import fit_learning_curve

        try:
            fit = power_fit if power_fit is not None else fit_learning_curve(
                n_labels, 1.0 - metric, kind="power_law")
            if fit.kind == "power_law" and np.all(np.isfinite(fit.params)):
                power = tuple(float(v) for v in fit.params)
        except Exception:  # noqa: BLE001  (a curve a power law cannot fit has no rise)
            power = None
    return CurveSummary(float(levels[-1]), last, se, slope, slope_se, int(levels.size),
                        power)


@dataclass(frozen=True)
class ContinuationPrior:
    """Per extrapolation ratio ``u = log2(r)``: shift, gain on the slope, the extra spread and
    the 90%-interval scale, learned from ``n_tasks`` real tables. ``track`` holds what the
    corpus measured when each table was left out (per ratio: the forecast's mean absolute
    error, the last-value baseline's, coverage), for the plan to state."""

    u: tuple[float, ...]
    shift: tuple[float, ...]
    gain: tuple[float, ...]
    spread: tuple[float, ...]
    scale: tuple[float, ...]
    n_tasks: int
    n_curves: int
    track: Mapping[str, Mapping[str, float]] = field(default_factory=dict)
    source: str = ""
    power_gain: tuple[float, ...] = ()
    level_gain: tuple[float, ...] = ()
    #: The margin, in standard deviations of the forecast, that a plan's stated probability
    #: of meeting a target beyond the largest measured budget is lowered by: learned from the
    #: corpus's decisions so that "buy" decisions stated at the plan's confidence reached
    #: their targets that often (``experiments/curves/loto.py``, ``learn_margin``). Choosing
    #: the cheapest of many (method, budget) options that clears the confidence picks the
    #: ones whose forecast erred upward; each forecast alone is calibrated, the chosen one is
    #: not (the winner's curse of the choice). 0 for a prior written before the margin.
    decision_margin: float = 0.0
    #: What the corpus measured of the decisions, each table's margin learned without it:
    #: ``buys`` ("buy" decisions at reachable targets), ``hit`` (the share that reached the
    #: target), ``confidence`` (the confidence they were made at). Empty when not measured.
    decisions: Mapping[str, float] = field(default_factory=dict)

    def at(self, u: float) -> tuple[float, ...]:
        """(shift, gain, spread, scale, power_gain, level_gain) at ``u``, linear between the
        fitted ratios and held constant outside them."""
        us = np.asarray(self.u)
        zero = (0.0,) * len(self.u)
        return tuple(float(np.interp(u, us, np.asarray(v)))
                     for v in (self.shift, self.gain, self.spread, self.scale,
                               self.power_gain or zero, self.level_gain or zero))

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: Mapping) -> ContinuationPrior:
        keys = ("u", "shift", "gain", "spread", "scale")
        lens = {len(d[k]) for k in keys}
        if len(lens) != 1 or not lens.pop():
            raise ValueError("a continuation prior needs equally long, non-empty u, shift, "
                             "gain, spread and scale lists")
        extra = {}
        for k in ("power_gain", "level_gain"):
            extra[k] = tuple(float(x) for x in d.get(k) or ())
            if extra[k] and len(extra[k]) != len(d["u"]):
                raise ValueError(f"a continuation prior's {k} must be as long as u")
        margin = float(d.get("decision_margin", 0.0) or 0.0)
        if not np.isfinite(margin) or margin < 0:
            raise ValueError(f"a continuation prior's decision_margin must be a number >= 0, "
                             f"got {d.get('decision_margin')!r}")
        return cls(**{k: tuple(float(x) for x in d[k]) for k in keys},
                   n_tasks=int(d["n_tasks"]), n_curves=int(d["n_curves"]),
                   track={str(k): dict(v) for k, v in dict(d.get("track", {})).items()},
                   source=str(d.get("source", "")), decision_margin=margin,
                   decisions={str(k): float(v) for k, v in dict(d.get("decisions") or {}).items()},
                   **extra)


def continue_curve(summary: CurveSummary, prior: ContinuationPrior,
                   u: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean, standard deviation and 90%-interval scale of the metric at ``2**u * n_max``.

    ``u`` >= 0 (beyond the largest measured budget). The standard deviation adds the prior's
    spread, this curve's measurement noise at ``n_max`` and the slope's noise times the gain.
    """
    u = np.atleast_1d(np.asarray(u, dtype=float))
    coef = np.array([prior.at(float(x)) for x in u])       # (len(u), 6)
    shift, gain, spread, scale, pgain, lgain = coef.T
    mean = (summary.last + shift + gain * summary.slope + pgain * summary.rise(u)
            + lgain * summary.level_gap)
    sd = np.sqrt(spread ** 2 + summary.last_se ** 2 + (gain * summary.slope_se) ** 2)
    return np.clip(mean, 0.0, 1.0), sd, scale


def decision_discount(sd: np.ndarray, scale: np.ndarray, margin: float) -> np.ndarray:
    """What to subtract from a continued forecast's samples (metric scale) before counting
    the share that meets a target, so that the stated probability is ``Phi(z - margin)``
    where the forecast alone gives ``Phi(z)``: ``margin`` times the standard deviation of the
    normal whose 90% interval is ``+- scale * sd``."""
    eff = np.asarray(sd, dtype=float) * np.asarray(scale, dtype=float) / Z90
    return float(margin) * eff


def _wls(X: np.ndarray, y: np.ndarray, w: np.ndarray, ridge: np.ndarray) -> np.ndarray:
    """Weighted least squares with a ridge penalty per coefficient (0: unpenalised)."""
    A = X.T @ (w[:, None] * X) + np.diag(np.maximum(ridge, 1e-12))
    return np.linalg.solve(A, X.T @ (w * y))


def fit_prior(summaries: Sequence[CurveSummary], u: Sequence[float],
              truth: np.ndarray, truth_se: np.ndarray, groups: Sequence[str], *,
              coverage: float = 0.9, ridge: float = 1e-3, source: str = "",
              track: Mapping | None = None) -> ContinuationPrior:
    """Learn the continuation from real curves.

    Parameters
    ----------
    summaries : sequence of CurveSummary, one per curve
    u : sequence of float
        The ratios (log2) at which the truths were measured.
    truth : ndarray of shape (n_curves, len(u))
        The metric of a model trained on ``2**u * n_max`` labels, on new rows; NaN where not
        measured.
    truth_se : ndarray of shape (n_curves, len(u))
        Standard error of each truth (its own evaluation noise), removed from the spread.
    groups : sequence of str
        The table each curve comes from: every table weighs the same in the fit.
    coverage : float
        Interval coverage the ``scale`` is set for.
    """
    truth = np.asarray(truth, dtype=float)
    truth_se = np.asarray(truth_se, dtype=float)
    groups = np.asarray(groups)
    last = np.array([s.last for s in summaries])
    slope = np.array([s.slope for s in summaries])
    noise2 = np.array([s.last_se ** 2 for s in summaries])
    slope_se2 = np.array([s.slope_se ** 2 for s in summaries])
    shift, gain, spread, scale, pgain, lgain = [], [], [], [], [], []
    for j in range(len(u)):
        ok = np.isfinite(truth[:, j])
        if ok.sum() < 3:
            raise ValueError(f"too few truths at ratio 2**{u[j]:g} to fit a continuation")
        g = groups[ok]
        _, inv, counts = np.unique(g, return_inverse=True, return_counts=True)
        w = 1.0 / counts[inv]
        rise = np.array([cs.rise(u[j])[0] for cs, k in zip(summaries, ok, strict=True) if k])
        gap = np.array([cs.level_gap for cs, k in zip(summaries, ok, strict=True) if k])
        X = np.column_stack([np.ones(ok.sum()), slope[ok], rise, gap])
        y = truth[ok, j] - last[ok]
        beta = _wls(X, y, w, np.array([0.0, *[ridge * w.sum()] * 3]))
        resid = y - X @ beta
        own = noise2[ok] + beta[1] ** 2 * slope_se2[ok]
        extra = float(np.average(resid ** 2 - own - truth_se[ok, j] ** 2, weights=w))
        s = float(np.sqrt(max(extra, 0.0)))
        z = np.abs(resid) / np.sqrt(s ** 2 + own)
        order = np.argsort(z)
        cum = np.cumsum(w[order]) / w.sum()
        q = float(z[order][min(np.searchsorted(cum, coverage), z.size - 1)])
        shift.append(float(beta[0]))
        gain.append(float(beta[1]))
        pgain.append(float(beta[2]))
        lgain.append(float(beta[3]))
        spread.append(s)
        scale.append(q)
    return ContinuationPrior(tuple(float(x) for x in u), tuple(shift), tuple(gain),
                             tuple(spread), tuple(scale), int(len(np.unique(groups))),
                             int(len(summaries)), dict(track or {}), source, tuple(pgain),
                             tuple(lgain))


def load_prior(metric: str, text: str | None = None) -> ContinuationPrior | None:
    """The prior of ``metric`` shipped with the package (or parsed from ``text``, a JSON
    object of metric -> prior); None when there is none for that metric."""
    if text is None:
        try:
            text = resources.files(__package__).joinpath(PRIOR_FILE).read_text("utf-8")
        except (FileNotFoundError, OSError):
            return None
    table = json.loads(text).get("metrics", {})
    return ContinuationPrior.from_dict(table[metric]) if metric in table else None


def track_sentence(prior: ContinuationPrior, ratio: float) -> str:
    """One sentence on how this kind of forecast held up on the corpus at the extrapolation
    ratio nearest ``ratio`` (each table left out of the fit it was judged by); "" when the
    prior carries no record."""
    if not prior.track or ratio is None or not np.isfinite(ratio):
        return ""
    keys = sorted(prior.track, key=lambda k: abs(np.log2(float(k)) - np.log2(max(ratio, 1.0))))
    r = keys[0]
    t = prior.track[r]
    where = ("at the largest budget measured" if float(r) == 1.0
             else f"at {float(r):g} times the largest budget measured")
    text = (f"How such forecasts held up: on {prior.n_tasks} real tables, each left out of "
            f"the fit it was judged by, forecasts like this one {where} were off by "
            f"{t['mae']:.3f} on "
            f"average (assuming the curve stays flat: {t['mae_last']:.3f}), and their 90% "
            f"intervals held the truth {t['coverage']:.0%} of the time.")
    d = prior.decisions
    if d.get("buys") and np.isfinite(d.get("hit", np.nan)):
        text += (f" There, {d['hit']:.0%} of {int(d['buys'])} decisions to buy labels, each "
                 f"stated with at least {d.get('confidence', 0.8):.0%} probability, reached "
                 "their target.")
    return text
