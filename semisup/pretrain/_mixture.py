"""MixtureTransformer: a Gaussian mixture chosen by BIC, fitted with scikit-learn's
GaussianMixture, giving posterior responsibilities and/or per-component log-densities."""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Callable
from typing import Any

import numpy as np
from scipy.special import logsumexp
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.mixture import GaussianMixture
from sklearn.utils.validation import check_is_fitted
from threadpoolctl import threadpool_limits

from .._errors import ConfigError, DataError
from .._rules import Choice, Integer, Number, check_rules
from .._seeding import derive_seed
from ._validation import checked_rows

__all__ = ["MixtureTransformer", "component_log_densities"]

logger = logging.getLogger(__name__)

COVARIANCE_TYPES = ("full", "tied", "diag", "spherical")
FEATURES = ("posterior", "logdensity", "both")
#: Parameters with a rule of their own (the component counts and covariance types, which a
#: grid may give instead, are checked together in ``_check_params``).
_PARAMETER_RULES = {
    "features": Choice(FEATURES, words="choose one of {}"),
    "n_threads": Integer(1, optional=True),
    "max_selection_rows": Integer(1),
    "chunk_rows": Integer(1),
    "max_iter": Integer(1),
    "n_init": Integer(1),
    "tol": Number(0.0, low_open=True),
    "reg_covar": Number(0.0),
    "random_state": Integer(0, optional=True),
}
_LOG_2PI = math.log(2.0 * math.pi)


def component_log_densities(
    X: np.ndarray, means: np.ndarray, precisions_cholesky: np.ndarray, covariance_type: str
) -> np.ndarray:
    """log N(x | mean_k, Sigma_k) for every row and component, shape (n_samples, k).

    ``precisions_cholesky`` is in scikit-learn's GaussianMixture layout: full (k, d, d),
    tied (d, d), diag (k, d), spherical (k,); the upper-triangular factor L with
    Sigma^-1 = L L^T, so log N = -1/2 (d log 2 pi + ||(x - mean) L||^2) + log det L.
    Memory is O(n_samples * (d + k)).
    """
    X = np.asarray(X, dtype=np.float64)
    n, d = X.shape
    k = means.shape[0]
    if covariance_type == "full":
        out = np.empty((n, k))
        for j in range(k):
            chol = precisions_cholesky[j]
            y = X @ chol - means[j] @ chol  # (n, d)
            out[:, j] = -0.5 * np.einsum("ij,ij->i", y, y) + np.sum(np.log(np.diag(chol)))
    elif covariance_type == "tied":
        chol = precisions_cholesky
        y = X @ chol  # (n, d)
        centres = means @ chol  # (k, d)
        sq = (
            np.einsum("ij,ij->i", y, y)[:, None]
            - 2.0 * y @ centres.T
            + np.einsum("ij,ij->i", centres, centres)[None, :]
        )
        out = -0.5 * sq + np.sum(np.log(np.diag(chol)))
    elif covariance_type == "diag":
        prec = precisions_cholesky**2  # (k, d)
        sq = (
            (X**2) @ prec.T - 2.0 * X @ (means * prec).T + np.sum(means**2 * prec, axis=1)[None, :]
        )
        out = -0.5 * sq + np.sum(np.log(precisions_cholesky), axis=1)[None, :]
    elif covariance_type == "spherical":
        prec = precisions_cholesky**2  # (k,)
        sq = (
            np.einsum("ij,ij->i", X, X)[:, None]
            - 2.0 * X @ means.T
            + np.einsum("ij,ij->i", means, means)[None, :]
        )
        out = -0.5 * sq * prec[None, :] + d * np.log(precisions_cholesky)[None, :]
    else:
        raise ConfigError(
            f"covariance_type={covariance_type!r} is not allowed; "
            f"choose one of {', '.join(COVARIANCE_TYPES)}"
        )
    return out - 0.5 * d * _LOG_2PI


class MixtureTransformer(TransformerMixin, BaseEstimator):
    """Gaussian mixture representation with the component count and covariance type chosen
    by BIC (Schwarz 1978) over a grid, each candidate fitted by scikit-learn's
    ``GaussianMixture``.

    On more than ``max_selection_rows`` rows the grid is scored on a seeded subsample; the
    chosen model is then refitted on all rows, warm-started from the subsample fit, so
    memory stays O(n_samples * (n_features + n_components)). ``transform`` works in chunks of
    ``chunk_rows`` rows.

    Parameters
    ----------
    n_components : int or None
        Fix the number of components; None selects it from ``n_components_grid``.
    covariance_type : str or None
        Fix the covariance type (full, tied, diag, spherical); None selects it from
        ``covariance_types``.
    features : {"posterior", "logdensity", "both"}
        ``transform`` output: responsibilities p(k | x), per-component log N(x | k) (without
        the mixing weight), or both side by side.
    max_iter, n_init, tol, reg_covar : passed to GaussianMixture (same defaults).
    chunk_rows : int
        Rows per block in ``transform`` / ``score_samples``.
    n_threads : int or None
        BLAS / OpenMP threads during fit and transform (threadpoolctl); None leaves them.
        One thread is much faster than two on a busy 2-core machine (oversubscription).
    random_state : int or None
        Seed of every GaussianMixture fit and of the selection subsample.

    Attributes
    ----------
    n_components_, covariance_type_ : chosen model
    weights_, means_, covariances_, precisions_cholesky_ : its parameters (GaussianMixture's)
    selection_ : list of dict (n_components, covariance_type, bic) for each candidate scored
    n_iter_, converged_ : EM steps and convergence of the final fit
    diagnostics_ : dict
    """

    def __init__(
        self,
        n_components: int | None = None,
        covariance_type: str | None = None,
        n_components_grid: tuple[int, ...] = (1, 2, 3, 4, 5, 6, 8, 10),
        covariance_types: tuple[str, ...] = ("full", "diag"),
        features: str = "posterior",
        max_selection_rows: int = 20000,
        max_iter: int = 100,
        n_init: int = 1,
        tol: float = 1e-3,
        reg_covar: float = 1e-6,
        chunk_rows: int = 65536,
        n_threads: int | None = 1,
        random_state: int | None = 0,
    ) -> None:
        self.n_components = n_components
        self.covariance_type = covariance_type
        self.n_components_grid = n_components_grid
        self.covariance_types = covariance_types
        self.features = features
        self.max_selection_rows = max_selection_rows
        self.max_iter = max_iter
        self.n_init = n_init
        self.tol = tol
        self.reg_covar = reg_covar
        self.chunk_rows = chunk_rows
        self.n_threads = n_threads
        self.random_state = random_state

    def _check_params(self) -> tuple[list[int], list[str]]:
        check_rules(self, _PARAMETER_RULES)
        if self.n_components is not None:
            counts = [self.n_components]
        else:
            counts = list(self.n_components_grid)
        if not counts or not all(
            isinstance(c, (int, np.integer)) and not isinstance(c, bool) and c >= 1 for c in counts
        ):
            raise ConfigError(
                f"n_components={self.n_components!r} / n_components_grid="
                f"{self.n_components_grid!r} is not allowed; give positive integers"
            )
        types = (
            [self.covariance_type]
            if self.covariance_type is not None
            else list(self.covariance_types)
        )
        bad = [t for t in types if t not in COVARIANCE_TYPES]
        if not types or bad:
            raise ConfigError(
                f"covariance type {bad[0] if bad else types!r} is not allowed; "
                f"choose from {', '.join(COVARIANCE_TYPES)}"
            )
        return [int(c) for c in counts], types

    def _gm(self, k: int, cov: str, **extra: Any) -> GaussianMixture:
        return GaussianMixture(
            n_components=k,
            covariance_type=cov,
            max_iter=self.max_iter,
            n_init=self.n_init,
            tol=self.tol,
            reg_covar=self.reg_covar,
            random_state=self.random_state,
            **extra,
        )

    def fit(self, X: Any, y: Any = None, *,
            on_step: Callable[[int, int], None] | None = None) -> MixtureTransformer:
        """Select and fit the mixture on the rows of ``X`` (labels are ignored).

        ``on_step(done, total)``, if given, is called after each candidate of the grid and
        after the final fit (a study's progress).
        """
        counts, types = self._check_params()
        with threadpool_limits(limits=self.n_threads):
            return self._fit(X, counts, types, on_step)

    def n_steps(self) -> int:
        """Fits :meth:`fit` makes (grid candidates plus the refit): the ``total`` of on_step."""
        counts, types = self._check_params()
        return len(counts) * len(types) + 1

    def _fit(self, X: Any, counts: list[int], types: list[str],
             on_step: Callable[[int, int], None] | None = None) -> MixtureTransformer:
        started = time.perf_counter()
        X = checked_rows(self, X, dtype=[np.float64, np.float32], reset=True)
        n_rows = X.shape[0]
        fitted_counts = [c for c in counts if c <= n_rows]
        if not fitted_counts:
            raise ConfigError(
                f"n_components={counts[0]} is more than the {n_rows} rows given; "
                "give fewer components or more rows"
            )
        subsampled = n_rows > self.max_selection_rows
        if subsampled:
            seed = self.random_state if self.random_state is not None else 0
            rng = np.random.default_rng(derive_seed(seed, "mixture", "selection-rows"))
            rows = np.sort(rng.choice(n_rows, size=self.max_selection_rows, replace=False))
            X_sel = X[rows]
        else:
            X_sel = X
        grid = [(k, t) for t in types for k in fitted_counts]
        n_steps = len(counts) * len(types) + 1

        def step(done: int) -> None:
            if on_step is not None:
                on_step(done, n_steps)

        selection: list[dict[str, Any]] = []
        best: GaussianMixture | None = None
        best_bic = math.inf
        for k, cov in grid:
            try:
                gm = self._gm(k, cov).fit(X_sel)
            except ValueError as exc:
                # A collapsed component (singular covariance) rules this candidate out;
                # the others can still be scored.
                if len(grid) == 1:
                    raise DataError(
                        f"the {k}-component {cov} mixture cannot be fitted ({exc}); "
                        "raise reg_covar, use fewer components or covariance_type='diag'"
                    ) from None
                selection.append({"n_components": k, "covariance_type": cov, "bic": None,
                                  "error": str(exc).split(".")[0]})
                continue
            bic = float(gm.bic(X_sel)) if len(grid) > 1 else None
            selection.append({"n_components": k, "covariance_type": cov, "bic": bic})
            step(len(selection))
            if best is None or (bic is not None and bic < best_bic):
                best, best_bic = gm, bic
        if best is None:
            raise DataError(
                "no mixture in the grid could be fitted (every candidate had a collapsed "
                "component); raise reg_covar or choose covariance_types=('diag',)"
            )
        selection_seconds = time.perf_counter() - started
        if subsampled:
            final = self._gm(
                best.n_components,
                best.covariance_type,
                weights_init=best.weights_,
                means_init=best.means_,
                precisions_init=best.precisions_,
                init_params="random_from_data",
            ).fit(X)
        else:
            final = best
        step(n_steps)
        self.n_components_ = int(final.n_components)
        self.covariance_type_ = str(final.covariance_type)
        self.weights_ = final.weights_
        self.means_ = final.means_
        self.covariances_ = final.covariances_
        self.precisions_cholesky_ = final.precisions_cholesky_
        self.selection_ = selection
        self.n_iter_ = int(final.n_iter_)
        self.converged_ = bool(final.converged_)
        self.diagnostics_ = {
            "kind": "mixture",
            "n_components": self.n_components_,
            "covariance_type": self.covariance_type_,
            "selection": selection,
            "selection_rows": int(X_sel.shape[0]),
            "train_loglik": float(final.lower_bound_),
            "converged": bool(final.converged_),
            "n_iter": int(final.n_iter_),
            "n_rows": int(n_rows),
            "seconds": time.perf_counter() - started,
            "selection_seconds": selection_seconds,
            "loaded_from_cache": False,
        }
        logger.info(
            "mixture fitted on %d x %d in %.1fs: %d %s components (of %d candidates)",
            n_rows,
            X.shape[1],
            self.diagnostics_["seconds"],
            self.n_components_,
            self.covariance_type_,
            len(grid),
        )
        return self

    # -- using a fitted model ----------------------------------------------------------------

    def _weighted_log_densities(self, X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        dens = component_log_densities(
            X, self.means_, self.precisions_cholesky_, self.covariance_type_
        )
        return dens, dens + np.log(self.weights_)[None, :]

    def _chunks(self, X: Any):
        check_is_fitted(self, "means_")
        X = checked_rows(self, X, dtype=[np.float64, np.float32], reset=False)
        for start in range(0, X.shape[0], self.chunk_rows):
            with threadpool_limits(limits=self.n_threads):
                part = self._weighted_log_densities(X[start : start + self.chunk_rows])
            yield part

    def transform(self, X: Any) -> np.ndarray:
        """Posterior responsibilities and/or per-component log-densities, chunk by chunk."""
        parts = []
        for dens, weighted in self._chunks(X):
            if self.features == "logdensity":
                parts.append(dens)
                continue
            posterior = np.exp(weighted - logsumexp(weighted, axis=1, keepdims=True))
            parts.append(
                posterior if self.features == "posterior" else np.hstack([posterior, dens])
            )
        if not parts:
            return np.zeros((0, self._n_features_out))
        return np.vstack(parts)

    def predict_proba(self, X: Any) -> np.ndarray:
        """Posterior responsibilities p(k | x), shape (n_samples, n_components_)."""
        parts = [np.exp(w - logsumexp(w, axis=1, keepdims=True)) for _, w in self._chunks(X)]
        return np.vstack(parts)

    def score_samples(self, X: Any) -> np.ndarray:
        """Per-row log-likelihood log p(x) in nats."""
        return np.concatenate([logsumexp(w, axis=1) for _, w in self._chunks(X)])

    def score(self, X: Any, y: Any = None) -> float:
        """Mean per-row log-likelihood in nats."""
        return float(np.mean(self.score_samples(X)))

    @property
    def _n_features_out(self) -> int:
        k = self.n_components_
        return 2 * k if self.features == "both" else k

    def get_feature_names_out(self, input_features: Any = None) -> np.ndarray:
        check_is_fitted(self, "means_")
        k = self.n_components_
        post = [f"mixture_posterior{j}" for j in range(k)]
        dens = [f"mixture_logdensity{j}" for j in range(k)]
        names = {"posterior": post, "logdensity": dens, "both": post + dens}[self.features]
        return np.asarray(names, dtype=object)
