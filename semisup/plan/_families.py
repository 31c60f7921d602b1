"""Learning-curve families and their vectorised least-squares fit.

Every family models the error rate as ``err(n) = a + b * g(n; theta)`` with ``a`` in [0, 1]
(the error floor), ``b >= 0`` and a shape ``g`` that falls from about 1 towards 0 as the
budget ``n`` grows, so every member is monotone non-increasing and, once clipped, inside
[0, 1]. The families are the parametric shapes compared by Viering & Loog (2022, "The shape
of learning curves: a review", table 2) and fitted to thousands of curves in the Learning
Curve Database of Mohr et al. (2022, "LCDB 1.0"), written for an error rate:

=============  ==============================  ===========================================
name           error(n)                         LCDB name and mapping
=============  ==============================  ===========================================
power_law      a + b * n**(-c)                  pow3 (Mukherjee et al. 2003)
exponential    a + b * exp(-n / k)              exp3; its rate is 1 / k
mmf            a + b / (1 + (n / k)**d)         mmf4 (Morgan-Mercer-Flodin), k**d = beta
weibull        a + b * exp(-(n / k)**d)         wbl4 (Weibull), k = scale, d = shape
=============  ==============================  ===========================================

For a fixed shape ``theta`` the model is linear in (a, b), so (a, b) are profiled out in
closed form (a box-constrained weighted least squares in two unknowns) and only ``theta``
(one or two numbers) is searched: on a grid, then refined. That is what lets the bootstrap
refit hundreds of resamples of every family in one vectorised pass.

Scales ``k`` are searched within [n_min / 10, 10 * n_max] of the measured budgets and the
exponents within [0.05, 5] (our own bounds, common practice, no source: a scale far outside
the measured range makes the curve a straight line or a step inside it).

Pure functions: arrays in, arrays out.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

__all__ = [
    "FAMILIES",
    "Family",
    "exponential",
    "fit_family_batch",
    "mmf",
    "power_law",
    "profile_ab",
    "weibull",
]


def power_law(n: np.ndarray, a: float, b: float, c: float) -> np.ndarray:
    """Inverse power law ``a + b * n**(-c)`` (unclipped)."""
    return a + b * np.power(np.asarray(n, dtype=float), -c)


def exponential(n: np.ndarray, a: float, b: float, k: float) -> np.ndarray:
    """Exponential ``a + b * exp(-n / k)`` (unclipped)."""
    return a + b * np.exp(-np.asarray(n, dtype=float) / k)


def mmf(n: np.ndarray, a: float, b: float, k: float, d: float) -> np.ndarray:
    """Morgan-Mercer-Flodin ``a + b / (1 + (n / k)**d)`` (unclipped)."""
    return a + b / (1.0 + np.power(np.asarray(n, dtype=float) / k, d))


def weibull(n: np.ndarray, a: float, b: float, k: float, d: float) -> np.ndarray:
    """Weibull ``a + b * exp(-(n / k)**d)`` (unclipped)."""
    return a + b * np.exp(-np.power(np.asarray(n, dtype=float) / k, d))


# Shapes g(log n; theta) with theta as arrays that broadcast against log n.
def _g_power(logn, c):
    return np.exp(-c * logn)


def _g_exp(logn, logk):
    return np.exp(-np.exp(logn - logk))


def _g_mmf(logn, logk, d):
    return 1.0 / (1.0 + np.exp(np.clip(d * (logn - logk), -700, 700)))


def _g_weibull(logn, logk, d):
    return np.exp(-np.exp(np.clip(d * (logn - logk), -700, 700)))


_EXP_LO, _EXP_HI = 0.05, 5.0
_SCALE_SPAN = np.log(10.0)


@dataclass(frozen=True)
class Family:
    """One curve family: its formula, its shape and the search box of the shape.

    ``theta`` is searched on an internal scale: the exponent itself for ``power_law``, the
    log of the scale ``k`` and the exponent ``d`` for the others; ``to_params`` turns the
    fitted (a, b, theta) into the formula's parameters.
    """

    name: str
    formula: str
    func: Callable[..., np.ndarray]
    shape: Callable[..., np.ndarray]
    n_shape: int
    param_names: tuple[str, ...]

    @property
    def n_params(self) -> int:
        return 2 + self.n_shape

    def box(self, n_min: float, n_max: float) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of theta (internal scale) for these measured budgets."""
        lo_k, hi_k = np.log(n_min) - _SCALE_SPAN, np.log(n_max) + _SCALE_SPAN
        if self.name == "power_law":
            return np.array([0.0]), np.array([_EXP_HI])
        if self.n_shape == 1:
            return np.array([lo_k]), np.array([hi_k])
        return np.array([lo_k, _EXP_LO]), np.array([hi_k, _EXP_HI])

    def to_params(self, a: np.ndarray, b: np.ndarray, theta: np.ndarray) -> np.ndarray:
        """(a, b, theta) on the internal scale -> the formula's parameters, shape (..., p)."""
        theta = np.asarray(theta, dtype=float)
        cols = [np.asarray(a, dtype=float), np.asarray(b, dtype=float)]
        if self.name == "power_law":
            cols.append(theta[..., 0])
        else:
            cols.append(np.exp(theta[..., 0]))
            if self.n_shape == 2:
                cols.append(theta[..., 1])
        return np.stack(cols, axis=-1)

    def to_theta(self, params: np.ndarray) -> np.ndarray:
        """Inverse of :meth:`to_params` for the shape part."""
        params = np.asarray(params, dtype=float)
        if self.name == "power_law":
            return params[..., 2:3]
        out = [np.log(params[..., 2])]
        if self.n_shape == 2:
            out.append(params[..., 3])
        return np.stack(out, axis=-1)

    def predict(self, n: np.ndarray, params: np.ndarray) -> np.ndarray:
        """Unclipped error at budgets ``n`` (last axis) for parameter rows ``params``
        (shape (..., p)); broadcasting: result (..., len(n))."""
        p = np.asarray(params, dtype=float)
        n = np.asarray(n, dtype=float)
        args = [p[..., j:j + 1] for j in range(p.shape[-1])]
        return self.func(n, *args)


FAMILIES: dict[str, Family] = {
    "power_law": Family("power_law", "a + b * n**(-c)", power_law, _g_power, 1,
                        ("a", "b", "c")),
    "exponential": Family("exponential", "a + b * exp(-n / k)", exponential, _g_exp, 1,
                          ("a", "b", "k")),
    "mmf": Family("mmf", "a + b / (1 + (n / k)**d)", mmf, _g_mmf, 2, ("a", "b", "k", "d")),
    "weibull": Family("weibull", "a + b * exp(-(n / k)**d)", weibull, _g_weibull, 2,
                      ("a", "b", "k", "d")),
}


def profile_ab(x: np.ndarray, y: np.ndarray, w: np.ndarray):
    """Best (a, b) for fixed shapes: weighted least squares of ``y`` on ``[1, x]`` with
    0 <= a <= 1 and b >= 0, along the last axis.

    The problem is a convex quadratic in two variables: the optimum is the unconstrained one
    when feasible, otherwise the best of the one-dimensional optima on the active bounds.
    Everything follows from six weighted sums, of which only those involving ``x`` need the
    full broadcast shape. Returns ``(a, b, sse)``.
    """
    sw, swy, swyy = w.sum(-1), (w * y).sum(-1), (w * y * y).sum(-1)
    wx = w * x
    swx, swxx, swxy = wx.sum(-1), (wx * x).sum(-1), (wx * y).sum(-1)
    shape = np.broadcast_shapes(swx.shape, sw.shape)
    sw, swy, swyy = (np.broadcast_to(v, shape) for v in (sw, swy, swyy))

    def sse(a, b):
        with np.errstate(over="ignore", invalid="ignore"):
            val = (swyy - 2 * a * swy - 2 * b * swxy + a * a * sw + 2 * a * b * swx
                   + b * b * swxx)
        return np.where(np.isfinite(val), val, np.inf)

    with np.errstate(divide="ignore", invalid="ignore"):
        det = sw * swxx - swx * swx
        ok = det > 1e-300 * np.maximum(sw * swxx, 1e-300)
        safe = np.where(ok, det, 1.0)
        b_free = np.where(ok, (sw * swxy - swx * swy) / safe, 0.0)
        a_free = np.where(ok, (swxx * swy - swx * swxy) / safe,
                          np.where(sw > 0, swy / np.where(sw > 0, sw, 1.0), 0.0))
        pos = swxx > 0
        sxx = np.where(pos, swxx, 1.0)
        cands = [
            (a_free, b_free),
            (np.clip(np.where(sw > 0, swy / np.where(sw > 0, sw, 1.0), 0.0), 0.0, 1.0),
             np.zeros(shape)),
            (np.zeros(shape), np.where(pos, np.maximum(swxy / sxx, 0.0), 0.0)),
            (np.ones(shape), np.where(pos, np.maximum((swxy - swx) / sxx, 0.0), 0.0)),
        ]
    best_a, best_b, best_sse = None, None, None
    for k, (a, b) in enumerate(cands):
        val = sse(a, b)
        if k == 0:
            val = np.where((b >= 0) & (a >= 0) & (a <= 1), val, np.inf)
            best_a, best_b, best_sse = a, b, val
            continue
        better = val < best_sse
        best_a = np.where(better, a, best_a)
        best_b = np.where(better, b, best_b)
        best_sse = np.where(better, val, best_sse)
    return best_a, best_b, np.maximum(best_sse, 0.0)


def _profile(family: Family, logn: np.ndarray, y: np.ndarray, w: np.ndarray,
             theta: np.ndarray) -> np.ndarray:
    """SSE of the best (a, b) for each fit's shape ``theta`` (shape (B, C, n_shape))."""
    args = [theta[..., j:j + 1] for j in range(family.n_shape)]
    x = family.shape(logn, *args)                              # (B, C, L)
    return profile_ab(x, y[:, None, :], w[:, None, :])[2]


def fit_family_batch(
    family: Family | str,
    levels: np.ndarray,
    means: np.ndarray,
    weights: np.ndarray,
    *,
    grid_points: int | None = None,
    refine_steps: int = 30,
) -> np.ndarray:
    """Fit many curves of one family at once by profiling out (a, b).

    Parameters
    ----------
    family : a :class:`Family` or its name.
    levels : array of shape (n_levels,), the distinct budgets.
    means : array of shape (n_fits, n_levels), weighted mean error at each budget.
    weights : array of shape (n_fits, n_levels), total weight at each budget (0 = absent).
    grid_points : points of the shape grid per shape parameter (default 101 for one shape
        parameter, 15 per axis for two).
    refine_steps : golden-section steps (one shape parameter) or, divided by 5, rounds of
        a 5 x 5 local grid halving its spacing each round (two shape parameters).

    Returns
    -------
    array of shape (n_fits, n_params): the formula's parameters minimising the weighted
    least-squares objective of the budget means (equal, up to a constant, to the per-point
    objective) within the bounds.
    """
    fam = FAMILIES[family] if isinstance(family, str) else family
    levels = np.asarray(levels, dtype=float)
    logn = np.log(levels)
    y = np.atleast_2d(np.asarray(means, dtype=float))
    w = np.atleast_2d(np.asarray(weights, dtype=float))
    lo, hi = fam.box(float(levels.min()), float(levels.max()))
    n_fits = y.shape[0]
    if fam.n_shape == 1:
        pts = grid_points or 101
        grid = np.linspace(lo[0], hi[0], pts)
        sse = _profile(fam, logn, y, w, np.broadcast_to(grid[None, :, None], (n_fits, pts, 1)))
        k = np.argmin(sse, axis=1)
        step = grid[1] - grid[0]
        a_lo = np.clip(grid[k] - step, lo[0], hi[0])
        a_hi = np.clip(grid[k] + step, lo[0], hi[0])
        theta = _golden(lambda t: _profile(fam, logn, y, w, t[:, None, None])[:, 0],
                        a_lo, a_hi, refine_steps)[:, None]
    else:
        pts = grid_points or 15
        g0 = np.linspace(lo[0], hi[0], pts)
        g1 = np.linspace(lo[1], hi[1], pts)
        mesh = np.stack(np.meshgrid(g0, g1, indexing="ij"), axis=-1).reshape(-1, 2)
        sse = _profile(fam, logn, y, w, np.broadcast_to(mesh[None], (n_fits, *mesh.shape)))
        best = mesh[np.argmin(sse, axis=1)]                        # (B, 2)
        step = np.array([g0[1] - g0[0], g1[1] - g1[0]])
        offs = np.linspace(-1.0, 1.0, 5)
        local = np.stack(np.meshgrid(offs, offs, indexing="ij"), axis=-1).reshape(-1, 2)
        for _ in range(max(1, refine_steps // 5)):
            cand = np.clip(best[:, None, :] + local[None] * step, lo, hi)   # (B, 25, 2)
            sse = _profile(fam, logn, y, w, cand)
            best = cand[np.arange(n_fits), np.argmin(sse, axis=1)]
            step = step / 2.0
        theta = best
    args = [theta[:, j:j + 1] for j in range(fam.n_shape)]
    a, b, _ = profile_ab(fam.shape(logn, *args), y, w)
    return fam.to_params(a, b, theta)


def _golden(f: Callable[[np.ndarray], np.ndarray], lo: np.ndarray, hi: np.ndarray,
            steps: int) -> np.ndarray:
    """Vectorised golden-section minimisation of ``f`` on the brackets [lo, hi]."""
    ratio = (np.sqrt(5.0) - 1.0) / 2.0
    c1 = hi - ratio * (hi - lo)
    c2 = lo + ratio * (hi - lo)
    f1, f2 = f(c1), f(c2)
    for _ in range(steps):
        left = f1 <= f2  # the minimum lies in [lo, c2]
        hi = np.where(left, c2, hi)
        lo = np.where(left, lo, c1)
        new_c1 = np.where(left, hi - ratio * (hi - lo), c2)
        new_c2 = np.where(left, c1, lo + ratio * (hi - lo))
        f_new = f(np.where(left, new_c1, new_c2))
        f1, f2 = np.where(left, f_new, f2), np.where(left, f1, f_new)
        c1, c2 = new_c1, new_c2
    return (lo + hi) / 2.0
