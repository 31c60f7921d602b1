"""An honest choice: correct the ranking for the winner's curse, and flag overlapping options.

Ranking methods by noisy predicted means picks the lucky ones (the winner's curse). Each
method's prediction at a budget is shrunk toward the mean of all methods by the positive-part
James-Stein factor (Efron & Morris 1975, "Data analysis using Stein's estimator and its
generalizations"), written as an empirical-Bayes posterior mean with unequal variances:

    tau2 = max(0, S / (k - 3) - mean(sigma_m**2)),   S = sum (mu_m - mean(mu))**2,
    mu_m <- mean(mu) + tau2 / (tau2 + sigma_m**2) * (mu_m - mean(mu)),

which with equal variances is exactly ``1 - (k - 3) sigma**2 / S`` (floored at 0). It needs
at least four methods; with fewer nothing is shrunk. ``sigma_m`` is the part of a method's
uncertainty that is its own (the bootstrap over repeats), not the evaluation rows' sampling
error, which moves every method together. The plan fits the factors at the largest budget
every method measured and applies them to the whole curve (``_pipeline._shrink``).

Pure functions.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ._choose import Option

__all__ = ["overlapping", "shrink_toward_mean"]


def shrink_toward_mean(means: np.ndarray, variances: np.ndarray, *, tau2_floor: float = 0.0
                       ) -> tuple[np.ndarray, np.ndarray, float]:
    """James-Stein shrinkage of ``means`` (one per method) toward their average.

    Returns ``(shrunk, factor, tau2)`` with ``factor`` = tau2 / (tau2 + variance) per method
    (1 keeps the mean, 0 replaces it by the average). ``tau2_floor``: the smallest variance
    of the methods' true levels to assume (0, the plan's choice: the study's own estimate
    alone; experiments/curves/try_shrink_floor.py tries one learned from the corpus).
    """
    mu = np.asarray(means, dtype=float)
    var = np.asarray(variances, dtype=float)
    k = mu.size
    if k < 4:
        return mu.copy(), np.ones(k), float("nan")
    grand = float(mu.mean())
    s = float(np.sum((mu - grand) ** 2))
    tau2 = max(0.0, s / (k - 3) - float(var.mean())) if s > 0 else 0.0
    tau2 = max(tau2, float(tau2_floor))
    denom = tau2 + var
    factor = np.where(denom > 0, tau2 / np.where(denom > 0, denom, 1.0), 1.0)
    return grand + factor * (mu - grand), factor, tau2


def overlapping(chosen: Option, others: Sequence[Option]) -> list[Option]:
    """Options of other (method, strategy) pairs whose interval overlaps ``chosen``'s: the
    data cannot tell them apart from it."""
    out = []
    for o in others:
        if (o.method, o.strategy) == (chosen.method, chosen.strategy):
            continue
        if o.low <= chosen.high and o.high >= chosen.low:
            out.append(o)
    return out
