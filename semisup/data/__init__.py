"""Reading, validating and encoding tables; data cards."""

from __future__ import annotations

from ._dataset import UNLABELED, Dataset, FeatureBlock

__all__ = ["UNLABELED", "Dataset", "FeatureBlock"]
