"""Optuna search spaces and builders shared by the built-in methods (pure, no registration)."""

from __future__ import annotations

from typing import Any

from ._classic import CalibratedSelfTraining, KNNLabelSpreading
from ._mixture_em import MixtureEMClassifier
from ._supervised import LabeledGBT, LabeledKNN, LabeledLogReg, LabeledSVM

__all__ = [
    "EM_DEFAULTS_LATENT",
    "EM_DEFAULTS_RAW",
    "GBT_DEFAULTS",
    "KNN_DEFAULTS",
    "LOGREG_DEFAULTS",
    "SELF_TRAINING_DEFAULTS",
    "SPREADING_DEFAULTS",
    "SVM_DEFAULTS",
    "build_em_latent",
    "build_em_raw",
    "build_gbt",
    "build_knn",
    "build_logreg",
    "build_self_training",
    "build_spreading",
    "build_svm",
    "em_space_latent",
    "em_space_raw",
    "gbt_space",
    "knn_space",
    "logreg_space",
    "self_training_space",
    "spreading_space",
    "svm_space",
]

Params = dict[str, Any]

# --- logistic regression -------------------------------------------------------------------
LOGREG_DEFAULTS: Params = {"C": 1.0}


def logreg_space(trial) -> Params:
    return {"C": trial.suggest_float("C", 1e-3, 1e2, log=True)}


def build_logreg(params: Params, random_state: int) -> LabeledLogReg:
    return LabeledLogReg(**{**LOGREG_DEFAULTS, **params})


# --- gradient-boosted trees ----------------------------------------------------------------
GBT_DEFAULTS: Params = {"learning_rate": 0.1, "max_iter": 50, "max_leaf_nodes": 15,
                        "min_samples_leaf": 5}


def gbt_space(trial) -> Params:
    return {
        "learning_rate": trial.suggest_float("learning_rate", 0.03, 0.3, log=True),
        "max_iter": trial.suggest_int("max_iter", 20, 100),
        "max_leaf_nodes": trial.suggest_int("max_leaf_nodes", 4, 31),
        "min_samples_leaf": trial.suggest_int("min_samples_leaf", 1, 20),
    }


def build_gbt(params: Params, random_state: int) -> LabeledGBT:
    return LabeledGBT(**{**GBT_DEFAULTS, **params}, random_state=random_state)


# --- k nearest neighbours ------------------------------------------------------------------
KNN_DEFAULTS: Params = {"n_neighbors": 5, "weights": "distance"}


def knn_space(trial) -> Params:
    return {
        "n_neighbors": trial.suggest_int("n_neighbors", 1, 15),
        "weights": trial.suggest_categorical("weights", ["uniform", "distance"]),
    }


def build_knn(params: Params, random_state: int) -> LabeledKNN:
    return LabeledKNN(**{**KNN_DEFAULTS, **params})


# --- RBF support-vector machine ------------------------------------------------------------
SVM_DEFAULTS: Params = {"C": 10.0, "gamma_factor": 1.0}


def svm_space(trial) -> Params:
    return {
        "C": trial.suggest_float("C", 0.1, 100.0, log=True),
        "gamma_factor": trial.suggest_float("gamma_factor", 0.1, 10.0, log=True),
    }


def build_svm(params: Params, random_state: int) -> LabeledSVM:
    return LabeledSVM(**{**SVM_DEFAULTS, **params})


# --- label spreading on a kNN graph --------------------------------------------------------
SPREADING_DEFAULTS: Params = {"n_neighbors": 7, "alpha": 0.2}


def spreading_space(trial) -> Params:
    return {
        "n_neighbors": trial.suggest_int("n_neighbors", 3, 20),
        "alpha": trial.suggest_float("alpha", 0.05, 0.9),
    }


def build_spreading(params: Params, random_state: int) -> KNNLabelSpreading:
    return KNNLabelSpreading(**{**SPREADING_DEFAULTS, **params})


# --- self-training -------------------------------------------------------------------------
SELF_TRAINING_DEFAULTS: Params = {"C": 1.0, "threshold": 0.75, "max_iter": 5}


def self_training_space(trial) -> Params:
    return {
        "C": trial.suggest_float("C", 1e-2, 1e2, log=True),
        "threshold": trial.suggest_float("threshold", 0.6, 0.99),
    }


def build_self_training(params: Params, random_state: int) -> CalibratedSelfTraining:
    return CalibratedSelfTraining(**{**SELF_TRAINING_DEFAULTS, **params})


# --- semi-supervised mixture EM ------------------------------------------------------------
# Defaults chosen on scikit-learn's digits (benchmarks/bench_methods.py, 3 repeats, budgets
# 20-200): a small lambda keeps the unlabeled rows from dragging components away from their
# classes; tied covariances suit the wide encoded table, full ones the small latent space.
EM_DEFAULTS_RAW: Params = {"n_components_per_class": 1, "covariance_type": "tied",
                           "unlabeled_weight": 0.1, "reg_covar": 1e-1}
EM_DEFAULTS_LATENT: Params = {"n_components_per_class": 1, "covariance_type": "full",
                              "unlabeled_weight": 0.1, "reg_covar": 1e-3}


def em_space_raw(trial) -> Params:
    return {
        "n_components_per_class": trial.suggest_int("n_components_per_class", 1, 2),
        "covariance_type": trial.suggest_categorical("covariance_type",
                                                     ["diag", "spherical", "tied"]),
        "unlabeled_weight": trial.suggest_float("unlabeled_weight", 0.01, 1.0, log=True),
        "reg_covar": trial.suggest_float("reg_covar", 1e-3, 1.0, log=True),
    }


def em_space_latent(trial) -> Params:
    # At most 2 components per class: 3 tripled the tuning time of a demo cell for no gain
    # in the digits sweep.
    return {
        "n_components_per_class": trial.suggest_int("n_components_per_class", 1, 2),
        "covariance_type": trial.suggest_categorical("covariance_type",
                                                     ["full", "tied", "diag"]),
        "unlabeled_weight": trial.suggest_float("unlabeled_weight", 0.01, 1.0, log=True),
        "reg_covar": trial.suggest_float("reg_covar", 1e-4, 1e-1, log=True),
    }


# One start: with 2 components per class a second restart gained 0.005-0.03 accuracy on digits
# (3 repeats, VAE latent) at twice the fit time, and EM is already the default study's slowest
# method; pass {"n_init": 2} in the params to trade time for it.
def build_em_raw(params: Params, random_state: int) -> MixtureEMClassifier:
    return MixtureEMClassifier(**{"n_init": 1, **EM_DEFAULTS_RAW, **params},
                               random_state=random_state)


def build_em_latent(params: Params, random_state: int) -> MixtureEMClassifier:
    return MixtureEMClassifier(**{"n_init": 1, **EM_DEFAULTS_LATENT, **params},
                               random_state=random_state)
