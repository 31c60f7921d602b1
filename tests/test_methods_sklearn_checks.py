"""scikit-learn's own estimator checks on every registered method.

Source: scikit-learn's ``sklearn.utils.estimator_checks.parametrize_with_checks`` (the API and
legacy check suites). Several methods build the same estimator on a different representation
(``supervised-logreg``, ``latent-logreg`` and ``mixture-logreg`` are one ``LabeledLogReg``), so
each distinct estimator is checked once; ``test_every_method_is_checked`` proves that covers
every registered method. Small parameters keep the checks fast.

Expected failures are listed in ``_EXPECTED_FAILURES`` with their reason. scikit-learn itself
skips its array-API checks unless SCIPY_ARRAY_API is set (8 skips); no method uses array-API
inputs.
"""

from __future__ import annotations

import pytest
from sklearn.utils.estimator_checks import parametrize_with_checks
from threadpoolctl import threadpool_limits

from semisup.methods import list_methods

# Parameters that keep each estimator quick on the checks' small arrays (defaults otherwise).
_SMALL = {
    "supervised-gbt": {"max_iter": 10},
    "self-training": {"max_iter": 2},
    "mixture-em": {"max_iter": 30, "n_init": 1},
    "latent-mixture-em": {"max_iter": 30, "n_init": 1},
    "m2": {"max_epochs": 20, "hidden": 16},
    "density-self-training": {"max_iter": 10, "rounds": 2},
    "latent-density-self-training": {"max_iter": 10, "rounds": 2},
    "m1-m2": {"max_epochs": 20, "hidden": 16},
    "m2-spreading": {"max_epochs": 20},
}

# Checks every method is expected to fail, with the reason.
_EXPECTED_FAILURES: dict[str, str] = {
    "check_classifiers_classes": (
        "part of this check uses the binary labels [-1, 1]; -1 marks an unlabeled row in our "
        "contract (the same convention as scikit-learn's own LabelSpreading and "
        "SelfTrainingClassifier), so only one class is labeled and fit raises MethodUnavailable"
    ),
}


def _checked():
    """One estimator per distinct (class, parameters), with the methods it stands for."""
    found: dict[str, tuple[object, list[str]]] = {}
    for spec in list_methods():
        est = spec.build({**spec.default_params, **_SMALL.get(spec.name, {})}, 0)
        key = repr(est)
        found.setdefault(key, (est, []))[1].append(spec.name)
    return found


_CHECKED = _checked()


def _expected_failed_checks(estimator):
    return dict(_EXPECTED_FAILURES)


@pytest.fixture(autouse=True)
def _one_thread():
    # Two pytest-xdist workers on two cores plus OpenMP/BLAS threads in every worker make
    # gradient boosting and BLAS spin against each other (measured: 130 s vs 20 s).
    with threadpool_limits(limits=1):
        yield


@parametrize_with_checks(
    [est for est, _ in _CHECKED.values()], expected_failed_checks=_expected_failed_checks
)
def test_sklearn_compatible(estimator, check):
    check(estimator)


def test_every_method_is_checked():
    # Methods the study tests register for themselves (tests/_study_support.py) are left out:
    # with pytest-xdist they may sit in this worker's registry too.
    from _study_support import PREFIX

    covered = sorted(name for _, names in _CHECKED.values() for name in names)
    assert covered == sorted(spec.name for spec in list_methods()
                             if not spec.name.startswith(f"{PREFIX}-"))
    assert len(covered) >= 13


pytestmark = pytest.mark.filterwarnings("ignore::semisup.FitWarning")
