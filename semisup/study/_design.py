"""The study's design: the data, the evaluation rows, the budgets, the methods, the fingerprint.

Everything here is decided before any model is fitted, and everything that decides a cell's
numbers goes into the fingerprint, so a resumed study never mixes cells of two designs.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._errors import ConfigError, DataError
from .._seeding import derive_seed
from ._draws import default_budgets, split_holdout
from ._spec import StudySpec

__all__ = ["StudyDesign", "make_design"]


@dataclass
class StudyDesign:
    """What :func:`make_design` decides.

    Row indices (``labeled``, ``unlabeled_idx``, ``holdout_idx``, ``pool_idx``) index the rows
    of ``ds``.
    """

    spec: StudySpec  # resolved: method names and budgets filled in
    ds: Any
    y: np.ndarray
    n_classes: int
    labeled: np.ndarray
    unlabeled_idx: np.ndarray
    holdout_idx: np.ndarray
    pool_idx: np.ndarray
    budgets: list[int]
    methods: dict[str, Any]
    kinds: set[str]
    fingerprint: str


def _load_dataset(spec: StudySpec):
    from ..data import load_dataset

    return load_dataset(
        spec.data, label_column=spec.label_column, id_column=spec.id_column,
        unlabeled_markers=spec.unlabeled_markers, kinds=dict(spec.kinds) or None,
        delimiter=spec.delimiter, encoding=spec.encoding,
    )


def _default_method_names() -> list[str]:
    from .. import methods as m

    fn = getattr(m, "default_methods", None)
    specs = fn() if fn is not None else m.list_methods()
    names = [s if isinstance(s, str) else s.name for s in specs]
    if not names:
        raise ConfigError("no methods are registered; name them with --methods or 'methods'")
    return names


def _data_digest(ds) -> str:
    if getattr(ds, "sha256", None):
        return str(ds.sha256)
    h = hashlib.sha256()
    h.update(np.ascontiguousarray(ds.X).tobytes())
    h.update(np.ascontiguousarray(ds.y).tobytes())
    return h.hexdigest()


def _fingerprint(resolved: StudySpec, kinds: set[str], ds, injected_representation: bool) -> str:
    # The table's path is left out (its content hash is in): moving the file keeps the study.
    facts = {k: v for k, v in resolved.to_dict().items() if k != "data"}
    # The unsupervised stages' parameters with their defaults filled in: a new default in a
    # later release must not resume cells measured on the old representation.
    if kinds and not injected_representation:  # an injected stand-in has its own parameters
        from ..pretrain import representation_params

        facts.pop("pretrain", None)  # replaced by the resolved parameters below
        facts["pretrain_resolved"] = {
            kind: representation_params(kind, dict(resolved.pretrain.get(kind, {})))
            for kind in sorted(kinds)
        }
    return hashlib.sha256(
        (json.dumps(facts, sort_keys=True, default=str) + _data_digest(ds)).encode("utf-8")
    ).hexdigest()


def make_design(spec: StudySpec, dataset: Any = None, *,
                injected_representation: bool = False) -> StudyDesign:
    """Read the data (unless ``dataset`` is given) and fix the study's design.

    Raises :class:`DataError` / :class:`ConfigError` with one line for data or options the
    study cannot use.
    """
    from ..methods import get_method

    ds = dataset if dataset is not None else _load_dataset(spec)
    y = np.asarray(ds.y, dtype=np.int64)
    n_classes = len(ds.class_names)
    labeled = np.flatnonzero(y >= 0)
    unlabeled_idx = np.flatnonzero(y < 0)
    if n_classes < 2 or len(np.unique(y[labeled])) < 2:
        raise DataError(
            f"{spec.data}: label column {spec.label_column!r} needs labeled rows of at least "
            "two classes for a study"
        )
    names = list(spec.methods) if spec.methods else _default_method_names()
    methods = {n: get_method(n) for n in names}

    hold_pos, pool_pos = split_holdout(y[labeled], spec.holdout, derive_seed(spec.seed, "holdout"))
    holdout_idx, pool_idx = labeled[hold_pos], labeled[pool_pos]
    budgets = list(spec.budgets) if spec.budgets else default_budgets(n_classes, len(pool_idx))
    too_big = [b for b in budgets if b > len(pool_idx)]
    if too_big:
        raise ConfigError(
            f"study option 'budgets': {too_big[0]} is larger than the pool ({len(pool_idx)} "
            f"labeled rows outside the holdout); use budgets up to {len(pool_idx)}"
        )
    resolved = spec.replace(methods=tuple(names), budgets=tuple(budgets))
    kinds = {m.representation for m in methods.values()} - {"raw"}
    fingerprint = _fingerprint(resolved, kinds, ds, injected_representation)
    return StudyDesign(
        spec=resolved, ds=ds, y=y, n_classes=n_classes, labeled=labeled,
        unlabeled_idx=unlabeled_idx, holdout_idx=holdout_idx, pool_idx=pool_idx,
        budgets=budgets, methods=methods, kinds=kinds, fingerprint=fingerprint,
    )
