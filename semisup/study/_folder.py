"""What a study folder holds, as typed records: study.json and curves.csv.

The study writes study.json (:func:`semisup.study._info.study_info`) and curves.csv (the
study's measured points; the plan keeps its fitted points in a file of its own). Every reader
(plan, report, final model, labeling rounds) reads them through :class:`StudyRecord` and
:func:`read_curves` here, by the names the writers use, instead of guessing key aliases; the
two cell readers below (:func:`as_int`, :func:`truthy`) serve the other files' readers too.
The names of the files themselves are in :mod:`semisup.study._layout`.

Every field may be unknown (None or empty): a study.json of an earlier release, or one a test
wrote by hand, lacks some blocks, and what depends on them is turned off by the reader.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pandas as pd

from .._jsonio import read_json_object

__all__ = ["CURVE_REQUIRED", "DataFacts", "EvaluationFacts", "StudyRecord", "as_int",
           "read_curves", "read_study_record", "truthy"]

#: Columns every curves.csv has (and a plan's forecast file).
CURVE_REQUIRED = ("method", "strategy", "metric", "n_labels", "mean", "low", "high",
                  "measured")


def as_int(value: Any) -> int | None:
    """A count read from JSON or CSV as an int; None for a missing, non-numeric, infinite or
    boolean value."""
    if isinstance(value, bool):
        return None
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return int(out) if math.isfinite(out) else None


def truthy(series: pd.Series) -> pd.Series:
    """A boolean column read back from CSV (True / "true" / 1 / "yes")."""
    if series.dtype == bool:
        return series
    return series.astype(str).str.strip().str.lower().isin(("true", "1", "yes"))


def _block(src: Mapping, name: str) -> Mapping:
    value = src.get(name) if isinstance(src, Mapping) else None
    return value if isinstance(value, Mapping) else {}


def _counts(value: Any) -> dict[str, int]:
    if not isinstance(value, Mapping):
        return {}
    out = {str(k): as_int(v) for k, v in value.items()}
    return {k: v for k, v in out.items() if v is not None and v >= 0}


@dataclass(frozen=True)
class DataFacts:
    """study.json's ``data`` block: the table the study read."""

    source: str | None = None
    sha256: str | None = None
    n_rows: int | None = None
    n_labeled: int | None = None
    n_unlabeled: int | None = None
    n_features: int | None = None
    class_names: tuple[str, ...] = ()
    class_counts: dict[str, int] = field(default_factory=dict)

    @classmethod
    def from_dict(cls, d: Mapping) -> DataFacts:
        names = d.get("class_names")
        return cls(
            source=None if d.get("source") is None else str(d["source"]),
            sha256=None if not d.get("sha256") else str(d["sha256"]),
            n_rows=as_int(d.get("n_rows")), n_labeled=as_int(d.get("n_labeled")),
            n_unlabeled=as_int(d.get("n_unlabeled")), n_features=as_int(d.get("n_features")),
            class_names=tuple(str(c) for c in names) if isinstance(names, list) else (),
            class_counts=_counts(d.get("class_counts")),
        )


@dataclass(frozen=True)
class EvaluationFacts:
    """study.json's ``evaluation`` block (DEVELOPERS.md "The study protocol")."""

    protocol: str | None = None  # "cross-fit", "holdout" or "test-file"
    folds: int | None = None
    cycles: int | None = None
    shared_across_repeats: bool | None = None
    n_labeled: int | None = None
    n_rows_evaluated: int | None = None
    n_eval_min: int | None = None
    n_eval_max: int | None = None
    n_pool_min: int | None = None
    n_pool_max: int | None = None
    #: repeats of the study (one entry of ``per_repeat`` each)
    n_repeats: int | None = None
    #: rows labeled in labeling rounds: training rows of every repeat, never evaluated
    n_round_rows: int = 0
    #: the block as written (``summarize_curves(evaluation=...)`` takes it)
    raw: dict = field(default_factory=dict)

    @classmethod
    def from_dict(cls, d: Mapping) -> EvaluationFacts:
        per_repeat = d.get("per_repeat")
        shared = d.get("shared_across_repeats")
        return cls(
            protocol=None if d.get("protocol") is None else str(d["protocol"]),
            folds=as_int(d.get("folds")), cycles=as_int(d.get("cycles")),
            shared_across_repeats=shared if isinstance(shared, bool) else None,
            n_labeled=as_int(d.get("n_labeled")),
            n_rows_evaluated=as_int(d.get("n_rows_evaluated")),
            n_eval_min=as_int(d.get("n_eval_min")), n_eval_max=as_int(d.get("n_eval_max")),
            n_pool_min=as_int(d.get("n_pool_min")), n_pool_max=as_int(d.get("n_pool_max")),
            n_repeats=len(per_repeat) if isinstance(per_repeat, list) and per_repeat else None,
            n_round_rows=as_int(d.get("n_round_rows")) or 0,
            raw=dict(d),
        )


@dataclass(frozen=True)
class StudyRecord:
    """study.json as the readers use it."""

    spec: dict = field(default_factory=dict)
    fingerprint: str | None = None
    data: DataFacts = field(default_factory=DataFacts)
    evaluation: EvaluationFacts | None = None
    #: the smallest evaluation set of a repeat (``holdout.n_rows``)
    holdout_rows: int | None = None
    #: the smallest training pool of a repeat (``pool.n_rows``)
    pool_rows: int | None = None
    budgets: tuple[int, ...] = ()
    warnings: tuple[str, ...] = ()
    #: the protocol notes (a list of lines)
    protocol: tuple[str, ...] = ()
    #: per unsupervised stage its diagnostics (``cache_key``, ``cache_path``, ...)
    representation: dict[str, dict] = field(default_factory=dict)
    representation_errors: dict[str, str] = field(default_factory=dict)
    raw: dict = field(default_factory=dict)

    @classmethod
    def from_dict(cls, d: Mapping | None) -> StudyRecord:
        d = d if isinstance(d, Mapping) else {}
        evaluation = _block(d, "evaluation")
        rep = _block(d, "representation")
        diag = _block(rep, "diagnostics")
        warnings = d.get("warnings")
        protocol = d.get("protocol")
        budgets = d.get("budgets") if isinstance(d.get("budgets"), list) else []
        return cls(
            spec=dict(_block(d, "spec")),
            fingerprint=None if not d.get("fingerprint") else str(d["fingerprint"]),
            data=DataFacts.from_dict(_block(d, "data")),
            evaluation=EvaluationFacts.from_dict(evaluation) if evaluation else None,
            holdout_rows=as_int(_block(d, "holdout").get("n_rows")),
            pool_rows=as_int(_block(d, "pool").get("n_rows")),
            budgets=tuple(b for b in (as_int(v) for v in budgets) if b is not None),
            warnings=tuple(str(w) for w in warnings) if isinstance(warnings, list) else (),
            protocol=tuple(str(p) for p in protocol) if isinstance(protocol, list) else (),
            representation={str(k): dict(v) for k, v in diag.items() if isinstance(v, Mapping)},
            representation_errors={str(k): str(v)
                                   for k, v in _block(rep, "errors").items()},
            raw=dict(d),
        )

    @classmethod
    def with_card(cls, study: Mapping | None, card: Mapping | None) -> StudyRecord:
        """The record of ``study``, with data_card.json's row counts and class counts filling
        in the ones study.json lacks (a folder whose study.json is older or absent)."""
        record = cls.from_dict(study)
        card = card if isinstance(card, Mapping) else {}
        data = record.data
        fill = {}
        for name in ("n_rows", "n_labeled"):
            if getattr(data, name) is None and as_int(card.get(name)) is not None:
                fill[name] = as_int(card.get(name))
        if not data.class_counts and _counts(card.get("class_counts")):
            fill["class_counts"] = _counts(card.get("class_counts"))
        return replace(record, data=replace(data, **fill)) if fill else record

    def resolved_spec(self) -> SimpleNamespace:
        """The study's spec as recorded (checked when the study ran), with this release's
        :class:`StudySpec` defaults for keys an older study did not record. Not re-validated:
        a spec's ``to_dict`` need not be accepted by a later release's checks."""
        import dataclasses

        from ._spec import StudySpec

        out: dict[str, Any] = {}
        for f in dataclasses.fields(StudySpec):
            if f.default is not dataclasses.MISSING:
                out[f.name] = f.default
            elif f.default_factory is not dataclasses.MISSING:  # type: ignore[misc]
                out[f.name] = f.default_factory()  # type: ignore[misc]
        out.update(self.spec)
        out["unlabeled_markers"] = tuple(out.get("unlabeled_markers") or ())
        out["kinds"] = dict(out.get("kinds") or {})
        out["pretrain"] = {k: dict(v) for k, v in (out.get("pretrain") or {}).items()}
        return SimpleNamespace(**out)

    @property
    def seed(self) -> int | None:
        return as_int(self.spec.get("seed"))

    # -- the table ------------------------------------------------------------------------
    @property
    def n_rows(self) -> int | None:
        return self.data.n_rows

    @property
    def n_labeled(self) -> int | None:
        return self.data.n_labeled

    @property
    def n_unlabeled(self) -> int | None:
        """Unlabeled rows: as recorded, else rows minus labeled rows."""
        if self.data.n_unlabeled is not None:
            return self.data.n_unlabeled
        if self.data.n_rows is not None and self.data.n_labeled is not None:
            return self.data.n_rows - self.data.n_labeled
        return None

    @property
    def class_counts(self) -> dict[str, int]:
        return dict(self.data.class_counts)

    @property
    def imbalance_ratio(self) -> float | None:
        """Largest / smallest labeled class count (the card's rule); None below two classes."""
        counts = list(self.data.class_counts.values())
        if len(counts) < 2:
            return None
        from ..data import imbalance_ratio

        return imbalance_ratio(counts)

    @property
    def imbalanced(self) -> bool:
        """Whether the labeled classes are imbalanced by the data card's one rule."""
        from ..data import is_imbalanced

        ratio = self.imbalance_ratio
        return ratio is not None and is_imbalanced(ratio)

    @property
    def lead_metric(self) -> str:
        """The metric a summary leads with: balanced accuracy when the labeled classes are
        imbalanced (the data card's rule), else accuracy."""
        return "balanced_accuracy" if self.imbalanced else "accuracy"

    # -- the evaluation protocol ----------------------------------------------------------
    @property
    def evaluation_protocol(self) -> str:
        """"cross_fit", "holdout" or "test_file" ("holdout" when study.json does not say)."""
        if self.evaluation is None:
            return "holdout"
        return str(self.evaluation.protocol or "holdout").strip().lower().replace("-", "_")

    @property
    def n_eval(self) -> int | None:
        """The smallest evaluation set of one repeat."""
        return None if self.evaluation is None else self.evaluation.n_eval_min

    @property
    def n_rows_evaluated(self) -> int | None:
        return None if self.evaluation is None else self.evaluation.n_rows_evaluated

    @property
    def folds(self) -> int | None:
        return None if self.evaluation is None else self.evaluation.folds

    @property
    def n_repeats(self) -> int | None:
        if self.evaluation is None:
            return None
        return self.evaluation.n_repeats or as_int(self.spec.get("repeats"))

    @property
    def n_round_rows(self) -> int:
        """Labeled rows returned by labeling rounds: they train, never evaluate."""
        return 0 if self.evaluation is None else int(self.evaluation.n_round_rows or 0)

    @property
    def evaluation_block(self) -> dict | None:
        """study.json's evaluation block as written (None when absent)."""
        return None if self.evaluation is None else dict(self.evaluation.raw)

    @property
    def shared_eval_rows(self) -> float | None:
        """Effective size of the evaluation rows that all repeats share.

        Their sampling error moves every repeat together, so the spread over repeats cannot
        contain it and the plan adds it as ``p (1 - p) / shared_eval_rows``. A fixed holdout
        or a test file: its size. Cross-fitting with at most one repeat per fold: None (each
        repeat is scored on its own fold; the spread already holds that error). With more
        repeats than folds the repeats of one fold share rows: the study's own
        ``p (1 - p) / n_rows_evaluated * (R - folds) / (R - 1)`` as an effective size.
        """
        if self.evaluation_protocol == "cross_fit":
            r, k, n = self.n_repeats, self.folds, self.n_rows_evaluated
            if not (r and k and n) or r <= k:
                return None
            return n * (r - 1) / (r - k)
        return self.n_eval if self.n_eval is not None else self.holdout_rows

    @property
    def eval_floor_rows(self) -> int | None:
        """Under cross-fitting, the labeled rows evaluated over the whole study: the binomial
        error of a proportion on that many rows is the least evaluation error the curve's
        level can have (a floor for the spread over few folds); None otherwise."""
        return self.n_rows_evaluated if self.evaluation_protocol == "cross_fit" else None

    def summary_budget(self, budgets) -> int:
        """The largest budget at which the repeats train on different rows.

        With one evaluation set shared by every repeat (holdout, test file), a budget equal to
        the whole pool gives every repeat the same training rows, so its range says nothing.
        """
        levels = sorted({int(b) for b in budgets})
        ev = self.evaluation
        pool = None if ev is None else ev.n_pool_min
        if ev is not None and ev.shared_across_repeats and pool is not None and len(levels) > 1:
            below = [b for b in levels if b < int(pool)]
            if below:
                return below[-1]
        return levels[-1]


def read_study_record(path: str | os.PathLike[str], error: type[Exception]) -> StudyRecord:
    """study.json at ``path`` (an empty record when the file is absent); a damaged file is
    one ``error`` line."""
    return StudyRecord.from_dict(read_json_object(path, error,
                                                  fix="run the study again to rewrite it"))


def read_curves(path: str | os.PathLike[str], error: type[Exception], *,
                fix: str = "write it again") -> pd.DataFrame | None:
    """curves.csv (or a plan's forecast file, which has its columns), typed: ``measured`` as
    bool, names as text, numbers as floats (budgets as int); None when the file is absent or
    lacks a column of :data:`CURVE_REQUIRED` (a file of another program); a file that is not
    CSV is one ``error`` line ending in ``fix``."""
    path = Path(path)
    if not path.is_file():
        return None
    try:
        curves = pd.read_csv(path)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise error(f"{path} cannot be read as CSV ({exc}); {fix}") from None
    if not set(CURVE_REQUIRED) <= set(curves.columns):
        return None
    curves["measured"] = truthy(curves["measured"])
    for col in ("method", "strategy", "metric"):
        curves[col] = curves[col].astype(str)
    for col in ("mean", "low", "high"):
        curves[col] = pd.to_numeric(curves[col], errors="coerce")
    budgets = pd.to_numeric(curves["n_labels"], errors="coerce")
    if budgets.isna().any():
        raise error(f"{path} column 'n_labels' has the value "
                    f"{curves.loc[budgets.isna(), 'n_labels'].iloc[0]!r}; {fix}")
    curves["n_labels"] = budgets.astype(int)
    return curves
