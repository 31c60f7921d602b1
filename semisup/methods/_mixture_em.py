"""The semi-supervised Gaussian-mixture EM classifier (Nigam et al. 2000, for Gaussians)."""

from __future__ import annotations

import logging
import warnings
from typing import ClassVar

import numpy as np

from .._errors import ConfigError, FitWarning
from .._rules import Choice, Integer, Number, Refused, check_rules
from .._seeding import int_seed
from ._base import PartiallyLabeledClassifier
from ._gmm_math import COVARIANCE_TYPES, EMResult, e_step, run_em
from ._spec import MethodUnavailable, Variant, register_variants

__all__ = ["MixtureEMClassifier"]

logger = logging.getLogger(__name__)


#: One declared table of parameter rules: name -> the values it takes.
_PARAMETER_RULES = {
    "n_components_per_class": Integer(1),
    "covariance_type": Choice(COVARIANCE_TYPES, words="give one of {}"),
    "unlabeled_weight": Number(0.0, 1.0),
    "reg_covar": Number(0.0),
    "tol": Number(0.0),
    "max_iter": Integer(1),
    "n_init": Integer(1),
}


def _refusal(name: str, value: object, refused: Refused) -> ConfigError:
    return ConfigError(f"MixtureEMClassifier: parameter {name}={value!r} is not allowed; "
                       f"{refused.allowed}")


class MixtureEMClassifier(PartiallyLabeledClassifier):
    """Gaussian mixture fitted by EM on labeled and unlabeled rows; classes own components.

    Each labeled class owns ``n_components_per_class`` Gaussian components. Labeled rows are
    explained only by their class's components (soft within the class); unlabeled rows
    (``y == -1``) by any component, and count ``unlabeled_weight`` (lambda) times in the
    M-step, as in EM-lambda of Nigam et al. (2000). A row's class probability is the summed
    posterior of that class's components.

    Parameters
    ----------
    n_components_per_class : int
        Components owned by each class.
    covariance_type : {"full", "tied", "diag", "spherical"}
    unlabeled_weight : float in [0, 1]
        Lambda: 0 ignores unlabeled rows (the supervised Gaussian classifier, QDA with
        maximum-likelihood covariances), 1 counts them like labeled rows.
    reg_covar : float
        Ridge added to every variance after each M-step.
    tol : float
        Stop when the mean weighted log-likelihood gains less than this.
    max_iter : int
        Most EM iterations per restart.
    n_init : int
        Restarts (different seeds for the within-class split of components); the run with the
        highest objective is kept. With one component per class the start is deterministic,
        so a single run is made.
    random_state : int, RandomState or None

    Attributes
    ----------
    classes_ : ndarray of shape (n_classes,)
    weights_ : (K,), means_ : (K, n_features), covariances_ : layout of ``covariance_type``
    precisions_cholesky_ : same layout
    component_class_ : (K,)
        Class code (index into ``classes_``) of each component.
    lower_bound_ : float
        Weighted mean log-likelihood of the best run (last E-step).
    n_iter_ : int
    converged_ : bool

    References
    ----------
    Nigam, McCallum, Thrun & Mitchell (2000), Text classification from labeled and unlabeled
    documents using EM. Machine Learning 39.
    Dempster, Laird & Rubin (1977), Maximum likelihood from incomplete data via the EM
    algorithm. JRSS B 39.
    """

    uses_unlabeled = True
    # Defaults chosen on scikit-learn's digits (benchmarks/bench_methods.py, 3 repeats, budgets
    # 20-200): a small lambda keeps the unlabeled rows from dragging components away from their
    # classes; tied covariances suit the wide encoded table (the raw variant's override below),
    # full ones the small latent space. One start (n_init=1): with 2 components per class a
    # second restart gained 0.005-0.03 accuracy on digits (3 repeats, VAE latent) at twice the
    # fit time; pass {"n_init": 2} in the params to trade time for it.
    tuning_defaults: ClassVar[dict] = {"n_components_per_class": 1, "covariance_type": "full",
                                       "unlabeled_weight": 0.1, "reg_covar": 1e-3}

    @staticmethod
    def tuning_space(trial) -> dict:
        return _em_space(trial, ["full", "tied", "diag"], (1e-4, 1e-1))

    def __init__(
        self,
        n_components_per_class: int = 1,
        covariance_type: str = "full",
        unlabeled_weight: float = 1.0,
        reg_covar: float = 1e-3,
        tol: float = 1e-3,
        max_iter: int = 100,
        n_init: int = 1,
        random_state=None,
    ):
        self.n_components_per_class = n_components_per_class
        self.covariance_type = covariance_type
        self.unlabeled_weight = unlabeled_weight
        self.reg_covar = reg_covar
        self.tol = tol
        self.max_iter = max_iter
        self.n_init = n_init
        self.random_state = random_state

    def _check_params(self) -> None:
        check_rules(self, _PARAMETER_RULES, error=_refusal)

    def _fit_encoded(self, X: np.ndarray, y_code: np.ndarray) -> None:
        self._check_params()
        lam = float(self.unlabeled_weight)
        if lam == 0.0:
            keep = y_code >= 0  # rows of weight 0 change nothing: drop them
            X, y_code = X[keep], y_code[keep]
        sample_weight = np.where(y_code >= 0, 1.0, lam)
        n_classes = self.classes_.size
        m = int(self.n_components_per_class)
        component_class = np.repeat(np.arange(n_classes), m)
        rng = np.random.default_rng(int_seed(self.random_state))
        n_runs = int(self.n_init) if m > 1 else 1
        best: EMResult | None = None
        for _ in range(n_runs):
            weights, means, covs = _initial_parameters(
                X, y_code, sample_weight, n_classes, m, self.covariance_type,
                float(self.reg_covar), rng,
            )
            try:
                result = run_em(
                    X, y_code, component_class, sample_weight, weights, means, covs,
                    covariance_type=self.covariance_type, reg_covar=float(self.reg_covar),
                    tol=float(self.tol), max_iter=int(self.max_iter),
                )
            except np.linalg.LinAlgError:
                raise MethodUnavailable(
                    f"MixtureEMClassifier: a {self.covariance_type} covariance became singular "
                    f"with reg_covar={self.reg_covar!r}; raise reg_covar or use "
                    "covariance_type='diag'/'tied'"
                ) from None
            if best is None or result.lower_bound > best.lower_bound:
                best = result
        assert best is not None
        if not best.converged:
            warnings.warn(
                f"MixtureEMClassifier: EM did not converge in max_iter={self.max_iter} "
                f"iterations (tol={self.tol}); raise max_iter or tol",
                FitWarning,
                stacklevel=3,
            )
        self.weights_ = best.weights
        self.means_ = best.means
        self.covariances_ = best.covariances
        self.precisions_cholesky_ = best.prec_chol
        self.component_class_ = component_class
        self.lower_bound_ = best.lower_bound
        self.n_iter_ = best.n_iter
        self.converged_ = best.converged

    def _proba_encoded(self, X: np.ndarray) -> np.ndarray:
        no_labels = np.full(X.shape[0], -1, dtype=np.int64)
        _, log_resp = e_step(
            X, self.weights_, self.means_, self.precisions_cholesky_, self.covariance_type,
            no_labels, self.component_class_,
        )
        resp = np.exp(log_resp)
        proba = np.zeros((X.shape[0], self.classes_.size))
        np.add.at(proba.T, self.component_class_, resp.T)
        return proba


def _em_space(trial, covariance_types: list[str], reg_range: tuple[float, float]) -> dict:
    # At most 2 components per class: 3 tripled the tuning time of a demo cell for no gain
    # in the digits sweep.
    return {
        "n_components_per_class": trial.suggest_int("n_components_per_class", 1, 2),
        "covariance_type": trial.suggest_categorical("covariance_type", covariance_types),
        "unlabeled_weight": trial.suggest_float("unlabeled_weight", 0.01, 1.0, log=True),
        "reg_covar": trial.suggest_float("reg_covar", *reg_range, log=True),
    }


def _raw_table_space(trial) -> dict:
    """Search space on the wide encoded table (no full covariances: too many parameters)."""
    return _em_space(trial, ["diag", "spherical", "tied"], (1e-3, 1.0))


register_variants(
    MixtureEMClassifier,
    raw=Variant("mixture-em", "Semi-supervised Gaussian-mixture EM on the encoded table",
                family="generative", params={"covariance_type": "tied", "reg_covar": 1e-1},
                search_space=_raw_table_space, default=True),
    vae=Variant("latent-mixture-em", "Semi-supervised Gaussian-mixture EM in the VAE latent "
                "space", family="generative", default=True),
)


def _weighted_covariance(X: np.ndarray, w: np.ndarray, covariance_type: str, K: int,
                         reg: float) -> np.ndarray:
    """The weighted covariance of all rows, laid out for ``K`` components of the given type."""
    mean = (w @ X) / w.sum()
    diff = X - mean
    if covariance_type in ("full", "tied"):
        cov = (w * diff.T) @ diff / w.sum()
        cov.flat[:: X.shape[1] + 1] += max(reg, 1e-6 * max(float(np.trace(cov)), 1e-12))
        return cov if covariance_type == "tied" else np.repeat(cov[None], K, axis=0)
    var = (w @ diff**2) / w.sum() + max(reg, 1e-12)
    if covariance_type == "diag":
        return np.repeat(var[None], K, axis=0)
    return np.full(K, var.mean())


def _initial_parameters(X, y_code, sample_weight, n_classes, m, covariance_type, reg, rng):
    """Start: component means from the labeled rows, every covariance the pooled covariance.

    With ``m`` components per class the class's labeled rows are split by a k-means++ style
    choice of ``m`` seeds (random within the class); a class with fewer labeled rows than
    components adds jittered copies of its rows.
    """
    d = X.shape[1]
    covs = _weighted_covariance(X, sample_weight, covariance_type, n_classes * m, reg)
    scale = np.sqrt(np.maximum((sample_weight @ (X - X.mean(0)) ** 2) / sample_weight.sum(),
                               1e-12))
    means = np.empty((n_classes * m, d))
    weights = np.empty(n_classes * m)
    for c in range(n_classes):
        Xc = X[y_code == c]
        weights[c * m:(c + 1) * m] = Xc.shape[0] / m
        if m == 1:
            means[c] = Xc.mean(axis=0)
            continue
        seeds = _plus_plus_seeds(Xc, min(m, Xc.shape[0]), rng)
        if seeds.shape[0] < m:
            extra = Xc[rng.integers(Xc.shape[0], size=m - seeds.shape[0])]
            extra = extra + 0.5 * scale * rng.standard_normal(extra.shape)
            seeds = np.vstack([seeds, extra])
        else:
            nearest = np.argmin(((Xc[:, None, :] - seeds[None]) ** 2).sum(-1), axis=1)
            seeds = np.array([Xc[nearest == j].mean(axis=0) for j in range(m)])
        means[c * m:(c + 1) * m] = seeds
    return weights / weights.sum(), means, covs


def _plus_plus_seeds(Xc: np.ndarray, m: int, rng: np.random.Generator) -> np.ndarray:
    """``m`` distinct rows of ``Xc`` chosen k-means++ style (far apart, random)."""
    chosen = [int(rng.integers(Xc.shape[0]))]
    d2 = ((Xc - Xc[chosen[0]]) ** 2).sum(axis=1)
    while len(chosen) < m:
        total = d2.sum()
        if total <= 0:
            rest = np.setdiff1d(np.arange(Xc.shape[0]), chosen)
            chosen.append(int(rng.choice(rest)))
        else:
            chosen.append(int(rng.choice(Xc.shape[0], p=d2 / total)))
        d2 = np.minimum(d2, ((Xc - Xc[chosen[-1]]) ** 2).sum(axis=1))
    return Xc[chosen]
