"""run_study: fix the design, fit the unsupervised stage once, run every cell, export."""

from __future__ import annotations

import dataclasses
import json
import logging
import os
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from .._errors import ConfigError
from .._progress import Progress
from ..data import shift_warning
from ..methods import stage_kind
from ._backends import run_cells
from ._candidates import add_cover_scores, refit_candidates
from ._cell import Cell, CellContext, cell_key, cell_seed
from ._design import make_design
from ._draws import acquisition_orders
from ._exports import cells_frame, write_data_card, write_exports
from ._folder import StudyRecord
from ._info import PROTOCOL_NOTES, study_info
from ._layout import check_input_outside_outputs, check_out_folder, remove_outputs
from ._lock import study_lock
from ._representations import fit_representations, repeat_key
from ._rounds import read_added_labels
from ._shared import remove_shared
from ._spec import StudySpec
from ._store import Store

__all__ = ["PROTOCOL_NOTES", "StudyResult", "run_study"]

log = logging.getLogger(__name__)


@dataclass
class StudyResult:
    """What :func:`run_study` returns."""

    out_dir: Path
    cells: pd.DataFrame
    info: dict[str, Any] = field(default_factory=dict)

    def summary(self) -> str:
        """A few readable lines: cells by status, the lead metric where the repeats differ."""
        c = self.cells
        counts = c["status"].value_counts().to_dict() if len(c) else {}
        lines = [
            f"study in {self.out_dir}: {len(c)} cells "
            f"({counts.get('ok', 0)} ok, {counts.get('failed', 0)} failed, "
            f"{counts.get('skipped', 0)} skipped)"
        ]
        ok = c[(c["status"] == "ok") & (c["strategy"] == "random")] if len(c) else c
        if len(ok):
            record = StudyRecord.from_dict(self.info)
            metric, at_n = record.lead_metric, record.summary_budget(ok["n_labels"])
            at = ok[ok["n_labels"] == at_n].groupby("method")[metric].agg(["mean", "min", "max",
                                                                          "size"])
            at = at.sort_values("mean", ascending=False)
            lines.append(f"{metric.replace('_', ' ')} on the evaluation rows at {at_n} labels "
                         "(mean, range over repeats):")
            for name, r in at.head(5).iterrows():
                lines.append(f"  {name:<28} {r['mean']:.3f}  ({r['min']:.3f}-{r['max']:.3f}, "
                             f"{int(r['size'])} repeats)")
        for w in self.info.get("warnings", [])[:3]:
            lines.append(f"warning: {w}")
        run = self.info.get("this_run") or {}
        if run.get("kept"):
            lines.append(f"{run['kept']} cell(s) kept from earlier runs (unchanged draw, "
                         f"evaluation rows and settings), {run['run']} run now")
        lines.append(f"wrote cells.csv, curves.csv, study.json, candidates.npz in {self.out_dir}")
        return "\n".join(lines)


def run_study(
    spec: StudySpec,
    out_dir: str | os.PathLike[str],
    *,
    jobs: int | None = None,
    cluster: Any = None,
    rerun_failed: bool = False,
    restart: bool = False,
    dataset: Any = None,
    representation_fn: Callable[..., Any] | None = None,
    progress: bool | None = None,
) -> StudyResult:
    """Run (or resume) the label-budget study ``spec`` in ``out_dir``.

    Parameters
    ----------
    spec : StudySpec
    out_dir : path
        Study folder; holds study.sqlite, the exports and cache/.
    jobs : int, optional
        Worker processes (default: all cores); 1 runs the cells in this process.
    cluster : str or distributed.Client, optional
        Run the cells on a Dask cluster: a scheduler address, ``"local-cluster"`` or a Client.
    rerun_failed : bool
        Run cells recorded as failed again (finished cells are always kept).
    restart : bool
        Discard the results in ``out_dir`` and start again.
    dataset : semisup.data.Dataset, optional
        Use this dataset instead of reading ``spec.data``.
    representation_fn : callable, optional
        Stand-in for ``semisup.pretrain.fit_representation`` (same signature).
    progress : bool, optional
        Show progress: a bar on a terminal, else a line every tenth of the cells or 30 s
        (default: when logging is at INFO or more detailed).
    """
    t_start = time.perf_counter()
    out = Path(out_dir)
    jobs = int(jobs) if jobs else (os.cpu_count() or 1)
    if jobs < 1:
        raise ConfigError(f"--jobs must be >= 1; got {jobs}")
    # ---- the study folder: nothing is written before these checks, one study at a time
    check_out_folder(out)
    if dataset is None:
        check_input_outside_outputs(spec.data, out)
    check_input_outside_outputs(spec.test_data, out)
    with study_lock(out):
        return _run_locked(spec, out, t_start, jobs, cluster, rerun_failed, restart, dataset,
                           representation_fn, progress)


def _run_locked(spec, out, t_start, jobs, cluster, rerun_failed, restart, dataset,
                representation_fn, progress) -> StudyResult:
    # labels returned by annotators (semisup add-labels); a restart discards them
    added = None if restart else read_added_labels(out)
    design = make_design(spec, dataset, injected_representation=representation_fn is not None,
                         added=added)
    resolved, ds, y, methods = design.spec, design.ds, design.y, design.methods
    if restart:  # every output of the old study goes, not only its store
        remove_outputs(out)
    # A grown study (more repeats, budgets, methods or added labels) keeps its store: each
    # stored cell whose content key this design computes again is kept.
    store = Store(out / "study.sqlite", design.settings_fingerprint, state=design.fingerprint,
                  restart=restart)
    try:
        # ---- unsupervised stage: once per study, on features only (never a label)
        features, diagnostics, rep_errors, rep_seconds = fit_representations(
            design.kinds, ds, design.representation_rows, resolved, out, representation_fn,
            repeats=resolved.repeats if resolved.stage_draws == "per-repeat" else 1,
            jobs=jobs, stage=design.stage, progress=progress,
        )
        if store.get_meta("pretrain_seconds") is None:
            store.set_meta("pretrain_seconds", json.dumps(rep_seconds))
        orders, order_kind = acquisition_orders(
            features, y, [design.pool_idx(r) for r in range(resolved.repeats)], design.budgets,
            resolved.strategies, resolved.seed,
            parts=[design.pool_parts[design.repeat_fold[r]] for r in range(resolved.repeats)],
        )

        ctx = CellContext(
            features=features, y=y, pools=design.pools, evals=design.evals,
            repeat_fold=dict(enumerate(design.repeat_fold)),
            unlabeled_idx=design.unlabeled_idx, orders=orders,
            methods={n: m for n, m in methods.items()
                     if stage_kind(m.representation) not in rep_errors},
            n_classes=design.n_classes, seed=resolved.seed, trials=resolved.trials,
            cv_folds=resolved.cv_folds, max_unlabeled=resolved.max_unlabeled,
            transductive=resolved.transductive,
        )
        keys = _cell_keys(ctx, design)
        cells_seconds, counts = _run_all_cells(ctx, design, keys, store, rep_errors, jobs,
                                               cluster, rerun_failed, progress)

        cells = cells_frame(store.cells(set(keys.values())), list(ds.class_names))
        info = study_info(design, cells, diagnostics, rep_errors,
                          json.loads(store.get_meta("pretrain_seconds")), order_kind, jobs,
                          cluster)
        info["timing"]["this_run_cells_seconds"] = cells_seconds
        info["this_run"] = counts
        info["candidates"] = refit_candidates(out, ds, ctx, methods, cells, features, resolved,
                                              design.final_train_idx)
        card = write_data_card(out, resolved, dataset is not None, info)
        leak = card.leakage_warning() if card is not None else None
        if leak:  # a near-perfect score from a leaking column must not pass without a word
            log.warning("%s", leak)
            info["warnings"].insert(0, leak)
        shift = card.labeled_vs_pool if card is not None else {
            "checked": False, "reason": "no data card (dataset given directly)"}
        info["labeled_vs_pool"] = shift
        if shift_warning(shift):  # the plan carries study.json's warnings
            info["warnings"].insert(0, shift_warning(shift))
            info["candidates"]["cover"] = add_cover_scores(out, ds, ctx, shift)
        info["timing"]["this_run_total_seconds"] = time.perf_counter() - t_start
        write_exports(out, cells, resolved.metrics, info)
    finally:
        store.close()
        remove_shared(out)  # the feature files the workers shared
    return StudyResult(out_dir=out, cells=cells, info=info)


def _cell_keys(ctx: CellContext, design) -> dict[Cell, str]:
    """Every cell of the design with its content key (see :func:`cell_key`)."""
    resolved = design.spec
    names = list(design.ds.class_names)
    full = dataclasses.replace(ctx, methods=design.methods)  # failed stages' methods too
    memo: dict = {}
    def representation(cell: Cell) -> str:
        # repeat r's own draw of a fitted stage (study/_representations.py); raw is shared
        kind = design.methods[cell.method].representation
        key = design.representation_keys[stage_kind(kind)]
        if kind == "raw":
            return key
        draw = cell.repeat if resolved.stage_draws == "per-repeat" else 0
        return f"{key}@{repeat_key(kind, draw)}"

    return {
        cell: cell_key(full, cell, representation(cell), names, memo)
        for s in resolved.strategies for r in range(resolved.repeats)
        for b in design.budgets for m in resolved.methods
        for cell in [Cell(m, b, r, s)]
    }


def _run_all_cells(ctx, design, keys, store, rep_errors, jobs, cluster, rerun_failed,
                   progress) -> tuple[float, dict[str, int]]:
    """Run the cells the store does not hold with their key yet; return the seconds spent
    running them and the counts ``total`` / ``kept`` / ``run``."""
    resolved = design.spec
    stored = store.statuses()
    todo = []
    for cell, key in keys.items():
        status, old_key = stored.get((cell.method, cell.n_labels, cell.repeat, cell.strategy),
                                     (None, None))
        if old_key != key or (rerun_failed and status == "failed"):
            todo.append(cell)
    counts = {"total": len(keys), "kept": len(keys) - len(todo), "run": len(todo)}
    log.info("%d cells in the study: %d kept from earlier runs, %d to run", counts["total"],
             counts["kept"], counts["run"])

    bar = Progress(len(todo), "cells", enabled=progress, heartbeat=1.0)

    def on_result(row: dict) -> None:
        row["cell_key"] = keys[Cell(row["method"], row["n_labels"], row["repeat"],
                                    row["strategy"])]
        store.put(row)
        bar.update(1, failed=row["status"] != "ok")

    runnable = []
    for cell in todo:
        kind = stage_kind(design.methods[cell.method].representation)
        if kind in rep_errors:
            on_result({
                "method": cell.method, "n_labels": cell.n_labels, "repeat": cell.repeat,
                "strategy": cell.strategy, "seed": cell_seed(resolved.seed, cell),
                "status": "failed", "seconds": 0.0, "fold": design.repeat_fold[cell.repeat],
                "n_eval": int(len(design.eval_idx(cell.repeat))),
                "error": f"unsupervised stage {kind!r} failed: {rep_errors[kind]}",
            })
        else:
            runnable.append(cell)
    t_cells = time.perf_counter()
    try:
        run_cells(ctx, runnable, on_result, jobs=jobs, cluster=cluster)
    finally:
        bar.close()
    return time.perf_counter() - t_cells, counts
