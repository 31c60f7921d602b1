"""The registry's data: :class:`MethodSpec`, the name -> spec table and :func:`register_variants`.

This module imports nothing of ``semisup.methods``; estimator modules import it to register
themselves, and :mod:`._registry` (the public look-ups) imports the estimator modules. So the
imports run one way: ``_registry -> estimator modules -> _base -> _spec``.

Adding a method is one estimator class that declares ``tuning_defaults`` (the untuned
parameters, also the first trial of every tuning run) and ``tuning_space(trial)`` (optuna
``trial.suggest_*`` calls), followed by one :func:`register_variants` call naming its raw and
pretrained-representation variants.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Literal

from .._errors import ConfigError, SemisupError

__all__ = [
    "MethodSpec",
    "MethodUnavailable",
    "Variant",
    "default_rules",
    "register",
    "register_variants",
    "registered",
    "stage_kind",
]

Representation = Literal["raw", "vae", "mixture", "vae+raw"]
REPRESENTATIONS: tuple[str, ...] = ("raw", "vae", "mixture", "vae+raw")
#: Representations built from a fitted stage and the encoded table: the stage they need.
_STAGE_OF = {"vae+raw": "vae"}
#: ``register_variants`` keywords that are not representation names.
_KEYWORDS = {"vae_raw": "vae+raw"}


def stage_kind(representation: str) -> str:
    """The unsupervised stage a representation needs (``"raw"``: none).

    ``"vae+raw"`` is the encoded table with the VAE latent means appended (Kingma et al.
    2014's M1 with the raw features kept): it needs the ``"vae"`` stage.
    """
    return _STAGE_OF.get(representation, representation)


class MethodUnavailable(SemisupError, ValueError):
    """A method cannot run on this draw (say, too few labels per class); the reason is the text.

    The study records the cell as ``skipped`` with this reason instead of failing. It is also a
    ``ValueError`` so scikit-learn's checks (and callers) see the usual error for bad targets.
    """


@dataclass(frozen=True)
class MethodSpec:
    """How the study describes, tunes and builds one method.

    Parameters
    ----------
    name : str
        Lowercase with dashes, says what the method does (``latent-logreg``).
    description : str
        One line for reports and ``--help``.
    representation : {"raw", "vae", "mixture", "vae+raw"}
        Which features the method is fitted on: the encoded table, the VAE latent means, the
        Gaussian-mixture features, or the encoded table with the latent means appended.
    semi_supervised : bool
        True when the method learns from unlabeled rows (directly or through its
        representation); False for supervised-only baselines.
    search_space : callable
        ``search_space(trial) -> dict`` of hyperparameters, drawn with optuna's
        ``trial.suggest_*``.
    build : callable
        ``build(params, random_state) -> estimator`` (an unfitted scikit-learn classifier).
    default_params : dict
        Parameters used without tuning (also the first trial of every tuning run).
    family : str
        Group for reports: ``generative``, ``latent``, ``supervised``, ``classic-ssl``.
    """

    name: str
    description: str
    representation: Representation
    semi_supervised: bool
    search_space: Callable[[Any], dict[str, Any]]
    build: Callable[[dict[str, Any], int], Any]
    default_params: dict[str, Any]
    family: str = "supervised"

    @property
    def needs_pretraining(self) -> bool:
        return self.representation != "raw"


_REGISTRY: dict[str, MethodSpec] = {}
# name -> smallest pool (rows) at which the method joins the default set (0: always).
_DEFAULTS: dict[str, int] = {}


def register(spec: MethodSpec) -> MethodSpec:
    """Add ``spec`` to the registry (a second method of the same name is an error)."""
    if spec.name in _REGISTRY:
        raise ConfigError(
            f"method {spec.name!r} is registered twice; give the new one its own name"
        )
    if spec.name != spec.name.lower() or " " in spec.name or "_" in spec.name:
        raise ConfigError(f"method name {spec.name!r} must be lowercase with dashes")
    _REGISTRY[spec.name] = spec
    return spec


def registered() -> dict[str, MethodSpec]:
    """The name -> spec table (the live dict; callers must not change it)."""
    return _REGISTRY


def default_rules() -> dict[str, int]:
    """Default-set membership: name -> smallest pool size (rows) at which it is a default."""
    return _DEFAULTS


@dataclass(frozen=True)
class Variant:
    """One registered use of an estimator class on one representation.

    Parameters
    ----------
    name, description : str
        As in :class:`MethodSpec`.
    family : str or None
        None: ``supervised`` / ``classic-ssl`` on the raw table (by whether the estimator uses
        unlabeled rows) and ``latent`` on a pretrained representation.
    default : bool or int
        True puts the method in the default set; an int ``n`` puts it there when the study has
        at least ``n`` labeled rows; False (the default) leaves it out.
    params : dict
        Overrides of the class's ``tuning_defaults`` for this variant only.
    search_space : callable or None
        Replaces the class's ``tuning_space`` for this variant only.
    """

    name: str
    description: str
    family: str | None = None
    default: bool | int = False
    params: dict[str, Any] = field(default_factory=dict)
    search_space: Callable[[Any], dict[str, Any]] | None = None


def _builder(cls: type, fixed: dict[str, Any]) -> Callable[[dict[str, Any], int], Any]:
    takes_seed = "random_state" in cls().get_params()

    def build(params: dict[str, Any], random_state: int) -> Any:
        merged = {**fixed, **params}
        if takes_seed:
            merged.setdefault("random_state", random_state)
        return cls(**merged)

    build.__qualname__ = f"build_{cls.__name__}"
    return build


def register_variants(cls: type, **variants: Variant) -> list[MethodSpec]:
    """Register ``cls`` once per representation keyword (``raw=``, ``vae=``, ``mixture=``,
    ``vae_raw=`` for ``"vae+raw"``).

    ``cls`` declares ``tuning_defaults`` (dict) and ``tuning_space(trial)`` (static); each
    variant may override either. ``build(params, seed)`` is ``cls(**{defaults, **params})``
    with ``random_state=seed`` when the class takes one. ``semi_supervised`` is the class's
    ``uses_unlabeled`` on the raw table and True on a pretrained representation (fitted on the
    unlabeled rows).
    """
    specs = []
    for keyword, variant in variants.items():
        representation = _KEYWORDS.get(keyword, keyword)
        if representation not in REPRESENTATIONS:
            raise ConfigError(
                f"register_variants({cls.__name__}): representation {representation!r} is not "
                f"one of {', '.join(REPRESENTATIONS)}"
            )
        raw = representation == "raw"
        uses_unlabeled = bool(getattr(cls, "uses_unlabeled", False))
        family = variant.family or (
            ("classic-ssl" if uses_unlabeled else "supervised") if raw else "latent"
        )
        defaults = {**cls.tuning_defaults, **variant.params}
        spec = register(MethodSpec(
            name=variant.name,
            description=variant.description,
            representation=representation,  # type: ignore[arg-type]
            semi_supervised=uses_unlabeled or not raw,
            search_space=variant.search_space or cls.tuning_space,
            build=_builder(cls, defaults),
            default_params=dict(defaults),
            family=family,
        ))
        if variant.default is not False:
            _DEFAULTS[variant.name] = 0 if variant.default is True else int(variant.default)
        specs.append(spec)
    return specs
