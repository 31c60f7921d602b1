"""Registers the supervised-only baselines and the classic semi-supervised baselines."""

from __future__ import annotations

from . import _spaces as s
from ._registry import MethodSpec, register

register(MethodSpec(
    name="supervised-logreg",
    description="Logistic regression on the labeled rows of the encoded table",
    representation="raw", semi_supervised=False, family="supervised",
    search_space=s.logreg_space, build=s.build_logreg, default_params=dict(s.LOGREG_DEFAULTS),
))
register(MethodSpec(
    name="supervised-gbt",
    description="Histogram gradient-boosted trees on the labeled rows of the encoded table",
    representation="raw", semi_supervised=False, family="supervised",
    search_space=s.gbt_space, build=s.build_gbt, default_params=dict(s.GBT_DEFAULTS),
))
register(MethodSpec(
    name="supervised-knn",
    description="k-nearest neighbours on the labeled rows of the encoded table",
    representation="raw", semi_supervised=False, family="supervised",
    search_space=s.knn_space, build=s.build_knn, default_params=dict(s.KNN_DEFAULTS),
))
register(MethodSpec(
    name="supervised-svm",
    description="RBF support-vector machine (few-label Platt calibration) on the labeled rows",
    representation="raw", semi_supervised=False, family="supervised",
    search_space=s.svm_space, build=s.build_svm, default_params=dict(s.SVM_DEFAULTS),
))
register(MethodSpec(
    name="label-spreading",
    description="Label spreading on a k-nearest-neighbour graph of the encoded table",
    representation="raw", semi_supervised=True, family="classic-ssl",
    search_space=s.spreading_space, build=s.build_spreading,
    default_params=dict(s.SPREADING_DEFAULTS),
))
register(MethodSpec(
    name="self-training",
    description="Self-training around a calibrated logistic regression on the encoded table",
    representation="raw", semi_supervised=True, family="classic-ssl",
    search_space=s.self_training_space, build=s.build_self_training,
    default_params=dict(s.SELF_TRAINING_DEFAULTS),
))
