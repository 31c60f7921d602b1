"""Input checks shared by the pretraining transformers: scikit-learn's validation, with its
errors re-raised as one-line DataErrors (still ValueErrors, as scikit-learn expects)."""

from __future__ import annotations

from typing import Any

import numpy as np

from .._errors import DataError

try:  # scikit-learn >= 1.6
    from sklearn.utils.validation import validate_data as _validate_data
except ImportError:  # pragma: no cover - older scikit-learn

    def _validate_data(estimator, X, **kwargs):
        return estimator._validate_data(X, **kwargs)


__all__ = ["checked_rows"]


def checked_rows(estimator: Any, X: Any, *, dtype: Any, reset: bool) -> np.ndarray:
    """``validate_data`` with a one-line :class:`DataError` naming the estimator and fix."""
    try:
        return _validate_data(estimator, X, dtype=dtype, reset=reset)
    except DataError:
        raise
    except ValueError as exc:
        lines = [line.strip() for line in str(exc).splitlines() if line.strip()] or ["?"]
        # the first line says what is wrong; keep scikit-learn's reshape hint, drop the rest
        detail = " ".join([lines[0], *[ln for ln in lines[1:] if ln.startswith("Reshape")]])
        raise DataError(
            f"{type(estimator).__name__} cannot use X: {detail} (pass a 2-D numeric array of "
            "finite values, e.g. Dataset.X)"
        ) from exc
