"""scikit-learn's own estimator checks on the two pretraining transformers.

Reference: scikit-learn's ``sklearn.utils.estimator_checks.parametrize_with_checks``, the
contract every scikit-learn estimator is tested against.
"""

from __future__ import annotations

from sklearn.utils.estimator_checks import parametrize_with_checks

from semisup.pretrain import MixtureTransformer, VAETransformer

# Small and fast settings: the checks fit dozens of times on tiny arrays.
_SMALL_VAE = VAETransformer(
    latent_dim=2, hidden=(8,), max_epochs=3, batch_size=32, kl_warmup_epochs=1, patience=2
)
_SMALL_MIXTURE = MixtureTransformer(n_components_grid=(1, 2), covariance_types=("diag",))

# Checks expected to fail, by estimator, each with its reason: none. (scikit-learn itself
# skips its two array-API checks unless SCIPY_ARRAY_API=1 is set; they do not apply to
# estimators that only take numpy arrays.)
EXPECTED_FAILED_CHECKS: dict[str, dict[str, str]] = {}


@parametrize_with_checks(
    [_SMALL_VAE, _SMALL_MIXTURE],
    expected_failed_checks=lambda est: EXPECTED_FAILED_CHECKS.get(type(est).__name__, {}),
)
def test_sklearn_estimator_contract(estimator, check):
    check(estimator)
