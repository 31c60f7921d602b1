"""The model file's own error (a SemisupError, so the command line exits with code 2)."""

from __future__ import annotations

from .._errors import SemisupError

__all__ = ["ModelFileError"]


class ModelFileError(SemisupError, ValueError):
    """A model file is missing, damaged, changed after it was written, or not semisup's."""
