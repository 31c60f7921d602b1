"""The final model: fit the chosen method on every label, save it safely, predict new rows.

- :func:`fit_model` trains a study's chosen (or a named) method on all its labels, tuned
  with the study's budget, and measures pseudo-label accuracy by cross-fitting.
- :func:`save_model` / :func:`load_model`: a folder of a JSON manifest, skops files and
  weights-only torch tensors; nothing is ever unpickled.
- :func:`predict_file` scores a CSV / TSV / Parquet table chunk by chunk.
"""

from __future__ import annotations

from ._errors import ModelFileError
from ._file import load_model, read_manifest, save_model
from ._fit import FitResult, fit_model
from ._model import FittedModel
from ._predict import PredictSummary, predict_file

__all__ = [
    "FitResult",
    "FittedModel",
    "ModelFileError",
    "PredictSummary",
    "fit_model",
    "load_model",
    "predict_file",
    "read_manifest",
    "save_model",
]
