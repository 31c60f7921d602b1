"""The study spec: what to measure, read from a TOML file and/or command-line overrides."""

from __future__ import annotations

import dataclasses
import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

try:
    import tomllib
except ModuleNotFoundError:  # pragma: no cover  (Python 3.10)
    import tomli as tomllib  # type: ignore[no-redef]

from .._errors import ConfigError
from ..selection import STRATEGIES
from ._metrics import METRICS

__all__ = ["EVALUATIONS", "STAGE_DRAWS", "StudySpec"]

_KIND_VALUES = ("numeric", "categorical", "drop", "text")
_PRETRAIN_KINDS = ("vae", "mixture")
#: Evaluation protocols (DEVELOPERS.md "The study protocol").
EVALUATIONS = ("cross-fit", "holdout", "test-file")
#: How many draws of the unsupervised stage a study fits (study/_representations.py).
STAGE_DRAWS = ("auto", "per-repeat", "one")


@dataclass(frozen=True)
class StudySpec:
    """Everything that defines a label-budget study (and so its fingerprint).

    Parameters
    ----------
    data : str
        Table to read (.csv, .tsv, .txt, .parquet); relative paths in a TOML file are relative
        to that file's folder.
    label_column : str
        Column with the class label; empty cells are unlabeled.
    id_column, unlabeled_markers, kinds, delimiter, encoding
        Passed to ``semisup.data.load_dataset``.
    methods : tuple of str or None
        Registered method names; None means ``semisup.methods.default_methods()``.
    budgets : tuple of int or None
        Label budgets; None means a geometric grid from ``2 * n_classes`` to the pool size.
    repeats : int
        Independent nested draws per budget.
    trials : int
        Optuna trials per method and cell (the same for every method); 1 means defaults only.
    strategies : tuple of str
        Row selection strategies to simulate: random, representative, uncertainty.
    seed : int
        Study seed; every random choice derives from it.
    evaluation : str
        ``"cross-fit"`` (default): each repeat evaluates on its own stratified fold of the
        labeled rows and draws its budgets from the other folds, so every labeled row is
        evaluated; ``"holdout"``: one stratified holdout shared by every repeat;
        ``"test-file"``: the labeled rows of ``test_data`` only, never trained or tuned on.
    folds : int
        Folds of the labeled rows for ``"cross-fit"`` (repeats beyond it start a new,
        differently seeded fold assignment).
    holdout : float or int
        For ``"holdout"``: fraction (0 < f < 1) or count of labeled rows kept for evaluation;
        given without ``evaluation`` it selects ``"holdout"``.
    test_data : str or None
        For ``"test-file"``: a labeled table with the same columns and classes as ``data``
        (relative paths in a TOML file are relative to that file's folder); given without
        ``evaluation`` it selects ``"test-file"``.
    transductive : bool
        Let the semi-supervised methods (and, with a holdout or a test file, the unsupervised
        stage) see the evaluation rows' features (never their labels).
    stage_draws : str
        ``"per-repeat"``: each repeat fits its own seeded draw of the unsupervised stage, so
        the curves' intervals hold the stage's own randomness; ``"one"``: one draw shared by
        every repeat (1/repeats of the pretraining time and memory on large tables, but that
        randomness is then in no interval); ``"auto"``: per-repeat unless the stage's rows
        are more than ``stage_rows``, then one.
    stage_rows : int or str
        The unsupervised stage is fitted on a seeded random sample of at most this many rows
        and then encodes every row; ``"auto"``: the size measured in
        benchmarks/bench_large_stage.py; ``"all"``: every row.
    metrics : tuple of str
        Metrics written to curves.csv (all are measured for every cell).
    max_unlabeled : int
        At most this many unlabeled rows (seeded sample) are given to a semi-supervised method
        in one cell; a cell with more fits on that sample and searches its neighbour graph once
        for all its fits. 5,000: against 20,000, the default set's methods that use
        unlabeled rows gained 0.020 accuracy on average on three real tables (spreading lost
        up to 0.025 on nycflights13), at 1/4 to 1/8 of the time
        (benchmarks/bench_graph_rows.py).
    cv_folds : int
        Largest number of cross-validation folds used for tuning inside a labeled draw.
    pretrain : dict
        ``{"vae": {...}, "mixture": {...}}`` parameters for the unsupervised stage.
    """

    data: str
    label_column: str
    id_column: str | None = None
    unlabeled_markers: tuple[str, ...] = ()
    kinds: Mapping[str, str] = field(default_factory=dict)
    delimiter: str | None = None
    encoding: str | None = None
    methods: tuple[str, ...] | None = None
    budgets: tuple[int, ...] | None = None
    repeats: int = 5
    trials: int = 4
    strategies: tuple[str, ...] = ("random",)
    seed: int = 0
    evaluation: str = "cross-fit"
    folds: int = 5
    holdout: float | int = 0.3
    test_data: str | None = None
    transductive: bool = False
    stage_draws: str = "auto"
    stage_rows: int | str = "auto"
    metrics: tuple[str, ...] = METRICS
    max_unlabeled: int = 5_000
    cv_folds: int = 3
    pretrain: Mapping[str, Mapping[str, Any]] = field(default_factory=dict)

    # ------------------------------------------------------------------ building
    @classmethod
    def keys(cls) -> tuple[str, ...]:
        return tuple(f.name for f in dataclasses.fields(cls))

    @classmethod
    def build(
        cls, config: str | Path | None = None, overrides: Mapping[str, Any] | None = None
    ) -> StudySpec:
        """Read ``config`` (TOML) if given, then apply ``overrides`` (None = not given).

        Unknown keys and bad values raise :class:`ConfigError` naming the key and the allowed
        values.
        """
        values: dict[str, Any] = {}
        if config is not None:
            values.update(_read_toml(Path(config)))
        for key, value in (overrides or {}).items():
            if key not in cls.keys():
                raise ConfigError(
                    f"unknown study option {key!r}; allowed: {', '.join(cls.keys())}"
                )
            if value is None:
                continue
            if key == "kinds":
                if not value:
                    continue
                merged = dict(values.get("kinds") or {})
                merged.update(value)
                value = merged
            if key == "unlabeled_markers" and not value:
                continue
            if key in ("data", "test_data"):
                value = str(value)
            values[key] = value
        return cls.from_dict(values)

    @classmethod
    def from_dict(cls, values: Mapping[str, Any], *, where: str = "study spec") -> StudySpec:
        unknown = sorted(set(values) - set(cls.keys()))
        if unknown:
            raise ConfigError(
                f"unknown key {unknown[0]!r} in {where}; allowed: {', '.join(cls.keys())}"
            )
        for required in ("data", "label_column"):
            if values.get(required) in (None, ""):
                raise ConfigError(
                    f"{where} needs {required!r} (give it in the TOML file or on the command line)"
                )
        clean = {k: _check(k, v) for k, v in values.items()}
        if "evaluation" not in clean:
            # A test file or a holdout given alone names its protocol (older specs with
            # 'holdout' keep their meaning).
            if clean.get("test_data") is not None:
                clean["evaluation"] = "test-file"
            elif "holdout" in clean:
                clean["evaluation"] = "holdout"
        if "holdout" in clean and clean["evaluation"] != "holdout":
            raise ConfigError(f"study option 'holdout' is given but 'evaluation' is "
                              f"{clean['evaluation']!r}; use evaluation 'holdout' or leave out "
                              "the holdout")
        _check_evaluation(clean.get("evaluation", "cross-fit"), clean.get("test_data"))
        return cls(**clean)

    # ------------------------------------------------------------------ identity
    def to_dict(self) -> dict[str, Any]:
        out = dataclasses.asdict(self)
        out["kinds"] = dict(sorted(self.kinds.items()))
        out["pretrain"] = {k: dict(v) for k, v in sorted(self.pretrain.items())}
        for key in ("unlabeled_markers", "methods", "budgets", "strategies", "metrics"):
            if out[key] is not None:
                out[key] = list(out[key])
        return out

    def fingerprint(self) -> str:
        """SHA-256 of the spec's canonical JSON; a changed spec gives a new fingerprint."""
        text = json.dumps(self.to_dict(), sort_keys=True, default=str)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    def replace(self, **changes: Any) -> StudySpec:
        new = dataclasses.replace(self, **{k: _check(k, v) for k, v in changes.items()})
        _check_evaluation(new.evaluation, new.test_data)
        return new


def _check_evaluation(evaluation: str, test_data: str | None) -> None:
    if evaluation == "test-file" and test_data is None:
        raise ConfigError("study option 'evaluation' = 'test-file' needs a labeled test file; "
                          "give it with --test-file FILE or 'test_data'")
    if evaluation != "test-file" and test_data is not None:
        raise ConfigError(f"study option 'test_data' is given but 'evaluation' is "
                          f"{evaluation!r}; use evaluation 'test-file' or leave out the test "
                          "file")


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ConfigError(
            f"cannot read study config {path}: {exc.strerror}; check the path"
        ) from None
    try:
        values = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"study config {path} is not valid TOML: {exc}") from None
    # A [study] table is accepted as well as top-level keys.
    if "study" in values and isinstance(values["study"], dict):
        inner = values.pop("study")
        values = {**values, **inner}
    unknown = sorted(set(values) - set(StudySpec.keys()))
    if unknown:
        raise ConfigError(
            f"unknown key {unknown[0]!r} in {path}; allowed: {', '.join(StudySpec.keys())}"
        )
    for key in ("data", "test_data"):
        if key in values and isinstance(values[key], str):
            data = Path(values[key])
            if not data.is_absolute():
                values[key] = str((path.parent / data).resolve())
    return values


def _bad(key: str, value: Any, allowed: str) -> ConfigError:
    return ConfigError(f"study option {key!r} = {value!r} is not allowed; {allowed}")


def _str_list(key: str, value: Any, allowed: tuple[str, ...] | None = None) -> tuple[str, ...]:
    if isinstance(value, str):
        value = [v.strip() for v in value.split(",") if v.strip()]
    if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
        raise _bad(key, value, "give a list of names")
    if not value:
        raise _bad(key, value, "give at least one name")
    if len(set(value)) != len(value):
        raise _bad(key, value, "names must not repeat")
    if allowed is not None:
        for v in value:
            if v not in allowed:
                raise ConfigError(
                    f"study option {key!r}: {v!r} is not allowed; allowed: {', '.join(allowed)}"
                )
    return tuple(value)


def _int(key: str, value: Any, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < low:
        raise _bad(key, value, f"give a whole number >= {low}")
    return int(value)


def _check(key: str, value: Any) -> Any:
    if key in ("data", "label_column"):
        if not isinstance(value, (str, Path)) or not str(value):
            raise _bad(key, value, "give a non-empty text value")
        return str(value)
    if key == "test_data":
        if value is None:
            return None
        if not isinstance(value, (str, Path)) or not str(value):
            raise _bad(key, value, "give the path of a labeled test file")
        return str(value)
    if key == "evaluation":
        if value not in EVALUATIONS:
            raise _bad(key, value, f"allowed: {', '.join(EVALUATIONS)}")
        return value
    if key == "folds":
        return _int(key, value, 2)
    if key in ("id_column", "delimiter", "encoding"):
        if value is not None and not isinstance(value, str):
            raise _bad(key, value, "give a text value")
        return value
    if key == "unlabeled_markers":
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise _bad(key, value, "give a list of texts")
        return tuple(value)
    if key == "kinds":
        if not isinstance(value, Mapping):
            raise _bad(key, value, "give a table of column = kind")
        for col, kind in value.items():
            if kind not in _KIND_VALUES:
                raise ConfigError(
                    f"study option 'kinds': column {col!r} has kind {kind!r}; allowed: "
                    f"{', '.join(_KIND_VALUES)}"
                )
        return dict(value)
    if key == "methods":
        return None if value is None else _str_list(key, value)
    if key == "budgets":
        if value is None:
            return None
        if isinstance(value, str):
            try:
                value = [int(v) for v in value.split(",")]
            except ValueError:
                raise _bad(key, value, "give whole numbers >= 1") from None
        if not isinstance(value, (list, tuple)) or not value:
            raise _bad(key, value, "give a list of whole numbers >= 1")
        for v in value:
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise ConfigError(
                    f"study option 'budgets': {v!r} is not allowed; give whole numbers >= 1"
                )
        return tuple(sorted(set(int(v) for v in value)))
    if key == "repeats":
        return _int(key, value, 1)
    if key == "trials":
        return _int(key, value, 1)
    if key == "cv_folds":
        return _int(key, value, 2)
    if key == "max_unlabeled":
        return _int(key, value, 0)
    if key == "seed":
        return _int(key, value, 0)
    if key == "strategies":
        return _str_list(key, value, STRATEGIES)
    if key == "metrics":
        return _str_list(key, value, METRICS)
    if key == "holdout":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise _bad(key, value, "give a fraction in (0, 1) or a row count >= 1")
        if not (0 < value < 1 or (value >= 1 and float(value).is_integer())):
            raise _bad(key, value, "give a fraction in (0, 1) or a row count >= 1")
        return int(value) if value >= 1 else float(value)
    if key == "stage_draws":
        if value not in STAGE_DRAWS:
            raise _bad(key, value, f"give one of {', '.join(STAGE_DRAWS)}")
        return value
    if key == "stage_rows":
        if value in ("auto", "all"):
            return value
        if isinstance(value, bool) or not isinstance(value, int) or value < 1000:
            raise _bad(key, value, "give \"auto\", \"all\" or a whole number >= 1000")
        return int(value)
    if key == "transductive":
        if not isinstance(value, bool):
            raise _bad(key, value, "give true or false")
        return value
    if key == "pretrain":
        if not isinstance(value, Mapping):
            raise _bad(key, value, "give tables [pretrain.vae] / [pretrain.mixture]")
        for kind, params in value.items():
            if kind not in _PRETRAIN_KINDS:
                raise ConfigError(
                    f"study option 'pretrain': {kind!r} is not allowed; allowed: "
                    f"{', '.join(_PRETRAIN_KINDS)}"
                )
            if not isinstance(params, Mapping):
                raise _bad(f"pretrain.{kind}", params, "give a table of parameters")
        return {k: dict(v) for k, v in value.items()}
    raise ConfigError(f"unknown study option {key!r}; allowed: {', '.join(StudySpec.keys())}")
