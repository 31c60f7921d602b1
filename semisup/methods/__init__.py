"""Classifiers behind one contract (fit with y == -1 for unlabeled rows) and their registry.

Every method is a scikit-learn classifier; ``predict_proba`` columns follow ``classes_`` (the
labeled classes the draw contained). :func:`align_proba` spreads them over all the study's
classes. Torch methods (M2) train through ``semisup.pretrain.train_epochs``, the one torch
training loop, with their settings in a frozen config (:class:`M2Config`).
"""

from __future__ import annotations

from ._base import PartiallyLabeledClassifier, labeled_mask
from ._calibration import FewLabelCalibratedClassifier
from ._classic import CalibratedSelfTraining, KNNLabelSpreading
from ._density_self_training import DensitySelfTrainingGBT
from ._graph import NeighbourCache
from ._keep_raw import KeepRawFeatures, raw_and_latent
from ._m2 import M2Classifier
from ._m2_config import M2Config
from ._m2_spreading import M2SpreadingBlend
from ._mixture_em import MixtureEMClassifier
from ._proba import align_proba
from ._registry import (
    FAMILY_ORDER,
    MethodSpec,
    MethodUnavailable,
    default_methods,
    get_method,
    list_methods,
    register,
)
from ._spec import stage_kind
from ._supervised import LabeledGBT, LabeledKNN, LabeledLogReg, LabeledSVM

__all__ = [
    "FAMILY_ORDER",
    "CalibratedSelfTraining",
    "DensitySelfTrainingGBT",
    "FewLabelCalibratedClassifier",
    "KNNLabelSpreading",
    "KeepRawFeatures",
    "LabeledGBT",
    "LabeledKNN",
    "LabeledLogReg",
    "LabeledSVM",
    "M2Classifier",
    "M2Config",
    "M2SpreadingBlend",
    "MethodSpec",
    "MethodUnavailable",
    "MixtureEMClassifier",
    "NeighbourCache",
    "PartiallyLabeledClassifier",
    "align_proba",
    "default_methods",
    "get_method",
    "labeled_mask",
    "list_methods",
    "raw_and_latent",
    "register",
    "stage_kind",
]
