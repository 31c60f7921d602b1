"""Speed of the plan's bootstrap: all resamples fitted at once against one-by-one refits.

Reference measured in the same run: refitting each bootstrap resample with
scipy.optimize.least_squares (the full-data fit's solver, warm-started). Prints the ratio and
the largest difference in the fitted objective, so speed is never bought with accuracy.

    PYTHONPATH=. python benchmarks/bench_plan_bootstrap.py
"""

from __future__ import annotations

import time

import numpy as np

from semisup.plan import (
    bootstrap_curve,
    budget_weights,
    fit_learning_curve,
    fit_power_law_batch,
    power_law,
)


def main(n_boot: int = 200, repeats: int = 5) -> None:
    rng = np.random.default_rng(0)
    budgets = np.array([20, 40, 80, 160, 320, 640], dtype=float)
    n = np.repeat(budgets, repeats)
    rep = np.tile(np.arange(repeats), budgets.size)
    err = np.clip(power_law(n, 0.05, 2.0, 0.6) + rng.normal(0, 0.015, n.size), 0, 1)
    grid = np.geomspace(20, 2560, 80)
    full = fit_learning_curve(n, err)

    t0 = time.perf_counter()
    band = bootstrap_curve(n, err, rep, grid, n_boot=n_boot, seed=1, fit=full)
    t_batch = time.perf_counter() - t0

    # Reference: the same resamples refitted one by one with least squares.
    rng_ref = np.random.default_rng(1)
    picks = rng_ref.choice(repeats, size=(n_boot, repeats), replace=True)
    worst = 0.0
    t0 = time.perf_counter()
    for i in range(n_boot):
        idx = np.concatenate([np.flatnonzero(rep == r) for r in picks[i]])
        fit_learning_curve(n[idx], err[idx], start=full.params, kind="power_law", tol=1e-8)
    t_ref = time.perf_counter() - t0
    for i in range(min(n_boot, 40)):
        idx = np.concatenate([np.flatnonzero(rep == r) for r in picks[i]])
        ref = fit_learning_curve(n[idx], err[idx], kind="power_law")
        wi = budget_weights(n[idx])

        def sse(p, idx=idx, wi=wi):
            return float(np.sum(wi * (power_law(n[idx], *p) - err[idx]) ** 2))

        # the batch fit of this one resample (per-budget weighted means and weights)
        levels = np.unique(n[idx])
        means = np.array([[err[idx][n[idx] == v].mean() for v in levels]])
        wts = np.array([[wi[n[idx] == v].sum() for v in levels]])
        p = fit_power_law_batch(levels, means, wts)[0]
        worst = max(worst, (sse(p) - sse(ref.params)) / max(sse(ref.params), 1e-300))
    print(f"bootstrap of {n_boot} resamples, {grid.size} grid budgets")
    print(f"  batch (profiled, vectorised): {t_batch * 1e3:8.1f} ms")
    print(f"  reference (least_squares x {n_boot}): {t_ref * 1e3:8.1f} ms")
    print(f"  speed-up: {t_ref / t_batch:.1f}x")
    print(f"  worst relative objective excess of the batch fit over least squares "
          f"(40 resamples): {worst:.2e}")
    print(f"  interval width at 640 / 2560 labels: "
          f"{np.interp(640, grid, band.high - band.low):.4f} / "
          f"{(band.high - band.low)[-1]:.4f}")


if __name__ == "__main__":
    main()
