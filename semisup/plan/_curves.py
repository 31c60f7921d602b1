"""Learning-curve fit: error(n) = a + b * n**(-c), with a monotone fallback.

The inverse power law for classifier error against training-set size follows Mukherjee et al.
(2003, "Estimating dataset size requirements for classifying DNA microarray data") and
Figueroa et al. (2012, "Predicting sample size required for classification performance"),
who fit it by weighted nonlinear least squares with more weight on the larger budgets.

Bounds keep the curve monotone and inside [0, 1]: ``a`` in [0, 1] (the error floor),
``b >= 0`` and ``c >= 0`` (error never rises with more labels); predictions are clipped to
[0, 1]. When the fit is poor (or there are fewer than three budgets) the curve falls back to
a monotone interpolation: isotonic (non-increasing) means per budget joined by PCHIP in
log(n), held flat past the last budget. The fallback is flagged on the result.

Everything here is pure: arrays in, numbers out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.optimize import least_squares
from sklearn.isotonic import IsotonicRegression

from .._errors import PlanError

__all__ = [
    "MAX_EXTRAPOLATION",
    "CurveFit",
    "budget_weights",
    "fit_learning_curve",
    "fit_power_law_batch",
    "power_law",
]

#: The furthest a curve may be extrapolated, as a multiple of the largest measured budget.
MAX_EXTRAPOLATION = 4.0

# Bounds of (a, b, c); c above 5 is a step, not a learning curve.
_LOWER = np.array([0.0, 0.0, 0.0])
_UPPER = np.array([1.0, np.inf, 5.0])
_C_STARTS = (0.2, 0.5, 1.0, 2.0)


def power_law(n: np.ndarray, a: float, b: float, c: float) -> np.ndarray:
    """Inverse power law ``a + b * n**(-c)`` (unclipped)."""
    return a + b * np.power(np.asarray(n, dtype=float), -c)


def budget_weights(n: np.ndarray) -> np.ndarray:
    """Weights growing with the budget: rank of the point's budget / number of budgets.

    Figueroa et al. (2012) weight the j-th of m learning-curve points by j/m so the larger,
    more informative budgets count more.
    """
    n = np.asarray(n, dtype=float)
    levels = np.unique(n)
    rank = np.searchsorted(levels, n) + 1
    return rank / len(levels)


@dataclass(frozen=True)
class CurveFit:
    """A fitted learning curve of the error rate against the label budget.

    Attributes
    ----------
    kind : "power_law" or "monotone" (the fallback).
    params : (a, b, c) for the power law; NaNs for the fallback.
    flagged : True when the power law was not used or fits poorly; the reason says why.
    n_min, n_max : smallest and largest measured budget.
    knots_n, knots_err : the fallback's isotonic means (empty for the power law).
    rmse : weighted root-mean-square residual of the budget means.
    """

    kind: str
    params: tuple[float, float, float]
    flagged: bool
    reason: str
    n_min: float
    n_max: float
    rmse: float
    knots_n: tuple[float, ...] = ()
    knots_err: tuple[float, ...] = ()

    def predict(self, n: np.ndarray | float, *, allow_beyond: bool = False) -> np.ndarray:
        """Predicted error rate at budgets ``n``, clipped to [0, 1].

        Budgets beyond ``MAX_EXTRAPOLATION`` times the largest measured one are refused with a
        ``PlanError`` unless ``allow_beyond`` is set (used only for plotting guards).
        """
        n_arr = np.atleast_1d(np.asarray(n, dtype=float))
        limit = MAX_EXTRAPOLATION * self.n_max
        if not allow_beyond and np.any(n_arr > limit * (1 + 1e-9)):
            worst = float(n_arr.max())
            raise PlanError(
                f"budget {worst:g} is more than {MAX_EXTRAPOLATION:g}x the largest measured "
                f"budget ({self.n_max:g}); extrapolating that far is refused, measure budgets "
                f"up to at least {worst / MAX_EXTRAPOLATION:.0f} first"
            )
        if np.any(n_arr <= 0):
            raise PlanError(f"budgets must be positive, got {float(n_arr.min()):g}")
        if self.kind == "power_law":
            out = power_law(n_arr, *self.params)
        else:
            out = _monotone_predict(np.array(self.knots_n), np.array(self.knots_err), n_arr)
        return np.clip(out, 0.0, 1.0)

    def extrapolated(self, n: np.ndarray | float) -> np.ndarray:
        """True where ``n`` lies beyond the largest measured budget."""
        return np.atleast_1d(np.asarray(n, dtype=float)) > self.n_max * (1 + 1e-9)


def _budget_means(n: np.ndarray, err: np.ndarray, w: np.ndarray):
    levels = np.unique(n)
    means = np.array([err[n == v].mean() for v in levels])
    wmean = np.array([w[n == v].sum() for v in levels])
    counts = np.array([(n == v).sum() for v in levels])
    sds = np.array([err[n == v].std(ddof=1) if (n == v).sum() > 1 else np.nan for v in levels])
    return levels, means, wmean, counts, sds


def _monotone_knots(levels: np.ndarray, means: np.ndarray, wts: np.ndarray):
    iso = IsotonicRegression(increasing=False, y_min=0.0, y_max=1.0)
    fitted = iso.fit_transform(np.log(levels), means, sample_weight=wts)
    return levels, fitted


def _monotone_predict(knots_n: np.ndarray, knots_err: np.ndarray, n: np.ndarray) -> np.ndarray:
    if len(knots_n) == 1:
        return np.full_like(n, knots_err[0], dtype=float)
    x = np.log(knots_n)
    interp = PchipInterpolator(x, knots_err, extrapolate=False)
    xq = np.clip(np.log(n), x[0], x[-1])  # flat outside the measured range
    return interp(xq)


def _solve(n: np.ndarray, err: np.ndarray, sw: np.ndarray, start: np.ndarray, tol: float):
    def resid(p):
        return sw * (power_law(n, *p) - err)

    def jac(p):
        a, b, c = p
        npow = np.power(n, -c)
        return sw[:, None] * np.column_stack([np.ones_like(n), npow, -b * np.log(n) * npow])

    start = np.clip(start, _LOWER, np.minimum(_UPPER, 1e6))
    return least_squares(
        resid, start, jac=jac, bounds=(_LOWER, _UPPER), method="trf",
        xtol=tol, ftol=tol, gtol=tol, max_nfev=2000,
    )


def _starts(levels: np.ndarray, means: np.ndarray) -> list[np.ndarray]:
    """Starting points: for each c, the (a, b) of a straight-line fit in n**(-c)."""
    out = []
    for c in _C_STARTS:
        x = np.power(levels, -c)
        if len(levels) >= 2 and np.ptp(x) > 0:
            slope, icpt = np.polyfit(x, means, 1)
        else:
            slope, icpt = 0.0, float(means.mean())
        out.append(np.array([min(max(icpt, 0.0), 1.0), max(slope, 0.0), c]))
    return out


def fit_learning_curve(
    n: np.ndarray,
    err: np.ndarray,
    weights: np.ndarray | None = None,
    *,
    start: tuple[float, float, float] | None = None,
    poor_rmse: float = 0.02,
    kind: str | None = None,
    tol: float = 1e-14,
) -> CurveFit:
    """Fit error(n) = a + b * n**(-c) by weighted nonlinear least squares.

    Parameters
    ----------
    n : array of shape (n_points,)
        Label budgets (one entry per cell; repeats share a budget).
    err : array of shape (n_points,)
        Error rates in [0, 1] (1 - accuracy, 1 - macro-F1, ...).
    weights : array of shape (n_points,), optional
        Least-squares weights; default :func:`budget_weights` (more weight on larger budgets).
    start : (a, b, c), optional
        Single starting point (used by the bootstrap to warm-start); default tries several.
    poor_rmse : float
        The power law is replaced by the monotone fallback when the weighted RMS residual of
        the budget means exceeds ``max(poor_rmse, 2 * median standard error of the means)``
        (our own rule, common practice, no source).
    kind : None, "power_law" or "monotone"
        Force one form (the bootstrap refits each resample in the form of the full fit);
        None chooses as described above.
    tol : tolerance of the least-squares solver (xtol, ftol and gtol).

    Returns
    -------
    CurveFit
    """
    n = np.asarray(n, dtype=float).ravel()
    err = np.asarray(err, dtype=float).ravel()
    if n.shape != err.shape or n.size == 0:
        raise PlanError(f"learning curve needs matching, non-empty budgets and errors; got "
                        f"{n.size} budgets and {err.size} errors")
    if np.any(~np.isfinite(n)) or np.any(n <= 0):
        raise PlanError("learning curve budgets must be positive finite numbers")
    keep = np.isfinite(err)
    n, err = n[keep], err[keep]
    if n.size == 0:
        raise PlanError("learning curve has no finite error values")
    if np.any((err < -1e-9) | (err > 1 + 1e-9)):
        raise PlanError("learning curve error rates must lie in [0, 1]")
    w = budget_weights(n) if weights is None else np.asarray(weights, dtype=float).ravel()[keep]
    if w.shape != n.shape or np.any(w < 0) or not np.any(w > 0):
        raise PlanError("learning curve weights must be non-negative, one per point")

    levels, means, wsum, counts, sds = _budget_means(n, err, w)
    n_min, n_max = float(levels[0]), float(levels[-1])

    def fallback(reason: str) -> CurveFit:
        kn, ke = _monotone_knots(levels, means, np.maximum(wsum, 1e-12))
        fitted = _monotone_predict(kn, ke, levels)
        rmse = float(np.sqrt(np.average((fitted - means) ** 2, weights=np.maximum(wsum, 1e-12))))
        return CurveFit("monotone", (np.nan, np.nan, np.nan), True, reason, n_min, n_max, rmse,
                        tuple(map(float, kn)), tuple(map(float, ke)))

    if kind not in (None, "power_law", "monotone"):
        raise PlanError(f"unknown curve kind {kind!r}; use 'power_law' or 'monotone'")
    if kind == "monotone":
        return fallback("monotone interpolation was asked for")
    if len(levels) < 3:
        return fallback(f"only {len(levels)} budget(s) measured; a power law needs at least 3")

    sw = np.sqrt(w)
    starts = [np.asarray(start, dtype=float)] if start is not None else _starts(levels, means)
    best = None
    for s in starts:
        try:
            res = _solve(n, err, sw, s, tol)
        except (ValueError, FloatingPointError):  # pragma: no cover - defensive
            continue
        if best is None or res.cost < best.cost:
            best = res
    if best is None or not np.all(np.isfinite(best.x)):
        return fallback("the power-law fit did not converge")
    a, b, c = (float(v) for v in best.x)

    fitted = np.clip(power_law(levels, a, b, c), 0.0, 1.0)
    rmse = float(np.sqrt(np.average((fitted - means) ** 2, weights=wsum)))
    se = sds / np.sqrt(counts)
    se = se[np.isfinite(se)]
    tol = max(poor_rmse, 2.0 * float(np.median(se))) if se.size else poor_rmse
    if rmse > tol and kind is None:
        return fallback(f"the power law fits poorly (RMS residual {rmse:.3f} > {tol:.3f})")
    return CurveFit("power_law", (a, b, c), False, "", n_min, n_max, rmse)


def _ab_given_c(x: np.ndarray, y: np.ndarray, w: np.ndarray):
    """Best (a, b) for fixed exponents: weighted least squares of ``y`` on ``[1, x]`` with
    0 <= a <= 1 and b >= 0, along the last axis.

    The problem is a convex quadratic in two variables: the optimum is the unconstrained one
    when feasible, otherwise the best of the one-dimensional optima on the active bounds.
    """
    sw = w.sum(-1)
    safe = np.where(sw > 0, sw, 1.0)
    mx = (w * x).sum(-1) / safe
    my = (w * y).sum(-1) / safe
    sxx = (w * (x - mx[..., None]) ** 2).sum(-1)
    sxy = (w * (x - mx[..., None]) * (y - my[..., None])).sum(-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        b_free = np.where(sxx > 1e-300, sxy / sxx, 0.0)
    a_free = my - b_free * mx
    wxx = (w * x * x).sum(-1)
    wxx = np.where(wxx > 0, wxx, 1.0)
    cands = [
        (a_free, b_free),
        (np.clip(my, 0.0, 1.0), np.zeros_like(my)),
        (np.zeros_like(my), np.maximum((w * x * y).sum(-1) / wxx, 0.0)),
        (np.ones_like(my), np.maximum((w * x * (y - 1.0)).sum(-1) / wxx, 0.0)),
    ]
    best_a, best_b, best_sse = None, None, None
    for k, (a, b) in enumerate(cands):
        sse = (w * (y - a[..., None] - b[..., None] * x) ** 2).sum(-1)
        if k == 0:
            sse = np.where((b >= 0) & (a >= 0) & (a <= 1), sse, np.inf)
            best_a, best_b, best_sse = a, b, sse
            continue
        better = sse < best_sse
        best_a = np.where(better, a, best_a)
        best_b = np.where(better, b, best_b)
        best_sse = np.where(better, sse, best_sse)
    return best_a, best_b, best_sse


def fit_power_law_batch(
    levels: np.ndarray, means: np.ndarray, weights: np.ndarray, *, grid_points: int = 251,
    refine_steps: int = 40,
) -> np.ndarray:
    """Fit many power laws at once by profiling out (a, b) for each exponent c.

    Parameters
    ----------
    levels : array of shape (n_levels,), the distinct budgets.
    means : array of shape (n_fits, n_levels), weighted mean error at each budget.
    weights : array of shape (n_fits, n_levels), total weight at each budget (0 = absent).

    Returns
    -------
    array of shape (n_fits, 3): (a, b, c) minimising the same weighted least-squares objective
    as :func:`fit_learning_curve` (the per-point objective equals the per-budget one on the
    weighted means plus a constant) within the same bounds. c is found on a grid over
    [0, 5] and refined by golden-section search in the bracket around the best grid point.
    """
    logn = np.log(np.asarray(levels, dtype=float))
    y = np.asarray(means, dtype=float)
    w = np.asarray(weights, dtype=float)
    c_grid = np.linspace(_LOWER[2], _UPPER[2], grid_points)
    x = np.exp(-c_grid[None, :, None] * logn[None, None, :])           # (1, C, L)
    _, _, sse = _ab_given_c(x, y[:, None, :], w[:, None, :])            # (B, C)
    k = np.argmin(sse, axis=1)
    step = c_grid[1] - c_grid[0]
    lo = np.clip(c_grid[k] - step, _LOWER[2], _UPPER[2])
    hi = np.clip(c_grid[k] + step, _LOWER[2], _UPPER[2])

    def profile(c: np.ndarray) -> np.ndarray:
        xc = np.exp(-c[:, None] * logn[None, :])
        return _ab_given_c(xc, y, w)[2]

    ratio = (np.sqrt(5.0) - 1.0) / 2.0
    c1 = hi - ratio * (hi - lo)
    c2 = lo + ratio * (hi - lo)
    f1, f2 = profile(c1), profile(c2)
    for _ in range(refine_steps):
        left = f1 <= f2  # the minimum lies in [lo, c2]
        hi = np.where(left, c2, hi)
        lo = np.where(left, lo, c1)
        new_c1 = np.where(left, hi - ratio * (hi - lo), c2)
        new_c2 = np.where(left, c1, lo + ratio * (hi - lo))
        f_new = profile(np.where(left, new_c1, new_c2))
        f1, f2 = np.where(left, f_new, f2), np.where(left, f1, f_new)
        c1, c2 = new_c1, new_c2
    c = (lo + hi) / 2.0
    xc = np.exp(-c[:, None] * logn[None, :])
    a, b, _ = _ab_given_c(xc, y, w)
    return np.column_stack([a, b, c])
