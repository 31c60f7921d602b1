"""Command line: a thin shell over semisup's public Python API.

Exit codes: 0 done, 2 bad input (a one-line ``error:`` message naming the file, column, key or
value and the fix), 1 internal error. ``--debug`` shows the traceback.
"""

from __future__ import annotations

import argparse
import dataclasses
import errno
import logging
import os
import sys
import warnings
from collections.abc import Sequence
from pathlib import Path

from . import __version__
from ._errors import SemisupError
from ._rules import parse_pairs

EXIT_OK, EXIT_INTERNAL, EXIT_BAD_INPUT = 0, 1, 2
#: ``semisup plan``: the plan was made, but no option reaches the target (do not buy).
EXIT_NOT_REACHABLE = 3

log = logging.getLogger("semisup")


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage mistakes as one line with exit code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_BAD_INPUT, f"error: {message} (see '{self.prog} --help')\n")


def _positive_int(text: str) -> int:
    """argparse type: a whole number >= 1 (``--jobs 0`` would start no worker)."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number, e.g. 2") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} is not allowed; give a whole number >= 1")
    return value


def _stage_rows_default() -> str:
    from .study import STAGE_SAMPLE_ROWS

    return f"auto, {STAGE_SAMPLE_ROWS:,} rows"


def _add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--quiet", "-q", action="store_true", help="only errors on stderr")
    p.add_argument("--verbose", "-v", action="store_true", help="detailed progress on stderr")
    p.add_argument("--debug", action="store_true", help="show tracebacks of errors")


def _add_table_args(p: argparse.ArgumentParser, defaults: dict[str, str]) -> None:
    """The table-reading arguments (card and study), from the study's settings table."""
    from .study import add_setting_arguments

    add_setting_arguments(p, defaults, table=True)


def _field_default(cls: type, name: str) -> object:
    """The default of dataclass field ``name`` of ``cls`` (the value the code uses)."""
    for f in dataclasses.fields(cls):
        if f.name == name:
            return f.default
    raise KeyError(name)


def help_defaults() -> dict[str, str]:
    """The defaults the ``--help`` texts quote, read from the code that applies them.

    ``tests/test_cli_help.py`` checks every entry against its source, so a changed default
    changes the help with it.
    """
    import inspect

    from .methods import default_methods
    from .plan import METRICS, PlanRequest
    from .selection import STRATEGIES
    from .study import StudySpec, default_budgets

    n_points = inspect.signature(default_budgets).parameters["n_points"].default
    holdout = _field_default(StudySpec, "holdout")
    return {
        "methods": ", ".join(default_methods()),
        "budgets": f"a geometric grid of about {n_points} budgets from 2 x the number of "
                   "classes up to the pool size (the labeled rows less one repeat's "
                   "evaluation rows), plus the grown pool after each labeling round",
        "repeats": str(_field_default(StudySpec, "repeats")),
        "trials": str(_field_default(StudySpec, "trials")),
        "strategies": ", ".join(_field_default(StudySpec, "strategies")),  # type: ignore[arg-type]
        "strategy_choices": ", ".join(STRATEGIES),
        "seed": str(_field_default(StudySpec, "seed")),
        "holdout": f"{holdout:g}",
        "evaluation": str(_field_default(StudySpec, "evaluation")),
        "folds": str(_field_default(StudySpec, "folds")),
        "stage_draws": str(_field_default(StudySpec, "stage_draws")),
        "stage_rows": _stage_rows_default(),
        "confidence": f"{_field_default(PlanRequest, 'confidence'):g}",
        "cost_per_round": f"{_field_default(PlanRequest, 'cost_per_round'):g}",
        "metrics": ", ".join(METRICS),
    }


def build_parser() -> argparse.ArgumentParser:
    from .plan import PlanRequest
    from .study import add_setting_arguments

    d = help_defaults()
    parser = _Parser(
        prog="semisup",
        description="How many labels to buy, which method to use, which rows to label first.",
    )
    parser.add_argument("--version", action="version", version=f"semisup {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("demo", help="run the whole pipeline on the bundled demo data",
                       description="Card, study, plan and report on the bundled demo table "
                                   "(a records office digitising hand-filled forms).")
    p.add_argument("--out", type=Path, default=Path("semisup-demo"), metavar="DIR",
                   help="folder for every output (default: ./semisup-demo)")
    p.add_argument("--jobs", type=_positive_int, default=None, metavar="N",
                   help="worker processes (default: all cores)")
    _add_common(p)

    p = sub.add_parser("card", help="write a data card (Markdown + JSON) for a table",
                       description="Profile a mostly unlabeled table: kinds, missingness, "
                                   "class counts, duplicates, suspected leakage.")
    _add_table_args(p, d)
    p.add_argument("--out", type=Path, metavar="FILE.md",
                   help="card path (default: <data stem>.card.md in the current folder); "
                        "a .json twin is written beside it")
    _add_common(p)

    p = sub.add_parser("study", help="run a label-budget study",
                       description="Fit the unsupervised stage once, then measure every method "
                                   "at every label budget over repeated draws. Re-running the "
                                   "same command resumes; with more repeats, budgets, methods "
                                   "or returned labels (add-labels) it grows the study, keeping "
                                   "every unchanged cell.")
    _add_table_args(p, d)
    p.add_argument("--config", type=Path, metavar="FILE.toml",
                   help="study spec (examples in experiments/)")
    p.add_argument("--out", type=Path, default=None, metavar="DIR",
                   help="study folder (default: <data stem>-study)")
    add_setting_arguments(p, d, table=False)
    p.add_argument("--jobs", type=_positive_int, default=None, metavar="N",
                   help="worker processes (default: all cores)")
    p.add_argument("--cluster", metavar="ADDR",
                   help="run cells on a Dask cluster at ADDR, or 'local-cluster'")
    p.add_argument("--rerun-failed", action="store_true", help="run failed cells again")
    p.add_argument("--restart", action="store_true",
                   help="discard the results in --out and start the study again")
    _add_common(p)

    p = sub.add_parser("plan", help="choose the cheapest budget and method that reach a target",
                       description="Fit learning curves to a finished study and price the "
                                   "options; keeps the plan by name in plans/ (with the study "
                                   "state it was made from and its forecast points), copies it "
                                   "to plan.json with the earlier plans' track record, and "
                                   "writes the annotator sheet label_next.csv.",
                       epilog=f"Exit status: {EXIT_OK} when an option reaches the target; "
                              f"{EXIT_NOT_REACHABLE} when none does (the plan says 'do not "
                              "buy' and writes no label_next.csv unless --next is given); "
                              f"{EXIT_BAD_INPUT} for bad input.")
    p.add_argument("study_dir", type=Path, metavar="DIR", help="study folder")
    p.add_argument("--target", required=True, metavar="METRIC=VALUE",
                   help=f"metric to reach on the evaluation rows, one of {d['metrics']}; "
                        "e.g. accuracy=0.95 or macro_f1=0.85")
    p.add_argument("--cost-per-label", type=float, required=True, metavar="X",
                   help="price of one label (any currency; the report can name it)")
    p.add_argument("--confidence", type=float,
                   default=_field_default(PlanRequest, "confidence"), metavar="P",
                   help="how sure the plan must be: the least probability that the chosen "
                        f"option meets the target (default: {d['confidence']})")
    p.add_argument("--cost-per-round", type=float,
                   default=_field_default(PlanRequest, "cost_per_round"), metavar="X",
                   help=f"fixed price of one labeling round (default: {d['cost_per_round']})")
    p.add_argument("--labels-owned", type=int, default=None, metavar="N",
                   help="training labels already paid for (default: every labeled row of "
                        "the study, those returned by labeling rounds included; with "
                        "--evaluation holdout, less the holdout)")
    p.add_argument("--class-cost", action="append", metavar="CLASS=X", default=None,
                   help="price of one label of CLASS, overriding --cost-per-label (repeatable)")
    p.add_argument("--next", type=int, default=None, metavar="N", dest="n_next",
                   help="rows to list in label_next.csv (default: what the plan buys; none "
                        "when the target is not reachable)")
    p.add_argument("--sheet-format", choices=("csv", "xlsx"), default="csv",
                   help="annotator sheet as label_next.csv or label_next.xlsx (.xlsx needs "
                        "pip install 'semisup[excel]') (default: csv)")
    _add_common(p)

    p = sub.add_parser("add-labels", help="merge labels returned by annotators into a study",
                       description="Read a returned label_next sheet (CSV, TSV, Parquet or "
                                   ".xlsx), match its rows by row_id and merge the filled-in "
                                   "labels into the study's own labeled set "
                                   "(labels_added.csv in the study folder; your table is never "
                                   "modified). The next 'semisup study' run on the folder uses "
                                   "them. A bad sheet changes nothing (exit status 2).")
    p.add_argument("study_dir", type=Path, metavar="DIR", help="study folder")
    p.add_argument("returned", type=Path, metavar="SHEET", help="the returned sheet")
    p.add_argument("--allow-new-class", action="store_true",
                   help="accept labels of a class the study has never seen")
    _add_common(p)

    p = sub.add_parser("report", help="write report.html and figures for a study folder",
                       description="Single-file HTML report with embedded figures, from a "
                                   "study folder (and its plan, if made).")
    p.add_argument("study_dir", type=Path, metavar="DIR", help="study folder")
    p.add_argument("--currency", default="", metavar="TEXT",
                   help="currency written before prices in the report, e.g. EUR or '$' "
                        "(default: none, prices read 'per label')")
    _add_common(p)
    _add_model_parsers(sub)
    return parser


def _add_model_parsers(sub) -> None:
    p = sub.add_parser("fit", help="train the plan's chosen method on every label; save a model",
                       description="Fit the method the plan chose (or --method) on every labeled "
                                   "row of the study's table, tuned with the study's budget, "
                                   "and write a model folder (no pickle).")
    p.add_argument("study_dir", type=Path, metavar="DIR", help="study folder")
    p.add_argument("--out", type=Path, required=True, metavar="MODEL",
                   help="model folder to write (an older model folder there is replaced)")
    p.add_argument("--method", metavar="NAME", help="fit this method instead of the plan's")
    p.add_argument("--data", type=Path, metavar="FILE",
                   help="the study's table, if it moved since the study")
    p.add_argument("--pseudo-labels", type=Path, metavar="FILE.csv",
                   help="also write class, probabilities and flags for the table's unlabeled "
                        "rows, with an 'accepted' column at --min-probability")
    p.add_argument("--min-probability", type=float, default=0.9, metavar="P",
                   dest="confidence_cut",
                   help="the least predicted probability a pseudo-label needs to be accepted; "
                        "the fit reports the cross-fitted accuracy above it (default 0.9)")
    # the option's earlier name, still accepted
    p.add_argument("--confidence-cut", type=float, default=argparse.SUPPRESS,
                   dest="confidence_cut", help=argparse.SUPPRESS)
    _add_raw_cells(p, "--pseudo-labels")
    _add_common(p)

    p = sub.add_parser("predict", help="classes, probabilities and flags for new rows",
                       description="Apply a model folder to a table (CSV, TSV or Parquet), chunk "
                                   "by chunk; writes row_id, predicted, proba_<class>, "
                                   "top_probability, density_score, out_of_distribution.")
    p.add_argument("model", type=Path, metavar="MODEL", help="model folder from 'semisup fit'")
    p.add_argument("data", type=Path, metavar="DATA", help="table to score")
    p.add_argument("--out", type=Path, required=True, metavar="FILE.csv",
                   help="predictions (.csv, .tsv or .parquet)")
    p.add_argument("--id-column", metavar="COL", default=None,
                   help="column of row ids (default: the training table's id column; '' numbers "
                        "the rows)")
    p.add_argument("--delimiter", metavar="CHAR", help="field separator (default: sniffed)")
    p.add_argument("--encoding", metavar="NAME", help="text encoding (default: utf-8)")
    p.add_argument("--chunk-rows", type=int, default=100_000, metavar="N",
                   help="rows scored at a time; bounds memory (default 100000)")
    _add_raw_cells(p, "--out")
    _add_common(p)


def _add_raw_cells(p: argparse.ArgumentParser, option: str) -> None:
    p.add_argument("--raw-cells", action="store_true",
                   help=f"write ids and class names in {option} exactly as they are, for "
                        "machine pipelines (default: a .csv/.tsv cell or header that a "
                        "spreadsheet would run as a formula gets a leading ', as OWASP's "
                        "CSV-injection guidance advises; .parquet output is always raw)")


def _number(text: str, what: str, example: str = "0.95") -> float:
    try:
        return float(text)
    except ValueError:
        raise SemisupError(f"{what} {text!r} is not a number, e.g. {example}") from None


def _existing_parent(path: Path) -> Path:
    path = path.absolute()
    while not path.exists() and path != path.parent:
        path = path.parent
    return path


def _check_writable_folder(folder: Path, option: str) -> None:
    """Refuse an output folder this process cannot write in, before any work is done."""
    folder = _existing_parent(folder) if not folder.exists() else folder
    if not folder.is_dir():
        raise SemisupError(f"{option}: {folder} is a file, not a folder; give a folder path")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise SemisupError(f"{option}: cannot write in {folder} (permission denied); choose "
                           "another folder or make it writable")


def _table_source(args: argparse.Namespace):
    """The table and its reading settings as the command line gives them."""
    from .data import TableSource
    from .study import setting_values

    return TableSource.of(setting_values(args, table_only=True))


def _cmd_demo(args: argparse.Namespace) -> int:
    from ._paths import check_output
    from .demo import run_demo

    check_output(args.out, option="--out")  # never inside a model folder
    result = run_demo(args.out, jobs=args.jobs)
    print(result.summary())
    return EXIT_OK


def _cmd_card(args: argparse.Namespace) -> int:
    from ._paths import check_output
    from .data import write_card

    out = args.out or Path(f"{args.data.stem}.card.md")
    if out.is_dir():  # a folder: the card goes inside it
        out = out / f"{args.data.stem}.card.md"
    inputs = {"the input table": args.data, "the kinds file": args.kinds_file}
    check_output(out, option="--out", inputs=inputs)
    check_output(out.with_suffix(".json"), option="--out (its .json twin)", inputs=inputs)
    _check_writable_folder(out.parent, "--out")
    card = _table_source(args).card()
    md_path, json_path = write_card(card, out)
    print(f"wrote {md_path} and {json_path}")
    return EXIT_OK


def _cmd_study(args: argparse.Namespace) -> int:
    from .study import StudySpec, run_study, setting_values

    overrides = setting_values(args)
    spec = StudySpec.build(config=args.config, overrides=overrides)
    out = args.out or Path(f"{args.data.stem}-study")
    if out.exists() and not out.is_dir():
        raise SemisupError(f"--out {out} is a file, not a folder; give a folder for the "
                           "study's outputs (it is created if missing)")
    from ._paths import check_output

    check_output(out, option="--out", inputs={
        "the input table": args.data, "the test file": args.test_file,
        "the config file": args.config, "the kinds file": args.kinds_file})
    _check_writable_folder(out if out.is_dir() else _existing_parent(out), "--out")
    result = run_study(spec, out, jobs=args.jobs, cluster=args.cluster,
                       rerun_failed=args.rerun_failed, restart=args.restart)
    print(result.summary())
    return EXIT_OK


def _cmd_plan(args: argparse.Namespace) -> int:
    metric, sep, value = args.target.partition("=")
    if not sep:
        raise SemisupError(f"--target {args.target!r} is not of the form METRIC=VALUE, "
                           "e.g. accuracy=0.95")
    target_value = _number(value, "--target value")
    class_costs = {k: _number(v, f"--class-cost {k}") for k, v in
                   parse_pairs(args.class_cost, "--class-cost").items()}
    from .plan import PlanRequest, make_plan

    request = PlanRequest(
        metric=metric.strip(),
        target=target_value,
        cost_per_label=args.cost_per_label,
        confidence=args.confidence,
        cost_per_round=args.cost_per_round,
        labels_owned=args.labels_owned,
        class_costs=class_costs,
        n_next=args.n_next,
    )
    plan = make_plan(args.study_dir, request, sheet_format=args.sheet_format)
    print(plan.summary(verbose=args.verbose))
    return EXIT_OK if plan.reached else EXIT_NOT_REACHABLE


def _cmd_add_labels(args: argparse.Namespace) -> int:
    from .study import add_labels

    result = add_labels(args.study_dir, args.returned, allow_new_classes=args.allow_new_class)
    print(result.summary())
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    from .report import write_report

    path = write_report(args.study_dir, currency=args.currency)
    print(f"wrote {path}")
    return EXIT_OK


def _cmd_fit(args: argparse.Namespace) -> int:
    from ._paths import check_output, study_inputs
    from .model import fit_model, save_model
    from .study import recorded_table, study_json

    cut = args.confidence_cut
    if not 0 < cut < 1:
        raise SemisupError(f"--min-probability {cut:g} is not allowed; give a probability "
                           "between 0 and 1 (exclusive), e.g. 0.9")
    # every output path is checked before the (long) fit, by the same rule the writers apply
    info = study_json(args.study_dir)
    table = args.data or recorded_table(info, args.study_dir)[0]
    inputs = {"the study's table": table, **study_inputs(args.study_dir)}
    check_output(args.out, option="--out", model_folder_ok=True, inputs=inputs,
                 held={"the study folder": args.study_dir})
    if args.pseudo_labels is not None:
        check_output(args.pseudo_labels, option="--pseudo-labels", inputs=inputs,
                     extra_outputs=[("--out", args.out)])
    result = fit_model(args.study_dir, method=args.method, data=args.data,
                       confidence_cut=args.confidence_cut)
    path = save_model(result.model, args.out)
    print(result.summary())
    print(f"wrote model folder {path}")
    if args.pseudo_labels is not None:
        frame = result.pseudo_labels
        if result.write_pseudo_labels(args.pseudo_labels, raw=args.raw_cells) is None:
            print("the table has no unlabeled rows; no pseudo-labels written")
        else:
            print(f"wrote {len(frame)} pseudo-labels ({int(frame['accepted'].sum())} accepted at "
                  f"{args.confidence_cut:g}) to {args.pseudo_labels}")
    return EXIT_OK


def _cmd_predict(args: argparse.Namespace) -> int:
    from .model import load_model, predict_file

    model = load_model(args.model)
    kwargs = {} if args.id_column is None else {"id_column": args.id_column}
    summary = predict_file(model, args.data, args.out, delimiter=args.delimiter,
                           encoding=args.encoding, chunk_rows=args.chunk_rows,
                           raw_cells=args.raw_cells, **kwargs)
    print(summary.summary())
    return EXIT_OK


_COMMANDS = {
    "fit": _cmd_fit,
    "predict": _cmd_predict,
    "demo": _cmd_demo,
    "card": _cmd_card,
    "study": _cmd_study,
    "plan": _cmd_plan,
    "add-labels": _cmd_add_labels,
    "report": _cmd_report,
}


def _configure_logging(args: argparse.Namespace) -> None:
    level = logging.INFO
    if getattr(args, "quiet", False):
        level = logging.ERROR
    elif getattr(args, "verbose", False) or getattr(args, "debug", False):
        level = logging.DEBUG
    logging.basicConfig(level=level, stream=sys.stderr, format="%(levelname)s: %(message)s")
    logging.captureWarnings(True)
    if not getattr(args, "debug", False):
        warnings.formatwarning = lambda msg, cat, *a, **k: f"{cat.__name__}: {msg}\n"
    if level > logging.WARNING:
        warnings.simplefilter("ignore")


#: errno of an OSError caused by the user's files or folders -> the fix to print.
_USER_ERRNOS = {
    errno.EACCES: "check its permissions or choose another path",
    errno.EPERM: "check its permissions or choose another path",
    errno.EROFS: "the file system is read-only; choose another --out folder",
    errno.ENOSPC: "the disk is full; free some space or choose another --out folder",
    errno.ENOENT: "check the path",
    errno.ENOTDIR: "a part of the path is a file, not a folder; check the path",
    errno.EISDIR: "it is a folder; give a file path",
    errno.EEXIST: "something is already there; choose another path",
    errno.ENAMETOOLONG: "the name is too long; choose a shorter path",
}


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    _configure_logging(args)
    try:
        return _COMMANDS[args.command](args)
    except SemisupError as exc:
        if args.debug:
            raise
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:
        if args.debug:
            raise
        # A file the user named cannot be read or written: bad input, not a bug.
        if exc.errno in _USER_ERRNOS:
            where = exc.filename or "a file"
            print(f"error: cannot use {where}: {exc.strerror or exc}; "
                  f"{_USER_ERRNOS[exc.errno]}", file=sys.stderr)
            return EXIT_BAD_INPUT
        print(f"internal error: {type(exc).__name__}: {exc} (run again with --debug for the "
              "traceback and report it)", file=sys.stderr)
        return EXIT_INTERNAL
    except KeyboardInterrupt:
        print("interrupted; finished work is kept, run the same command again to resume",
              file=sys.stderr)
        return 130
    except Exception as exc:  # noqa: BLE001  (last resort: one line, not a traceback)
        if args.debug:
            raise
        print(f"internal error: {type(exc).__name__}: {exc} (run again with --debug for the "
              "traceback and report it)", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
