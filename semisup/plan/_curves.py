"""Learning-curve fit of one family (default the inverse power law), with a monotone fallback.

The families (inverse power law, exponential, Morgan-Mercer-Flodin, Weibull) are defined in
``_families``; this module fits one of them to a curve's cells. The inverse power law for
classifier error against training-set size follows Mukherjee et al. (2003, "Estimating
dataset size requirements for classifying DNA microarray data") and Figueroa et al. (2012,
"Predicting sample size required for classification performance"), who fit it by weighted
nonlinear least squares with more weight on the larger budgets; every family here is fitted
the same way.

Bounds keep every curve monotone and inside [0, 1]: ``a`` in [0, 1] (the error floor),
``b >= 0`` and non-negative exponents (error never rises with more labels); predictions are
clipped to [0, 1]. When the fit is poor (or there are fewer budgets than the family has
parameters, at least three) the curve falls back to a monotone interpolation: isotonic
(non-increasing) means per budget joined by PCHIP in log(n), held flat past the last budget.
The fallback is flagged on the result.

Everything here is pure: arrays in, numbers out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.optimize import least_squares
from sklearn.isotonic import IsotonicRegression

from .._errors import PlanError
from ._families import FAMILIES, fit_family_batch, power_law

__all__ = [
    "MAX_EXTRAPOLATION",
    "CurveFit",
    "budget_weights",
    "fit_learning_curve",
    "fit_power_law_batch",
    "min_levels",
    "power_law",
]

#: The furthest a curve may be extrapolated, as a multiple of the largest measured budget.
MAX_EXTRAPOLATION = 4.0


def budget_weights(n: np.ndarray) -> np.ndarray:
    """Weights growing with the budget: rank of the point's budget / number of budgets.

    Figueroa et al. (2012) weight the j-th of m learning-curve points by j/m so the larger,
    more informative budgets count more.
    """
    n = np.asarray(n, dtype=float)
    levels = np.unique(n)
    rank = np.searchsorted(levels, n) + 1
    return rank / len(levels)


def min_levels(family: str) -> int:
    """Distinct budgets a family needs: its number of parameters, at least three."""
    return max(3, FAMILIES[family].n_params)


@dataclass(frozen=True)
class CurveFit:
    """A fitted learning curve of the error rate against the label budget.

    Attributes
    ----------
    kind : a family name of ``FAMILIES`` ("power_law", "exponential", "mmf", "weibull") or
        "monotone" (the fallback).
    params : the family's parameters (``FAMILIES[kind].param_names``); NaNs for the fallback.
    flagged : True when the family was not used or fits poorly; the reason says why.
    n_min, n_max : smallest and largest measured budget.
    knots_n, knots_err : the fallback's isotonic means (empty for a family).
    rmse : weighted root-mean-square residual of the budget means.
    """

    kind: str
    params: tuple[float, ...]
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
        if self.kind in FAMILIES:
            out = FAMILIES[self.kind].func(n_arr, *self.params)
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


def _bounds(family: str, n_min: float, n_max: float) -> tuple[np.ndarray, np.ndarray]:
    """Bounds of the formula's parameters (a, b, shape...)."""
    fam = FAMILIES[family]
    lo, hi = fam.box(n_min, n_max)
    if family != "power_law":
        lo, hi = lo.copy(), hi.copy()
        lo[0], hi[0] = np.exp(lo[0]), np.exp(hi[0])
    return np.concatenate([[0.0, 0.0], lo]), np.concatenate([[1.0, np.inf], hi])


def _jacobian(family: str, n: np.ndarray, p: np.ndarray) -> np.ndarray:
    """d error / d parameters of each family at budgets ``n`` (analytic)."""
    one = np.ones_like(n)
    if family == "power_law":
        _a, b, c = p
        npow = np.power(n, -c)
        return np.column_stack([one, npow, -b * np.log(n) * npow])
    if family == "exponential":
        _a, b, k = p
        g = np.exp(-n / k)
        return np.column_stack([one, g, b * g * n / k ** 2])
    _a, b, k, d = p
    t = np.power(n / k, d)
    log_ratio = np.log(n / k)
    if family == "mmf":
        g = 1.0 / (1.0 + t)
        return np.column_stack([one, g, b * d * t * g * g / k, -b * t * log_ratio * g * g])
    g = np.exp(-t)  # weibull
    return np.column_stack([one, g, b * g * d * t / k, -b * g * t * log_ratio])


def _solve(family: str, n: np.ndarray, err: np.ndarray, sw: np.ndarray, start: np.ndarray,
           bounds: tuple[np.ndarray, np.ndarray], tol: float):
    func = FAMILIES[family].func

    def resid(p):
        return sw * (func(n, *p) - err)

    def jac(p):
        return sw[:, None] * _jacobian(family, n, p)

    lo, hi = bounds
    start = np.clip(start, lo, np.minimum(hi, 1e6))
    # Keep the start strictly inside the box where the bound is open-ended (trf needs it).
    return least_squares(resid, start, jac=jac, bounds=bounds, method="trf",
                         xtol=tol, ftol=tol, gtol=tol, max_nfev=2000)


def fit_learning_curve(
    n: np.ndarray,
    err: np.ndarray,
    weights: np.ndarray | None = None,
    *,
    start: tuple[float, ...] | None = None,
    poor_rmse: float = 0.02,
    kind: str | None = None,
    family: str = "power_law",
    tol: float = 1e-14,
) -> CurveFit:
    """Fit a learning-curve family to error rates by weighted nonlinear least squares.

    Parameters
    ----------
    n : array of shape (n_points,)
        Label budgets (one entry per cell; repeats share a budget).
    err : array of shape (n_points,)
        Error rates in [0, 1] (1 - accuracy, 1 - macro-F1, ...).
    weights : array of shape (n_points,), optional
        Least-squares weights; default :func:`budget_weights` (more weight on larger budgets).
    start : the family's parameters, optional
        Starting point; default the best point of the profiled grid search of
        :func:`fit_family_batch`.
    poor_rmse : float
        The family is replaced by the monotone fallback when the weighted RMS residual of
        the budget means exceeds ``max(poor_rmse, 2 * median standard error of the means)``
        (our own rule, common practice, no source).
    kind : None, "monotone" or a family name
        Force one form without the poor-fit rule ("monotone": the fallback; a family name:
        that family); None fits ``family`` and falls back as described above.
    family : name in ``FAMILIES`` fitted when ``kind`` is None.
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
        nan = (np.nan,) * (FAMILIES[family].n_params if family in FAMILIES else 3)
        return CurveFit("monotone", nan, True, reason, n_min, n_max, rmse,
                        tuple(map(float, kn)), tuple(map(float, ke)))

    if kind not in (None, "monotone", *FAMILIES):
        raise PlanError(f"unknown curve kind {kind!r}; use 'monotone' or one of "
                        f"{', '.join(FAMILIES)}")
    if kind is None and family not in FAMILIES:
        raise PlanError(f"unknown curve family {family!r}; use one of {', '.join(FAMILIES)}")
    if kind == "monotone":
        return fallback("monotone interpolation was asked for")
    fam = kind or family
    need = min_levels(fam)
    if len(levels) < need:
        return fallback(f"only {len(levels)} budget(s) measured; the {fam} curve needs at "
                        f"least {need}")

    bounds = _bounds(fam, n_min, n_max)
    sw = np.sqrt(w)
    if start is not None:
        starts = [np.asarray(start, dtype=float)]
    else:
        # the profiled grid search is global in the shape, so one polish from it suffices
        starts = [fit_family_batch(fam, levels, means[None, :], wsum[None, :])[0]]
    func = FAMILIES[fam].func
    best_x, best_cost = None, np.inf
    for s in starts:
        cost0 = 0.5 * float(np.sum((sw * (func(n, *s) - err)) ** 2))
        if np.all(np.isfinite(s)) and cost0 < best_cost:
            best_x, best_cost = s, cost0
        try:
            res = _solve(fam, n, err, sw, s, bounds, tol)
        except (ValueError, FloatingPointError):  # pragma: no cover - defensive
            continue
        if np.all(np.isfinite(res.x)) and res.cost < best_cost:
            best_x, best_cost = res.x, float(res.cost)
    if best_x is None:
        return fallback(f"the {fam} fit did not converge")
    params = tuple(float(v) for v in best_x)

    fitted = np.clip(func(levels, *params), 0.0, 1.0)
    rmse = float(np.sqrt(np.average((fitted - means) ** 2, weights=wsum)))
    se = sds / np.sqrt(counts)
    se = se[np.isfinite(se)]
    limit = max(poor_rmse, 2.0 * float(np.median(se))) if se.size else poor_rmse
    if rmse > limit and kind is None:
        return fallback(f"the {fam} curve fits poorly ({residual_vs_limit(rmse, limit)})")
    return CurveFit(fam, params, False, "", n_min, n_max, rmse)


def fit_power_law_batch(
    levels: np.ndarray, means: np.ndarray, weights: np.ndarray, *, grid_points: int = 251,
    refine_steps: int = 40,
) -> np.ndarray:
    """Fit many power laws at once (:func:`fit_family_batch` for ``"power_law"``).

    Parameters
    ----------
    levels : array of shape (n_levels,), the distinct budgets.
    means : array of shape (n_fits, n_levels), weighted mean error at each budget.
    weights : array of shape (n_fits, n_levels), total weight at each budget (0 = absent).

    Returns
    -------
    array of shape (n_fits, 3): (a, b, c) minimising the same weighted least-squares objective
    as :func:`fit_learning_curve` within the same bounds; c is found on a grid over [0, 5]
    and refined by golden-section search in the bracket around the best grid point.
    """
    return fit_family_batch("power_law", levels, means, weights, grid_points=grid_points,
                            refine_steps=refine_steps)


def residual_vs_limit(rmse: float, limit: float) -> str:
    """'RMS residual X above the limit Y', with as many digits as it takes to tell X from Y
    (so a warning never reads "0.020 > 0.020")."""
    for digits in range(3, 8):
        a, b = f"{rmse:.{digits}f}", f"{limit:.{digits}f}"
        if a != b:
            break
    return f"RMS residual {a} above the limit {b}"
