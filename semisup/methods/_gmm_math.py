"""Pure maths of semi-supervised Gaussian-mixture EM (Nigam et al. 2000, generalised to Gaussians).

Every component belongs to one class. A labeled row may only be explained by its class's
components (its responsibilities are zero elsewhere and soft within the class); an unlabeled
row may be explained by any component. Rows carry a weight in the M-step: 1 for labeled rows,
``lambda`` for unlabeled rows. EM (Dempster, Laird & Rubin 1977) then climbs the weighted
log-likelihood

    L(theta) = sum_{labeled i} log sum_{k in class(y_i)} pi_k N(x_i | mu_k, Sigma_k)
             + lambda * sum_{unlabeled i} log sum_k pi_k N(x_i | mu_k, Sigma_k),

reported divided by the total row weight (a mean, as in scikit-learn's ``lower_bound_``).
Memory is O(n_samples * n_components): nothing is ever n_samples x n_samples.

Covariance layouts follow the usual conventions: ``full`` (K, d, d), ``tied`` (d, d),
``diag`` (K, d), ``spherical`` (K,). ``reg_covar`` is added to every variance after the
M-step (a ridge that keeps covariances positive definite). The Gaussian log-density itself is
:func:`semisup.pretrain.component_log_densities` (one implementation for the package).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import linalg

from ..pretrain import COVARIANCE_TYPES, component_log_densities

__all__ = [
    "COVARIANCE_TYPES",
    "EMResult",
    "e_step",
    "m_step",
    "precision_cholesky",
    "row_logsumexp",
    "run_em",
    "weighted_objective",
]


def row_logsumexp(a: np.ndarray) -> np.ndarray:
    """``log(sum(exp(a), axis=1))`` computed stably (rows of all ``-inf`` give ``-inf``)."""
    top = np.max(a, axis=1)
    safe = np.where(np.isfinite(top), top, 0.0)
    with np.errstate(divide="ignore"):
        return np.log(np.exp(a - safe[:, None]).sum(axis=1)) + safe


def precision_cholesky(covariances: np.ndarray, covariance_type: str) -> np.ndarray:
    """Cholesky factors of the precision matrices (``P`` with ``P @ P.T = inv(Sigma)``).

    Raises ``numpy.linalg.LinAlgError`` when a covariance is not positive definite.
    """
    if covariance_type == "full":
        out = np.empty_like(covariances)
        eye = np.eye(covariances.shape[-1])
        for k, cov in enumerate(covariances):
            chol = linalg.cholesky(cov, lower=True, check_finite=False)
            out[k] = linalg.solve_triangular(chol, eye, lower=True, check_finite=False).T
        return out
    if covariance_type == "tied":
        chol = linalg.cholesky(covariances, lower=True)
        return linalg.solve_triangular(chol, np.eye(covariances.shape[0]), lower=True).T
    if np.any(covariances <= 0.0):
        raise np.linalg.LinAlgError("a variance is not positive")
    return 1.0 / np.sqrt(covariances)


def e_step(
    X: np.ndarray,
    weights: np.ndarray,
    means: np.ndarray,
    prec_chol: np.ndarray,
    covariance_type: str,
    row_class: np.ndarray,
    component_class: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Per-row log-likelihood and log-responsibilities.

    Parameters
    ----------
    row_class : array of shape (n_samples,)
        Class code of each labeled row, ``-1`` for unlabeled rows.
    component_class : array of shape (K,)
        Class code that owns each component.

    Returns
    -------
    row_log_lik : (n_samples,)
        ``log sum_k pi_k N(x_i | k)`` over the components the row may use.
    log_resp : (n_samples, K)
        Log-responsibilities (``-inf`` for components of another class on labeled rows).
    """
    with np.errstate(divide="ignore"):
        log_weights = np.log(weights)
    wlp = component_log_densities(X, means, prec_chol, covariance_type) + log_weights
    labeled = np.flatnonzero(row_class >= 0)
    if labeled.size:
        forbid = component_class[None, :] != row_class[labeled][:, None]  # (n_labeled, K)
        block = wlp[labeled]
        block[forbid] = -np.inf
        wlp[labeled] = block
    row_log_lik = row_logsumexp(wlp)
    with np.errstate(invalid="ignore"):
        log_resp = wlp - row_log_lik[:, None]
    return row_log_lik, log_resp


def weighted_objective(row_log_lik: np.ndarray, sample_weight: np.ndarray) -> float:
    """Weighted mean log-likelihood ``sum_i w_i l_i / sum_i w_i`` (rows of weight 0 ignored)."""
    used = sample_weight > 0
    return float(np.dot(sample_weight[used], row_log_lik[used]) / sample_weight[used].sum())


def m_step(
    X: np.ndarray,
    resp: np.ndarray,
    sample_weight: np.ndarray,
    covariance_type: str,
    reg_covar: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weighted maximum-likelihood mixing weights, means and covariances.

    Row ``i`` contributes ``sample_weight[i] * resp[i, k]`` to component ``k``.

    Returns
    -------
    weights : (K,), means : (K, d), covariances : layout of ``covariance_type``
    """
    r = resp * sample_weight[:, None]  # (n, K)
    nk = r.sum(axis=0) + 10.0 * np.finfo(np.float64).eps
    weights = nk / nk.sum()
    means = (r.T @ X) / nk[:, None]
    K, d = means.shape
    if covariance_type == "tied":
        # sum_k sum_i r_ik (x_i - mu_k)(x_i - mu_k)^T in one pass; centring on the weighted
        # grand mean first keeps the subtraction well conditioned.
        centre = (nk @ means) / nk.sum()
        Xc = X - centre
        Mc = means - centre
        cov = (r.sum(axis=1) * Xc.T) @ Xc - (nk[:, None] * Mc).T @ Mc
        cov /= nk.sum()
        cov = 0.5 * (cov + cov.T)
        cov.flat[:: d + 1] += reg_covar
        return weights, means, cov
    if covariance_type == "full":
        covs = np.empty((K, d, d))
        for k in range(K):
            diff = X - means[k]
            covs[k] = (r[:, k] * diff.T) @ diff
        covs /= nk[:, None, None]
        for k in range(K):
            covs[k].flat[:: d + 1] += reg_covar
        return weights, means, covs
    var = np.empty((K, d))
    for k in range(K):
        var[k] = r[:, k] @ ((X - means[k]) ** 2) / nk[k]
    if covariance_type == "diag":
        return weights, means, var + reg_covar
    if covariance_type == "spherical":
        return weights, means, var.mean(axis=1) + reg_covar
    raise ValueError(f"covariance_type {covariance_type!r} is not one of {COVARIANCE_TYPES}")


@dataclass
class EMResult:
    """Parameters and trace of one EM run."""

    weights: np.ndarray
    means: np.ndarray
    covariances: np.ndarray
    prec_chol: np.ndarray
    lower_bound: float
    n_iter: int
    converged: bool
    history: list[float] = field(default_factory=list)


def run_em(
    X: np.ndarray,
    row_class: np.ndarray,
    component_class: np.ndarray,
    sample_weight: np.ndarray,
    weights: np.ndarray,
    means: np.ndarray,
    covariances: np.ndarray,
    *,
    covariance_type: str = "full",
    reg_covar: float = 1e-6,
    tol: float = 1e-3,
    max_iter: int = 100,
) -> EMResult:
    """EM from the given initial parameters until the objective gains less than ``tol``.

    Iteration ``t`` computes the objective under the current parameters (E-step), then
    updates them (M-step); ``history[t]`` is that objective, so ``history`` is the sequence
    scikit-learn's ``GaussianMixture`` reports as ``lower_bound_`` one iteration at a time.
    The returned ``lower_bound`` is the last objective.
    """
    prec_chol = precision_cholesky(covariances, covariance_type)
    history: list[float] = []
    lower_bound = -np.inf
    converged = False
    n_iter = 0
    for n_iter in range(1, max_iter + 1):  # noqa: B007  (n_iter is reported)
        previous = lower_bound
        row_log_lik, log_resp = e_step(
            X, weights, means, prec_chol, covariance_type, row_class, component_class
        )
        lower_bound = weighted_objective(row_log_lik, sample_weight)
        history.append(lower_bound)
        resp = np.exp(log_resp)
        resp[~np.isfinite(resp)] = 0.0
        weights, means, covariances = m_step(X, resp, sample_weight, covariance_type, reg_covar)
        prec_chol = precision_cholesky(covariances, covariance_type)
        if abs(lower_bound - previous) < tol:
            converged = True
            break
    return EMResult(weights, means, covariances, prec_chol, lower_bound, n_iter, converged,
                    history)
