"""The study's design: the data, the evaluation rows, the budgets, the methods, the fingerprint.

Everything here is decided before any model is fitted. Two fingerprints: the settings
fingerprint covers what would change every cell (the table, the protocol, seed, trials, the
unsupervised stage); a store holding another is refused. Repeats, budgets, methods,
strategies and added labels only add (or drop) cells; each cell's own content key
(:func:`semisup.study._cell.cell_key`) then decides whether a stored cell still measures this
design. The full fingerprint names the study's state (study.json, plans).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .._errors import ConfigError, DataError
from .._seeding import derive_seed
from ..data import TableSource
from ._draws import crossfit_folds, default_budgets, evaluable_folds, split_holdout
from ._representations import stage_fit_rows
from ._settings import SETTINGS
from ._spec import StudySpec
from ._testfile import load_test_rows

__all__ = ["StudyDesign", "make_design"]


@dataclass
class StudyDesign:
    """What :func:`make_design` decides.

    Row indices index the rows of ``ds``; with a test file, ``ds`` is the table followed by
    the test file's rows (``n_table_rows`` tells where they start). ``evals[f]`` / ``pools[f]``
    are the evaluation rows and the training pool of fold ``f``; repeat ``r`` uses fold
    ``repeat_fold[r]``.
    """

    spec: StudySpec  # resolved: method names and budgets filled in
    ds: Any
    y: np.ndarray
    n_classes: int
    n_table_rows: int
    labeled: np.ndarray
    unlabeled_idx: np.ndarray
    protocol: str
    n_folds: int
    evals: dict[int, np.ndarray]
    pools: dict[int, np.ndarray]
    repeat_fold: list[int]
    representation_rows: np.ndarray
    final_train_idx: np.ndarray
    budgets: list[int]
    methods: dict[str, Any]
    kinds: set[str]
    fingerprint: str
    test: Any = None
    #: what invalidates every cell (not repeats, budgets, methods, strategies, added labels)
    settings_fingerprint: str = ""
    n_added_labels: int = 0
    #: ``pool_parts[f]``: ``(round, n_rows)`` of pool ``f`` in order (round 0: the table's
    #: own labeled rows; then each labeling round's rows, training rows only)
    pool_parts: dict[int, list[tuple[int, int]]] = dataclasses.field(default_factory=dict)
    #: per representation kind ("raw" too), a digest of what its features depend on
    representation_keys: dict[str, str] = dataclasses.field(default_factory=dict)
    #: the unsupervised stage's rows and draws (study/_representations.choose_stage)
    stage: Any = None

    def eval_idx(self, repeat: int) -> np.ndarray:
        return self.evals[self.repeat_fold[repeat]]

    def pool_idx(self, repeat: int) -> np.ndarray:
        return self.pools[self.repeat_fold[repeat]]

    @property
    def n_rows_evaluated(self) -> int:
        used = {self.repeat_fold[r] for r in range(len(self.repeat_fold))}
        return int(len(np.unique(np.concatenate([self.evals[f] for f in used]))))


def _load_dataset(spec: StudySpec):
    return TableSource.of(spec).load()


def _default_method_names(pool_size: int | None = None) -> list[str]:
    from ..methods import default_methods

    names = default_methods(pool_size=pool_size)
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


#: Spec keys that only add or drop cells: they are left out of the settings fingerprint.
GROWING_KEYS = tuple(s.name for s in SETTINGS if s.grows)
#: Spec keys that decide how the table is read (and so the raw features).
_LOADING_KEYS = TableSource.settings()


def _digest(*parts: Any) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode("utf-8")
                          ).hexdigest()


def _resolved_pretrain(resolved: StudySpec, kinds: set[str], injected: bool) -> dict:
    # The unsupervised stages' parameters with their defaults filled in: a new default in a
    # later release must not resume cells measured on the old representation. An injected
    # stand-in has its own parameters.
    if injected:
        return {kind: dict(resolved.pretrain.get(kind, {})) for kind in sorted(kinds)}
    from ..pretrain import representation_params

    return {kind: representation_params(kind, dict(resolved.pretrain.get(kind, {})))
            for kind in sorted(kinds)}


def _settings_fingerprint(resolved: StudySpec, kinds: set[str], data_digest: str,
                          injected_representation: bool, test: Any) -> str:
    # The tables' paths are left out (their content hashes are in): moving a file keeps the
    # study.
    # stage_rows changes the stage's rows, which the latent cells' keys hash (not every cell)
    facts = {k: v for k, v in resolved.to_dict().items()
             if k not in ("data", "test_data", "stage_rows", *GROWING_KEYS)}
    if test is not None:
        facts["test_data_sha256"] = test.sha256
    if kinds:
        facts.pop("pretrain", None)  # replaced by the resolved parameters
        facts["pretrain_resolved"] = _resolved_pretrain(resolved, kinds,
                                                        injected_representation)
    return hashlib.sha256(
        (json.dumps(facts, sort_keys=True, default=str) + data_digest).encode("utf-8")
    ).hexdigest()


def _representation_keys(resolved: StudySpec, kinds: set[str], data_digest: str,
                         injected: bool, test: Any, rep_rows: np.ndarray) -> dict[str, str]:
    """What each representation's features depend on: the table as read, and for a fitted
    stage its resolved parameters, its seed and the rows it is fitted on."""
    loading = {k: resolved.to_dict()[k] for k in _LOADING_KEYS}
    raw = _digest("raw", data_digest, loading, None if test is None else test.sha256)
    keys = {"raw": raw}
    params = _resolved_pretrain(resolved, kinds, injected) if kinds else {}
    rows = hashlib.sha256(np.ascontiguousarray(rep_rows, dtype=np.int64).tobytes()).hexdigest()
    for kind in sorted(kinds):
        keys[kind] = _digest(kind, raw, params[kind], derive_seed(resolved.seed, "pretrain", kind),
                             rows)
    return keys


def _check_folds(spec: StudySpec, y_lab: np.ndarray, class_names: list[str]) -> int:
    """The folds the study uses: ``spec.folds``, fewer when the evaluable rows are fewer.

    A class with fewer labels than folds is evaluated in as many repeats as it has labels and
    a single-label class trains in every repeat and is never evaluated
    (:func:`crossfit_folds`); only a table with no class of two labels is refused.
    """
    k = evaluable_folds(y_lab, spec.folds)
    if k >= 2:
        return k
    raise DataError(
        f"{spec.data}: no class has two labeled rows, so no row can be evaluated while its "
        "class is trained on; label a second row of at least one class (better: of every "
        "class), or score on separately labeled rows with --test-file"
    )


def _crossfit(spec: StudySpec, ds, y, labeled):
    """Fold assignments of the table's own labeled rows: repeat r uses fold r % K of cycle
    r // K (a fresh seeded assignment). Rows of single-label classes are in every pool and no
    evaluation fold. Returns ``(evals, pools, repeat_fold, folds used)``."""
    k = _check_folds(spec, y[labeled], list(ds.class_names))
    keys = np.asarray(ds.row_ids, dtype=str)[labeled]
    evals: dict[int, np.ndarray] = {}
    pools: dict[int, np.ndarray] = {}
    for cycle in range((spec.repeats + k - 1) // k):
        fold = crossfit_folds(y[labeled], keys, k, derive_seed(spec.seed, "folds", cycle))
        for j in range(k):
            evals[cycle * k + j] = labeled[fold == j]
            pools[cycle * k + j] = labeled[fold != j]
    return evals, pools, list(range(spec.repeats)), k


def _round_rows(ds, added: Any, own_labeled: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """``(round, row positions)`` of the rows the rounds labeled (not already labeled in the
    table), rounds in order, rows of a round in table order."""
    if added is None or not len(added):
        return []
    ids = pd.Index(np.asarray(ds.row_ids).astype(str))
    pos = ids.get_indexer(list(added.row_ids))
    rounds = np.asarray(added.rounds, dtype=np.int64)
    fresh = ~np.isin(pos, own_labeled)
    return [(int(r), np.sort(pos[fresh & (rounds == r)])) for r in np.unique(rounds[fresh])]


def _default_budgets(n_classes: int, base_pool: int,
                     rounds: list[tuple[int, np.ndarray]]) -> list[int]:
    """The grid of the table's own pool, and the whole pool after each round: a round adds
    budgets and keeps the earlier ones."""
    grid = set(default_budgets(n_classes, base_pool)) if base_pool else set()
    total = base_pool
    for _, rows in rounds:
        total += len(rows)
        grid.add(total)
    return sorted(grid)


def make_design(spec: StudySpec, dataset: Any = None, *,
                injected_representation: bool = False, added: Any = None) -> StudyDesign:
    """Read the data (unless ``dataset`` is given) and fix the study's design.

    ``added`` (:class:`semisup.study._rounds.AddedLabels`) are labels returned by annotators;
    they are set on the table's rows before anything else and enter the fingerprint.

    Raises :class:`DataError` / :class:`ConfigError` with one line for data or options the
    study cannot use.
    """
    from ..methods import get_method, stage_kind

    ds = dataset if dataset is not None else _load_dataset(spec)
    data_digest = _data_digest(ds)  # of the table as given: added labels are not in it
    own_labeled = np.flatnonzero(np.asarray(ds.y) >= 0)
    n_added = len(added) if added is not None else 0
    if n_added:
        from ._rounds import ADDED_LABELS_FILE, apply_added_labels

        ds = apply_added_labels(ds, added, where=ADDED_LABELS_FILE)
    rounds = _round_rows(ds, added, own_labeled)
    y = np.asarray(ds.y, dtype=np.int64)
    n_classes = len(ds.class_names)
    n_table = len(y)
    labeled = np.flatnonzero(y >= 0)
    unlabeled_idx = np.flatnonzero(y < 0)
    if n_classes < 2 or len(np.unique(y[labeled])) < 2:
        only = (f" (every labeled row is {ds.class_names[int(y[labeled][0])]!r})"
                if len(labeled) else " (no row is labeled)")
        raise DataError(
            f"{spec.data}: label column {spec.label_column!r} needs labeled rows of at least "
            f"two classes for a study{only}; label some rows of another class"
        )
    names = list(spec.methods) if spec.methods else _default_method_names(len(labeled))
    methods = {n: get_method(n) for n in names}

    test = None
    protocol = spec.evaluation
    where = "labeled rows of the smallest training pool"
    if protocol == "cross-fit":
        evals, pools, repeat_fold, n_folds = _crossfit(spec, ds, y, own_labeled)
        # Features of every row, never a label: see DEVELOPERS.md "The study protocol".
        rep_rows = np.sort(np.concatenate([unlabeled_idx, labeled]))
        final = labeled
    elif protocol == "holdout":
        hold_pos, pool_pos = split_holdout(y[own_labeled], spec.holdout,
                                           derive_seed(spec.seed, "holdout"))
        evals, pools = {0: own_labeled[hold_pos]}, {0: own_labeled[pool_pos]}
        repeat_fold = [0] * spec.repeats
        # the rounds' rows join the pool below: features of every row but the holdout's
        parts = [unlabeled_idx, pools[0]] + [r for _, r in rounds]
        rep_rows = np.sort(np.concatenate(parts + ([evals[0]] if spec.transductive else [])))
        final = np.sort(np.concatenate([pools[0]] + [r for _, r in rounds]))
        n_folds = 1
        where = "labeled rows outside the holdout"
    else:  # test-file
        test = load_test_rows(spec, ds)
        ds = dataclasses.replace(
            ds, X=np.concatenate([np.asarray(ds.X, dtype=np.float32), test.X]),
            y=np.concatenate([y, test.y]),
            row_ids=np.concatenate([np.asarray(ds.row_ids, dtype=object), test.row_ids]),
        )
        y = np.asarray(ds.y, dtype=np.int64)
        test_idx = np.arange(n_table, len(y))
        evals, pools = {0: test_idx}, {0: own_labeled}
        repeat_fold = [0] * spec.repeats
        parts = [unlabeled_idx, labeled] + ([test_idx] if spec.transductive else [])
        rep_rows = np.sort(np.concatenate(parts))
        final = labeled
        n_folds = 1
        where = "labeled rows of the table"

    # large tables: the stage is fitted on a seeded sample and once for every repeat
    rep_rows, stage = stage_fit_rows(rep_rows, spec)
    # the rounds' rows are training rows of every repeat, after the table's own (so the
    # random draws of a smaller pool stay prefixes): DEVELOPERS.md "The study protocol"
    base_pool = min(len(p) for p in pools.values())
    pool_parts = {f: [(0, len(p))] + [(r, len(rows)) for r, rows in rounds]
                  for f, p in pools.items()}
    pools = {f: np.concatenate([p] + [rows for _, rows in rounds]).astype(np.int64)
             for f, p in pools.items()}
    n_pool = min(len(pools[f]) for f in set(repeat_fold))
    budgets = (list(spec.budgets) if spec.budgets
               else _default_budgets(n_classes, base_pool, rounds))
    too_big = [b for b in budgets if b > n_pool]
    if too_big:
        raise ConfigError(
            f"study option 'budgets': {too_big[0]} is larger than the pool ({n_pool} {where}); "
            f"use budgets up to {n_pool}"
        )
    resolved = spec.replace(methods=tuple(names), budgets=tuple(budgets),
                            stage_draws=stage.draws)
    kinds = {stage_kind(m.representation) for m in methods.values()} - {"raw"}
    settings = _settings_fingerprint(resolved, kinds, data_digest, injected_representation,
                                     test)
    grown = {k: resolved.to_dict()[k] for k in GROWING_KEYS}
    if n_added:  # the table's hash does not change with added labels; their content does
        grown["added"] = [list(t) for t in zip(added.row_ids, added.labels, added.rounds,
                                               strict=True)]
    fingerprint = _digest(settings, grown)
    return StudyDesign(
        spec=resolved, ds=ds, y=y, n_classes=n_classes, n_table_rows=n_table, labeled=labeled,
        unlabeled_idx=unlabeled_idx, protocol=protocol, n_folds=n_folds, evals=evals,
        pools=pools, repeat_fold=repeat_fold, representation_rows=rep_rows,
        final_train_idx=final, budgets=budgets, methods=methods, kinds=kinds,
        fingerprint=fingerprint, test=test, settings_fingerprint=settings,
        n_added_labels=n_added, pool_parts=pool_parts, stage=stage,
        representation_keys=_representation_keys(resolved, kinds, data_digest,
                                                  injected_representation, test, rep_rows),
    )
