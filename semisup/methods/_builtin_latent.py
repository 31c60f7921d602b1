"""Registers the M1-style methods (Kingma et al. 2014): classifiers on the pretrained features.

The study hands these methods the VAE latent means (representation "vae") or the Gaussian-
mixture features (representation "mixture") as ``X``.
"""

from __future__ import annotations

from . import _spaces as s
from ._registry import MethodSpec, register

register(MethodSpec(
    name="latent-logreg",
    description="Logistic regression on the VAE latent means (M1)",
    representation="vae", semi_supervised=True, family="latent",
    search_space=s.logreg_space, build=s.build_logreg, default_params=dict(s.LOGREG_DEFAULTS),
))
register(MethodSpec(
    name="latent-svm",
    description="RBF support-vector machine on the VAE latent means (M1)",
    representation="vae", semi_supervised=True, family="latent",
    search_space=s.svm_space, build=s.build_svm, default_params=dict(s.SVM_DEFAULTS),
))
register(MethodSpec(
    name="latent-knn",
    description="k-nearest neighbours on the VAE latent means (M1)",
    representation="vae", semi_supervised=True, family="latent",
    search_space=s.knn_space, build=s.build_knn, default_params=dict(s.KNN_DEFAULTS),
))
register(MethodSpec(
    name="latent-spreading",
    description="Label spreading on a k-nearest-neighbour graph in the VAE latent space",
    representation="vae", semi_supervised=True, family="latent",
    search_space=s.spreading_space, build=s.build_spreading,
    default_params=dict(s.SPREADING_DEFAULTS),
))
register(MethodSpec(
    name="mixture-logreg",
    description="Logistic regression on the Gaussian-mixture features",
    representation="mixture", semi_supervised=True, family="latent",
    search_space=s.logreg_space, build=s.build_logreg, default_params=dict(s.LOGREG_DEFAULTS),
))
