"""Command line: a thin shell over semisup's public Python API.

Exit codes: 0 done, 2 bad input (a one-line ``error:`` message naming the file, column, key or
value and the fix), 1 internal error. ``--debug`` shows the traceback.
"""

from __future__ import annotations

import argparse
import logging
import sys
import warnings
from collections.abc import Sequence
from pathlib import Path

from . import __version__
from ._errors import SemisupError

EXIT_OK, EXIT_INTERNAL, EXIT_BAD_INPUT = 0, 1, 2

log = logging.getLogger("semisup")


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage mistakes as one line with exit code 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_BAD_INPUT, f"error: {message} (see '{self.prog} --help')\n")


def _add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--quiet", "-q", action="store_true", help="only errors on stderr")
    p.add_argument("--verbose", "-v", action="store_true", help="detailed progress on stderr")
    p.add_argument("--debug", action="store_true", help="show tracebacks of errors")


def _add_table_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("data", type=Path, help="table to read: .csv, .tsv, .txt or .parquet")
    p.add_argument("--label-column", required=True, metavar="COL",
                   help="column holding the class label; empty cells mean unlabeled")
    p.add_argument("--id-column", metavar="COL",
                   help="column of row ids (default: the 0-based row number)")
    p.add_argument("--unlabeled-marker", action="append", metavar="TEXT", default=None,
                   help="extra label text that means 'unlabeled' (repeatable; "
                        "empty cells and NA always do)")
    p.add_argument("--kind", action="append", metavar="COL=KIND", default=None,
                   help="override an inferred column kind (numeric, categorical, drop, text); "
                        "repeatable")
    p.add_argument("--kinds-file", type=Path, metavar="FILE.toml",
                   help="TOML table [kinds] of column = kind overrides")
    p.add_argument("--delimiter", metavar="CHAR", help="field separator (default: sniffed)")
    p.add_argument("--encoding", metavar="NAME", help="text encoding (default: utf-8)")


def build_parser() -> argparse.ArgumentParser:
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
    p.add_argument("--jobs", type=int, default=None, metavar="N",
                   help="worker processes (default: all cores)")
    _add_common(p)

    p = sub.add_parser("card", help="write a data card (Markdown + JSON) for a table",
                       description="Profile a mostly unlabeled table: kinds, missingness, "
                                   "class counts, duplicates, suspected leakage.")
    _add_table_args(p)
    p.add_argument("--out", type=Path, metavar="FILE.md",
                   help="card path (default: <data stem>.card.md beside the current folder); "
                        "a .json twin is written beside it")
    _add_common(p)

    p = sub.add_parser("study", help="run a label-budget study",
                       description="Fit the unsupervised stage once, then measure every method "
                                   "at every label budget over repeated draws. Re-running the "
                                   "same command resumes.")
    _add_table_args(p)
    p.add_argument("--config", type=Path, metavar="FILE.toml",
                   help="study spec (examples in experiments/)")
    p.add_argument("--out", type=Path, default=None, metavar="DIR",
                   help="study folder (default: <data stem>-study)")
    p.add_argument("--methods", metavar="A,B,...", help="methods to compare (default: all)")
    p.add_argument("--budgets", metavar="N,N,...", help="label budgets (default: geometric grid)")
    p.add_argument("--repeats", type=int, metavar="N", help="draws per budget (default 5)")
    p.add_argument("--trials", type=int, metavar="N", help="tuning trials per method and cell")
    p.add_argument("--strategies", metavar="S,S,...",
                   help="row selection strategies to simulate: random, representative, "
                        "uncertainty (default: random)")
    p.add_argument("--seed", type=int, metavar="N", help="study seed (default 0)")
    p.add_argument("--evaluation", choices=("cross-fit", "holdout", "test-file"),
                   help="how cells are scored: cross-fit (default; each repeat evaluates its "
                        "own fold of the labeled rows, so every labeled row is evaluated), "
                        "holdout (one fixed share of the labeled rows), test-file (only the "
                        "rows of --test-file)")
    p.add_argument("--folds", type=int, metavar="K",
                   help="folds of the labeled rows for cross-fit evaluation (default 5)")
    p.add_argument("--holdout", type=float, metavar="F",
                   help="fraction of labeled rows kept as a fixed holdout (default 0.3; "
                        "sets --evaluation holdout)")
    p.add_argument("--test-file", type=Path, metavar="FILE",
                   help="a labeled table with the same columns and classes, only ever "
                        "evaluated on (sets --evaluation test-file)")
    p.add_argument("--transductive", action="store_true",
                   help="let the methods (and, with a holdout or test file, the unsupervised "
                        "stage) see the evaluation rows' features (never their labels)")
    p.add_argument("--jobs", type=int, default=None, metavar="N",
                   help="worker processes (default: all cores)")
    p.add_argument("--cluster", metavar="ADDR",
                   help="run cells on a Dask cluster at ADDR, or 'local-cluster'")
    p.add_argument("--rerun-failed", action="store_true", help="run failed cells again")
    p.add_argument("--restart", action="store_true",
                   help="discard the results in --out and start the study again")
    _add_common(p)

    p = sub.add_parser("plan", help="choose the cheapest budget and method that reach a target",
                       description="Fit learning curves to a finished study and price the "
                                   "options; writes plan.json, curves.csv and label_next.csv.")
    p.add_argument("study_dir", type=Path, metavar="DIR", help="study folder")
    p.add_argument("--target", required=True, metavar="METRIC=VALUE",
                   help="e.g. accuracy=0.95 or macro_f1=0.85")
    p.add_argument("--cost-per-label", type=float, required=True, metavar="X",
                   help="price of one label")
    p.add_argument("--confidence", type=float, default=0.8, metavar="P",
                   help="required probability of meeting the target (default 0.8)")
    p.add_argument("--cost-per-round", type=float, default=0.0, metavar="X",
                   help="fixed price of one labeling round (default 0)")
    p.add_argument("--labels-owned", type=int, default=None, metavar="N",
                   help="training labels already paid for (default: the labeled rows in the "
                        "table less the holdout)")
    p.add_argument("--class-cost", action="append", metavar="CLASS=X", default=None,
                   help="price of one label of CLASS, overriding --cost-per-label (repeatable)")
    p.add_argument("--next", type=int, default=None, metavar="N", dest="n_next",
                   help="rows to list in label_next.csv (default: what the plan buys)")
    _add_common(p)

    p = sub.add_parser("report", help="write report.html and figures for a study folder",
                       description="Single-file HTML report with embedded figures, from a "
                                   "study folder (and its plan, if made).")
    p.add_argument("study_dir", type=Path, metavar="DIR", help="study folder")
    _add_common(p)
    return parser


def _parse_pairs(items: Sequence[str] | None, what: str) -> dict[str, str]:
    out: dict[str, str] = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise SemisupError(f"{what} {item!r} is not of the form NAME=VALUE")
        out[key.strip()] = value.strip()
    return out


def _number(text: str, what: str, example: str = "0.95") -> float:
    try:
        return float(text)
    except ValueError:
        raise SemisupError(f"{what} {text!r} is not a number, e.g. {example}") from None


def _budgets(text: str) -> list[int]:
    budgets = [_number(b, "--budgets entry", "20,50,100") for b in text.split(",")]
    for b in budgets:
        if not b.is_integer() or b < 1:
            raise SemisupError(f"--budgets entry {b:g} is not a whole number of labels >= 1, "
                               "e.g. 20,50,100")
    return [int(b) for b in budgets]


def _table_kwargs(args: argparse.Namespace) -> dict:
    from .data import read_kind_overrides

    kinds = read_kind_overrides(args.kinds_file) if args.kinds_file else {}
    kinds.update(_parse_pairs(args.kind, "--kind"))
    return {
        "label_column": args.label_column,
        "id_column": args.id_column,
        "unlabeled_markers": tuple(args.unlabeled_marker or ()),
        "kinds": kinds,
        "delimiter": args.delimiter,
        "encoding": args.encoding,
    }


def _cmd_demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    result = run_demo(args.out, jobs=args.jobs)
    print(result.summary())
    return EXIT_OK


def _cmd_card(args: argparse.Namespace) -> int:
    from .data import make_card, write_card

    card = make_card(args.data, **_table_kwargs(args))
    out = args.out or Path(f"{args.data.stem}.card.md")
    md_path, json_path = write_card(card, out)
    print(f"wrote {md_path} and {json_path}")
    return EXIT_OK


def _cmd_study(args: argparse.Namespace) -> int:
    from .study import StudySpec, run_study

    overrides = {
        "data": args.data,
        **_table_kwargs(args),
        "methods": args.methods.split(",") if args.methods else None,
        "budgets": _budgets(args.budgets) if args.budgets else None,
        "repeats": args.repeats,
        "trials": args.trials,
        "strategies": args.strategies.split(",") if args.strategies else None,
        "seed": args.seed,
        "evaluation": args.evaluation,
        "folds": args.folds,
        "holdout": args.holdout,
        "test_data": args.test_file,
        "transductive": True if args.transductive else None,
    }
    spec = StudySpec.build(config=args.config, overrides=overrides)
    out = args.out or Path(f"{args.data.stem}-study")
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
                   _parse_pairs(args.class_cost, "--class-cost").items()}
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
    plan = make_plan(args.study_dir, request)
    print(plan.summary())
    return EXIT_OK


def _cmd_report(args: argparse.Namespace) -> int:
    from .report import write_report

    path = write_report(args.study_dir)
    print(f"wrote {path}")
    return EXIT_OK


_COMMANDS = {
    "demo": _cmd_demo,
    "card": _cmd_card,
    "study": _cmd_study,
    "plan": _cmd_plan,
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
