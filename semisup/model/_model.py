"""FittedModel: encoder + optional unsupervised stage + classifier + density flag, in memory."""

from __future__ import annotations

import logging
from typing import Any

import numpy as np
import pandas as pd

from ._prepare import InputCounts, check_columns, prepare_rows

__all__ = ["FittedModel"]

log = logging.getLogger(__name__)


def _flag_scorer(density: Any) -> Any:
    """The density model as the flag uses it: a VAE's ELBO is taken at the posterior mean
    (one deterministic decoder pass, z = mu) instead of averaging 16 reparameterisation draws,
    which made the flag 16x the cost of the rest of prediction (benchmarks/bench_predict.py)
    and gave a noisier per-row score."""
    draws = getattr(density, "score_draws_", None)
    if draws is None:
        return density
    import copy

    scorer = copy.copy(density)  # shallow: shares the network, no copy of the weights
    draws = np.asarray(draws)
    scorer.score_draws_ = np.zeros((1, draws.shape[1]), dtype=draws.dtype)
    return scorer


class FittedModel:
    """The chosen method fitted on every label, ready to score new rows.

    Use :func:`semisup.load_model` to read one from disk and :func:`semisup.model.save_model`
    to write one (this object does no I/O), ``predict`` / ``predict_proba`` on a DataFrame of
    the training table's columns (extra columns are ignored), and :meth:`predict_frame` for
    the full output table (classes, probabilities, top probability and the
    out-of-distribution flag).

    Attributes
    ----------
    manifest : dict
        What the model is: method, parameters, classes, feature columns and kinds, encoder
        state, training data fingerprint, the study's accuracy estimate, the density flag.
    classes : list of str
        Class names; ``predict_proba`` columns follow this order.
    """

    def __init__(self, manifest: dict[str, Any], encoder: Any, estimator: Any,
                 representation: Any = None, density: Any = None):
        self.manifest = manifest
        self.encoder = encoder
        self.estimator = estimator
        self.representation = representation
        self.density = density
        self._scorer: tuple[Any, Any] | None = None

    # -- facts -----------------------------------------------------------------------------
    @property
    def classes(self) -> list[str]:
        return list(self.manifest["classes"])

    @property
    def method(self) -> str:
        return str(self.manifest["method"])

    @property
    def schema(self) -> dict[str, str]:
        """Feature columns the model reads and their kinds (numeric / categorical)."""
        return {f["column"]: f["kind"] for f in self.manifest["features"]}

    def __repr__(self) -> str:
        return (f"FittedModel(method={self.method!r}, classes={len(self.classes)}, "
                f"features={len(self.schema)})")

    # -- the pipeline ----------------------------------------------------------------------
    def encode(self, frame: pd.DataFrame, counts: InputCounts | None = None, *,
               source: str = "table", text_file: bool = False, first_row: int = 0) -> np.ndarray:
        """Check ``frame``'s columns and encode it as the training table was encoded."""
        if not isinstance(frame, pd.DataFrame):
            from .._errors import DataError

            raise DataError(f"predict needs a pandas DataFrame with the training columns; got "
                            f"{type(frame).__name__}")
        frame = frame.rename(columns=str)
        check_columns(frame.columns, self.schema, source=source, id_column=None,
                      id_required=False)
        ready = prepare_rows(
            frame, schema=self.schema, levels=self.encoder.categories_,
            encoder_columns=list(self.encoder.feature_names_in_),
            counts=counts if counts is not None else InputCounts(), source=source,
            text_file=text_file, first_row=first_row,
        )
        return self.encoder.transform(ready)

    def _features(self, X: np.ndarray) -> np.ndarray:
        if self.representation is None:
            return X
        # The study hands latent methods float32 features; so does the final model.
        return np.asarray(self.representation.transform(X), dtype=np.float32)

    def _proba_encoded(self, X: np.ndarray) -> np.ndarray:
        from ..methods import align_proba

        est = self.estimator
        return align_proba(est.predict_proba(self._features(X)), est.classes_,
                           len(self.classes))

    def density_scores(self, X: np.ndarray) -> np.ndarray | None:
        """Per-row log-density (mixture) or ELBO at the posterior mean (VAE) of encoded rows,
        in nats; low means unlike the training rows."""
        if self.density is None:
            return None
        if self._scorer is None or self._scorer[0] is not self.density:
            self._scorer = (self.density, _flag_scorer(self.density))
        return np.asarray(self._scorer[1].score_samples(X), dtype=np.float64)

    def predict_proba(self, frame: pd.DataFrame) -> np.ndarray:
        """Class probabilities, shape (n_rows, n_classes), columns in ``classes`` order."""
        return self._proba_encoded(self.encode(frame))

    def predict(self, frame: pd.DataFrame) -> np.ndarray:
        """The most probable class name of each row."""
        proba = self.predict_proba(frame)
        return np.asarray(self.classes, dtype=object)[np.argmax(proba, axis=1)]

    def out_of_distribution(self, frame: pd.DataFrame) -> np.ndarray:
        """True for rows whose density score is below the training rows' flag threshold."""
        scores = self.density_scores(self.encode(frame))
        if scores is None:
            return np.zeros(len(frame), dtype=bool)
        return scores < float(self.manifest["density"]["threshold"])

    def output_frame(self, row_ids, X: np.ndarray) -> pd.DataFrame:
        """The prediction table for encoded rows ``X``."""
        proba = self._proba_encoded(X)
        classes = np.asarray(self.classes, dtype=object)
        top = np.argmax(proba, axis=1)
        out = {"row_id": np.asarray(row_ids, dtype=object), "predicted": classes[top]}
        for i, name in enumerate(self.classes):
            out[f"proba_{name}"] = proba[:, i]
        out["top_probability"] = proba[np.arange(len(top)), top]
        scores = self.density_scores(X)
        if scores is not None:
            out["density_score"] = scores
            out["out_of_distribution"] = scores < float(self.manifest["density"]["threshold"])
        else:
            out["density_score"] = np.full(len(top), np.nan)
            out["out_of_distribution"] = np.zeros(len(top), dtype=bool)
        return pd.DataFrame(out)

    def predict_frame(self, frame: pd.DataFrame, *, id_column: str | None = None) -> pd.DataFrame:
        """Row id, predicted class, ``proba_<class>`` columns, top probability, density score and
        the out-of-distribution flag for every row of ``frame``."""
        ids = (frame[id_column].astype(str).to_numpy() if id_column
               else np.arange(len(frame)).astype(str))
        return self.output_frame(ids, self.encode(frame))
