"""Accuracy of every method side by side on scikit-learn's digits (real open data).

Protocol (issue 4): stratified 30% holdout; label budgets 20, 50, 100, 200 drawn stratified
from the remaining pool (every class at least once), the rest of the pool unlabeled; 5 repeats;
each method's default hyperparameters. Features are standardised on the pool (what the data
layer's encoder does for numeric columns). Methods with representation "vae" or "mixture" get
the representation fitted once per repeat on the pool's features (never the holdout's, never
labels) through ``semisup.pretrain.fit_representation`` when it exists; otherwise a STAND-IN
(PCA for "vae", a BIC-free GaussianMixture's posteriors on PCA for "mixture") that is labelled
as such in the output. The stand-ins live only here, never in shipped methods.

Also prints two references measured in the same run on the raw (unscaled) pixels:
scikit-learn's LabelSpreading with its kNN kernel (its default RBF kernel, gamma=20, gives
every row one class on raw pixels: 0.100 accuracy) and LogisticRegression with its defaults
(the issue quotes such figures), and the mean fit time of each method as a ratio to
supervised-logreg's.

With ``--scale N`` it instead times mixture EM on N synthetic rows (10 features, 10 classes,
1% labeled) against scikit-learn's GaussianMixture doing the same number of EM iterations on
the same rows, and prints time and peak traced memory as ratios (the memory-bounded claim:
no n x n object, so both grow linearly in N).

Usage: PYTHONPATH=. python benchmarks/bench_methods.py [--repeats 5] [--budgets 20,50,100,200]
       PYTHONPATH=. python benchmarks/bench_methods.py --scale 1000000
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
import warnings

import numpy as np
from sklearn.datasets import load_digits
from sklearn.decomposition import PCA
from sklearn.linear_model import LogisticRegression
from sklearn.mixture import GaussianMixture
from sklearn.model_selection import train_test_split
from sklearn.preprocessing import StandardScaler
from sklearn.semi_supervised import LabelSpreading

from semisup._seeding import derive_rng, derive_seed
from semisup.methods import MixtureEMClassifier, align_proba, get_method, list_methods

SEED = 2024


def stratified_draw(y_pool: np.ndarray, budget: int, rng: np.random.Generator) -> np.ndarray:
    """Indices of ``budget`` pool rows: one per class first, the rest proportional at random."""
    classes = np.unique(y_pool)
    first = np.array([rng.choice(np.flatnonzero(y_pool == c)) for c in classes])
    rest = np.setdiff1d(np.arange(y_pool.size), first)
    extra, _ = train_test_split(rest, train_size=budget - first.size, stratify=y_pool[rest],
                                random_state=int(rng.integers(2**31)))
    return np.concatenate([first, extra])


def representations(X_pool: np.ndarray, X_hold: np.ndarray, seed: int):
    """(vae features, mixture features, label of what was used)."""
    try:
        from semisup.pretrain import fit_representation
    except ImportError:
        fit_representation = None
    if fit_representation is not None:
        vae, _ = fit_representation("vae", X_pool.astype(np.float32), seed=seed)
        note = "semisup.pretrain.fit_representation defaults"
        try:
            mix, _ = fit_representation("mixture", X_pool.astype(np.float32), seed=seed)
        except ValueError as exc:  # ill-defined covariance with the default ridge
            mix, _ = fit_representation("mixture", X_pool.astype(np.float32), seed=seed,
                                        params={"reg_covar": 1e-2})
            note += (f" (mixture failed with its default reg_covar: {str(exc)[:60]}...; "
                     "refitted with reg_covar=1e-2)")
        return ((vae.transform(X_pool.astype(np.float32)),
                 vae.transform(X_hold.astype(np.float32))),
                (mix.transform(X_pool.astype(np.float32)),
                 mix.transform(X_hold.astype(np.float32))),
                note)
    pca = PCA(n_components=20, whiten=True, random_state=seed).fit(X_pool)
    Zp, Zh = pca.transform(X_pool), pca.transform(X_hold)
    gm = GaussianMixture(30, covariance_type="diag", random_state=seed).fit(Zp)
    return ((Zp, Zh), (gm.predict_proba(Zp), gm.predict_proba(Zh)),
            "STAND-IN: PCA(20, whitened) for vae; GaussianMixture(30, diag) posteriors on it "
            "for mixture")


def _measure(fn):
    tracemalloc.start()
    start = time.perf_counter()
    out = fn()
    seconds = time.perf_counter() - start
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return out, seconds, peak


def scale_check(n_rows: int, n_iter: int = 20) -> None:
    """Mixture EM on ``n_rows`` rows against GaussianMixture, same iterations, same rows."""
    rng = derive_rng(SEED, "scale", n_rows)
    d, n_classes = 10, 10
    centres = rng.normal(scale=3.0, size=(n_classes, d))
    y = rng.integers(n_classes, size=n_rows)
    X = centres[y] + rng.normal(size=(n_rows, d))
    y_partial = np.where(rng.random(n_rows) < 0.01, y, -1)
    data_mb = X.nbytes / 2**20
    for cov in ("full", "diag"):
        em = MixtureEMClassifier(covariance_type=cov, unlabeled_weight=1.0, tol=0.0,
                                 max_iter=n_iter)
        gm = GaussianMixture(n_classes, covariance_type=cov, tol=0.0, max_iter=n_iter,
                             init_params="random_from_data", random_state=0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            _, t_em, m_em = _measure(lambda em=em: em.fit(X, y_partial))
            _, t_gm, m_gm = _measure(lambda gm=gm: gm.fit(X))
        acc = float(np.mean(em.predict(X) == y))
        print(f"scale n={n_rows} d={d} K={n_classes} cov={cov} iters={n_iter}: mixture EM "
              f"{t_em:.2f}s peak {m_em / 2**20:.0f} MB; GaussianMixture {t_gm:.2f}s peak "
              f"{m_gm / 2**20:.0f} MB; time ratio {t_em / t_gm:.2f}, memory ratio "
              f"{m_em / m_gm:.2f}; data {data_mb:.0f} MB; EM accuracy {acc:.3f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=int, default=0, help="rows for the EM scale check")
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--budgets", default="20,50,100,200")
    parser.add_argument("--methods", default="", help="comma list (default: every method)")
    args = parser.parse_args()
    if args.scale:
        scale_check(args.scale)
        return
    budgets = [int(b) for b in args.budgets.split(",")]
    names = args.methods.split(",") if args.methods else [s.name for s in list_methods()]

    X_all, y_all = load_digits(return_X_y=True)
    n_classes = 10
    refs = ["ref: sklearn LabelSpreading(kernel=knn)", "ref: sklearn LogisticRegression()"]
    acc = {name: {b: [] for b in budgets} for name in [*names, *refs]}
    seconds = {name: [] for name in names}
    used = ""
    for repeat in range(args.repeats):
        idx_pool, idx_hold = train_test_split(
            np.arange(y_all.size), test_size=0.3, stratify=y_all,
            random_state=derive_seed(SEED, "holdout", repeat))
        scaler = StandardScaler().fit(X_all[idx_pool])
        X_pool, X_hold = scaler.transform(X_all[idx_pool]), scaler.transform(X_all[idx_hold])
        y_pool, y_hold = y_all[idx_pool], y_all[idx_hold]
        (vae_p, vae_h), (mix_p, mix_h), used = representations(
            X_pool, X_hold, derive_seed(SEED, "pretrain", repeat))
        feats = {"raw": (X_pool, X_hold), "vae": (vae_p, vae_h), "mixture": (mix_p, mix_h)}
        draw_rng = derive_rng(SEED, "draw", repeat)
        order = stratified_draw(y_pool, max(budgets), draw_rng)  # nested budgets
        for b in budgets:
            labeled = order[:b]
            y_partial = np.full_like(y_pool, -1)
            y_partial[labeled] = y_pool[labeled]
            for name in names:
                spec = get_method(name)
                Xp, Xh = feats[spec.representation]
                est = spec.build(spec.default_params, derive_seed(SEED, name, repeat, b))
                start = time.perf_counter()
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    est.fit(Xp, y_partial)
                seconds[name].append(time.perf_counter() - start)
                proba = align_proba(est.predict_proba(Xh), est.classes_, n_classes)
                acc[name][b].append(float(np.mean(proba.argmax(1) == y_hold)))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                ls = LabelSpreading(kernel="knn").fit(X_all[idx_pool], y_partial)
                lr = LogisticRegression().fit(X_all[idx_pool][labeled], y_pool[labeled])
            acc["ref: sklearn LabelSpreading(kernel=knn)"][b].append(
                float(np.mean(ls.predict(X_all[idx_hold]) == y_hold)))
            acc["ref: sklearn LogisticRegression()"][b].append(
                float(np.mean(lr.predict(X_all[idx_hold]) == y_hold)))

    base = np.mean(seconds.get("supervised-logreg", [np.nan]))
    print(f"representation: {used}")
    print(f"digits: {y_all.size} rows, holdout 30%, repeats {args.repeats}, default params")
    print()
    header = "| method | representation | " + " | ".join(f"{b} labels" for b in budgets)
    print(header + " | fit s (mean) | x supervised-logreg |")
    print("|" + "---|" * (len(budgets) + 4))
    for name, per_budget in acc.items():
        cells = " | ".join(
            f"{np.mean(v):.3f} ± {np.std(v):.3f}" for v in per_budget.values())
        if name in seconds:
            rep = get_method(name).representation
            s = np.mean(seconds[name])
            print(f"| {name} | {rep} | {cells} | {s:.3f} | {s / base:.1f} |")
        else:
            print(f"| {name} | raw pixels | {cells} | | |")
    print()
    gen = [n for n in names if get_method(n).representation != "raw" or
           get_method(n).family == "generative"]
    sup = [n for n in names if get_method(n).family == "supervised"]
    for b in budgets:
        best_gen = max(gen, key=lambda n: np.mean(acc[n][b])) if gen else None
        best_sup = max(sup, key=lambda n: np.mean(acc[n][b])) if sup else None
        ls = np.mean(acc["label-spreading"][b]) if "label-spreading" in acc else np.nan
        if best_gen and best_sup:
            g, s = np.mean(acc[best_gen][b]), np.mean(acc[best_sup][b])
            verdict = "yes" if g > s and g > ls else "no"
            print(f"budget {b}: best generative-model method {best_gen} {g:.3f}; best supervised "
                  f"{best_sup} {s:.3f}; label-spreading {ls:.3f}; beats both: {verdict}")


if __name__ == "__main__":
    main()
