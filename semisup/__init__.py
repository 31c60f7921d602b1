"""semisup: decide how many labels to buy for a mostly unlabeled table.

Fit a generative model (VAE or Gaussian mixture) on the unlabeled rows once, measure
semi-supervised methods against supervised-only baselines over label budgets, fit learning
curves with intervals, and write a labeling plan.

The public API is re-exported here; heavy parts (torch, optuna) load on first use.
"""

from __future__ import annotations

import importlib
from typing import Any

from ._errors import (
    ConfigError,
    DataError,
    DataWarning,
    FitWarning,
    PlanError,
    SemisupError,
    SemisupWarning,
    StoreError,
)

__version__ = "0.1.0"

_LAZY = {
    # data
    "Dataset": "semisup.data",
    "FeatureBlock": "semisup.data",
    "load_dataset": "semisup.data",
    "make_card": "semisup.data",
    "write_card": "semisup.data",
    # unsupervised stage
    "VAETransformer": "semisup.pretrain",
    "MixtureTransformer": "semisup.pretrain",
    "fit_representation": "semisup.pretrain",
    # methods
    "MethodSpec": "semisup.methods",
    "MethodUnavailable": "semisup.methods",
    "default_methods": "semisup.methods",
    "get_method": "semisup.methods",
    "list_methods": "semisup.methods",
    # study, plan, report
    "StudySpec": "semisup.study",
    "run_study": "semisup.study",
    "PlanRequest": "semisup.plan",
    "make_plan": "semisup.plan",
    "write_report": "semisup.report",
    "run_demo": "semisup.demo",
    # the final model
    "fit_model": "semisup.model",
    "load_model": "semisup.model",
}

__all__ = [
    "ConfigError",
    "DataError",
    "DataWarning",
    "FitWarning",
    "PlanError",
    "SemisupError",
    "SemisupWarning",
    "StoreError",
    "__version__",
    *sorted(_LAZY),
]


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'semisup' has no attribute {name!r}")
    return getattr(importlib.import_module(module), name)


def __dir__() -> list[str]:
    return sorted(__all__)
