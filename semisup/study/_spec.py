"""The study spec: what to measure, read from a TOML file and/or command-line overrides."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import textwrap
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

try:
    import tomllib
except ModuleNotFoundError:  # pragma: no cover  (Python 3.10)
    import tomli as tomllib  # type: ignore[no-redef]

from .._errors import ConfigError
from ._metrics import METRICS
from ._settings import EVALUATIONS, SETTINGS, STAGE_DRAWS, check_setting, setting

__all__ = ["EVALUATIONS", "STAGE_DRAWS", "StudySpec"]


@dataclass(frozen=True)
class StudySpec:
    """Everything that defines a label-budget study (and so its fingerprint).

    Every field has one row in ``semisup.study.SETTINGS`` (``study/_settings.py``): its
    rule (checked by :meth:`build`, :meth:`from_dict` and :meth:`replace`), its meaning (the
    Parameters below and README's TOML reference are made from it) and the command-line
    arguments that give it. A new option is a field here (its default) and a row there.
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
            row = setting(key)
            if value is None or (row.empty_is_unset and not value):
                continue
            if row.merge:
                value = {**(values.get(key) or {}), **value}
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
        clean = {k: check_setting(k, v) for k, v in values.items()}
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
        new = dataclasses.replace(self, **{k: check_setting(k, v) for k, v in changes.items()})
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
    for key in (s.name for s in SETTINGS if s.is_path):
        if key in values and isinstance(values[key], str):
            data = Path(values[key])
            if not data.is_absolute():
                values[key] = str((path.parent / data).resolve())
    return values


def _parameters_doc() -> str:
    lines = ["", "    Parameters", "    ----------"]
    for row in SETTINGS:
        lines.append(f"    {row.name} : {row.type}")
        lines.extend(textwrap.wrap(row.meaning, 91, initial_indent=" " * 8,
                                   subsequent_indent=" " * 8))
    return "\n".join(lines) + "\n    "


StudySpec.__doc__ = (StudySpec.__doc__ or "").rstrip() + "\n" + _parameters_doc()
