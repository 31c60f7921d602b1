"""run_study: carve the holdout, fit the unsupervised stage once, run every cell, export."""

from __future__ import annotations

import hashlib
import json
import logging
import os
import statistics
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._errors import ConfigError, DataError
from .._seeding import derive_seed
from ..selection import acquisition_order
from ._backends import run_cells
from ._cell import Cell, CellContext, cell_seed
from ._draws import default_budgets, split_holdout
from ._exports import cells_frame, write_candidates, write_exports
from ._spec import StudySpec
from ._store import Store
from ._tuning import fit_method

__all__ = ["StudyResult", "run_study"]

log = logging.getLogger(__name__)

#: Below this many holdout labels in a class, estimates are called loose (common practice,
#: no source: the usual "about 30" rule for a normal approximation).
MIN_HOLDOUT_PER_CLASS = 30

PROTOCOL_NOTES = [
    "holdout carved once from the labeled rows, stratified by class, never trained or tuned on",
    "unsupervised stage fitted once per study on the unlabeled rows and the pool's features "
    "(plus the holdout's features only when transductive), cached under cache/, reused by "
    "every cell",
    "per repeat the labeled draws are nested (a budget's rows contain every smaller budget's "
    "rows) and stratified, with every class present once the budget reaches the class count; "
    "all methods share the same draws",
    "every method gets the same number of optuna trials (TPE sampler seeded from the study "
    "seed), tuned by stratified cross-validation inside the labeled draw only; the first trial "
    "is the default parameters; with no class of two labels tuning is skipped",
    "semi-supervised methods see the unlabeled rows (and the pool rows outside the draw, labels "
    "hidden) during tuning and fitting, capped at max_unlabeled rows per cell (seeded sample)",
    "metrics on the holdout: accuracy with a Wilson 95% interval, balanced accuracy, macro-F1, "
    "log-loss over all study classes (probabilities clipped to [1e-15, 1-1e-15]), per-class "
    "recall; curves.csv gives the across-repeat mean with a Student-t 95% interval",
]


@dataclass
class StudyResult:
    """What :func:`run_study` returns."""

    out_dir: Path
    cells: pd.DataFrame
    info: dict[str, Any] = field(default_factory=dict)

    def summary(self) -> str:
        """A few readable lines: cells by status, the best methods at the largest budget."""
        c = self.cells
        counts = c["status"].value_counts().to_dict() if len(c) else {}
        lines = [
            f"study in {self.out_dir}: {len(c)} cells "
            f"({counts.get('ok', 0)} ok, {counts.get('failed', 0)} failed, "
            f"{counts.get('skipped', 0)} skipped)"
        ]
        ok = c[(c["status"] == "ok") & (c["strategy"] == "random")] if len(c) else c
        if len(ok):
            top = int(ok["n_labels"].max())
            at = ok[ok["n_labels"] == top].groupby("method")["accuracy"].agg(["mean", "min",
                                                                                "max", "size"])
            at = at.sort_values("mean", ascending=False)
            lines.append(f"holdout accuracy at {top} labels (mean, range over repeats):")
            for name, r in at.head(5).iterrows():
                lines.append(f"  {name:<28} {r['mean']:.3f}  ({r['min']:.3f}-{r['max']:.3f}, "
                             f"{int(r['size'])} repeats)")
        for w in self.info.get("warnings", [])[:3]:
            lines.append(f"warning: {w}")
        lines.append(f"wrote cells.csv, curves.csv, study.json, candidates.npz in {self.out_dir}")
        return "\n".join(lines)


def _load_dataset(spec: StudySpec):
    from ..data import load_dataset

    return load_dataset(
        spec.data, label_column=spec.label_column, id_column=spec.id_column,
        unlabeled_markers=spec.unlabeled_markers, kinds=dict(spec.kinds) or None,
        delimiter=spec.delimiter, encoding=spec.encoding,
    )


def _default_method_names(pool_size: int | None = None) -> list[str]:
    from .. import methods as m

    fn = getattr(m, "default_methods", None)
    specs = fn(pool_size=pool_size) if fn is not None else m.list_methods()
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


def _fit_representations(kinds, ds, fit_rows, spec, out_dir, representation_fn):
    """Fit each needed unsupervised stage once; return features, diagnostics, errors, seconds."""
    features: dict[str, np.ndarray] = {"raw": np.asarray(ds.X, dtype=np.float32)}
    diagnostics: dict[str, Any] = {}
    errors: dict[str, str] = {}
    seconds: dict[str, float] = {}
    if kinds and representation_fn is None:
        from ..pretrain import fit_representation as representation_fn
    for kind in sorted(kinds):
        t0 = time.perf_counter()
        try:
            # Thread counts are the stage's own parameter (n_threads): the mixture defaults to
            # one BLAS thread, 1.9 s against 71 s on digits on a busy machine
            # (benchmarks/results/study.md).
            transformer, diag = representation_fn(
                kind, ds.X[fit_rows], blocks=ds.blocks,
                params=dict(spec.pretrain.get(kind, {})),
                seed=derive_seed(spec.seed, "pretrain", kind), cache_dir=out_dir / "cache",
            )
            features[kind] = np.asarray(transformer.transform(ds.X), dtype=np.float32)
            diagnostics[kind] = diag
        except Exception as exc:  # noqa: BLE001  (its methods fail; the baselines still run)
            errors[kind] = f"{type(exc).__name__}: {exc}"
            log.warning("unsupervised stage %r failed: %s", kind, errors[kind])
        seconds[kind] = time.perf_counter() - t0
    return features, diagnostics, errors, seconds


def _make_orders(spec, features, y, pool_idx, budgets, strategies):
    z_kind = "vae" if "vae" in features else "raw"
    Z_pool = features[z_kind][pool_idx]
    y_pool = y[pool_idx]
    orders: dict[tuple[str, int], np.ndarray] = {}
    for strategy in strategies:
        for repeat in range(spec.repeats):
            # Same seed for every strategy: uncertainty starts from the random draw.
            seed = derive_seed(spec.seed, "draw", repeat)
            order, _ = acquisition_order(strategy, Z_pool, y_pool, budgets, seed=seed,
                                         proba_fn=None)
            orders[(strategy, repeat)] = order
    return orders, z_kind


def _progress(total: int, enabled: bool | None):
    try:
        from tqdm.auto import tqdm
    except ImportError:  # pragma: no cover
        return None
    if enabled is None:
        # A bar only where a person watches: stderr is a terminal and info messages are on.
        enabled = sys.stderr.isatty() and log.getEffectiveLevel() <= logging.INFO
    disable = not enabled
    return tqdm(total=total, desc="cells", unit="cell", disable=disable, leave=False,
                mininterval=1.0)


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
        Show a progress bar (default: when logging is at INFO or more detailed).
    """
    from ..methods import get_method

    t_start = time.perf_counter()
    out = Path(out_dir)
    jobs = int(jobs) if jobs else (os.cpu_count() or 1)
    if jobs < 1:
        raise ConfigError(f"--jobs must be >= 1; got {jobs}")
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
    names = list(spec.methods) if spec.methods else _default_method_names(len(labeled))
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
    # The table's path is left out (its content hash is in): moving the file keeps the study.
    facts = {k: v for k, v in resolved.to_dict().items() if k != "data"}
    # The unsupervised stages' parameters with their defaults filled in: a new default in a
    # later release must not resume cells measured on the old representation.
    kinds = {m.representation for m in methods.values()} - {"raw"}
    if kinds and representation_fn is None:  # an injected stand-in has its own parameters
        from ..pretrain import representation_params

        facts.pop("pretrain", None)  # replaced by the resolved parameters below
        facts["pretrain_resolved"] = {
            kind: representation_params(kind, dict(spec.pretrain.get(kind, {})))
            for kind in sorted(kinds)
        }
    fingerprint = hashlib.sha256(
        (json.dumps(facts, sort_keys=True, default=str) + _data_digest(ds)).encode("utf-8")
    ).hexdigest()

    store = Store(out / "study.sqlite", fingerprint, restart=restart)
    try:
        # ---- unsupervised stage: once per study
        fit_parts = [unlabeled_idx, pool_idx] + ([holdout_idx] if spec.transductive else [])
        fit_rows = np.sort(np.concatenate(fit_parts))
        features, diagnostics, rep_errors, rep_seconds = _fit_representations(
            kinds, ds, fit_rows, resolved, out, representation_fn
        )
        if store.get_meta("pretrain_seconds") is None:
            store.set_meta("pretrain_seconds", json.dumps(rep_seconds))
        orders, order_kind = _make_orders(resolved, features, y, pool_idx, budgets,
                                          resolved.strategies)

        ctx = CellContext(
            features=features, y=y, pool_idx=pool_idx, holdout_idx=holdout_idx,
            unlabeled_idx=unlabeled_idx, orders=orders,
            methods={n: m for n, m in methods.items() if m.representation not in rep_errors},
            n_classes=n_classes, seed=resolved.seed, trials=resolved.trials,
            cv_folds=resolved.cv_folds, max_unlabeled=resolved.max_unlabeled,
            transductive=resolved.transductive,
        )
        all_cells = [
            Cell(m, b, r, s)
            for s in resolved.strategies for r in range(resolved.repeats)
            for b in budgets for m in names
        ]
        done = store.statuses()
        todo = []
        for cell in all_cells:
            status = done.get((cell.method, cell.n_labels, cell.repeat, cell.strategy))
            if status is None or (rerun_failed and status == "failed"):
                todo.append(cell)
        log.info("%d cells in the study, %d to run", len(all_cells), len(todo))

        bar = _progress(len(todo), progress)
        failed = [0]

        def on_result(row: dict) -> None:
            store.put(row)
            if row["status"] != "ok":
                failed[0] += 1
            if bar is not None:
                bar.update(1)
                bar.set_postfix(failed=failed[0])

        runnable = []
        for cell in todo:
            kind = methods[cell.method].representation
            if kind in rep_errors:
                on_result({
                    "method": cell.method, "n_labels": cell.n_labels, "repeat": cell.repeat,
                    "strategy": cell.strategy, "seed": cell_seed(resolved.seed, cell),
                    "status": "failed", "seconds": 0.0,
                    "error": f"unsupervised stage {kind!r} failed: {rep_errors[kind]}",
                })
            else:
                runnable.append(cell)
        t_cells = time.perf_counter()
        try:
            run_cells(ctx, runnable, on_result, jobs=jobs, cluster=cluster)
        finally:
            if bar is not None:
                bar.close()
        cells_seconds = time.perf_counter() - t_cells

        stored = store.cells()
        cells = cells_frame(stored, list(ds.class_names))
        info = _study_info(
            resolved, fingerprint, ds, y, labeled, unlabeled_idx, holdout_idx, pool_idx,
            budgets, cells, diagnostics, rep_errors,
            json.loads(store.get_meta("pretrain_seconds")), order_kind, jobs, cluster,
        )
        info["timing"]["this_run_cells_seconds"] = cells_seconds
        candidates = _write_candidates(out, ds, ctx, methods, cells, features, resolved)
        info["candidates"] = candidates
        info["timing"]["this_run_total_seconds"] = time.perf_counter() - t_start
        write_exports(out, cells, resolved.metrics, info)
        _write_card(out, resolved, dataset is not None, info)
    finally:
        store.close()
    return StudyResult(out_dir=out, cells=cells, info=info)


def _study_info(spec, fingerprint, ds, y, labeled, unlabeled_idx, holdout_idx, pool_idx,
                budgets, cells, diagnostics, rep_errors, rep_seconds, order_kind, jobs, cluster):
    names = list(ds.class_names)
    hold_counts = np.bincount(y[holdout_idx], minlength=len(names))
    pool_counts = np.bincount(y[pool_idx], minlength=len(names))
    warnings_: list[str] = []
    ok = cells[cells["status"] == "ok"]
    small = [names[i] for i, n in enumerate(hold_counts) if n < MIN_HOLDOUT_PER_CLASS]
    widths = (ok["accuracy_high"] - ok["accuracy_low"]).to_numpy() if len(ok) else []
    width = float(statistics.median(widths)) if len(widths) else None
    if small:
        w = f"; median Wilson 95% interval width on accuracy {width:.3f}" if width else ""
        warnings_.append(
            f"holdout too small for tight estimates: {len(small)} class(es) have fewer than "
            f"{MIN_HOLDOUT_PER_CLASS} holdout labels (smallest {int(hold_counts.min())}, "
            f"holdout {len(holdout_idx)} rows){w}"
        )
    missing = [names[i] for i, n in enumerate(hold_counts) if n == 0]
    if missing:
        warnings_.append(f"class(es) {', '.join(missing)} have no holdout rows and are not "
                         "evaluated; label more rows of them")
    if min(budgets) < len(names):
        warnings_.append(f"budget {min(budgets)} is below the class count {len(names)}: those "
                         "draws cannot hold every class")
    for kind, err in rep_errors.items():
        warnings_.append(f"unsupervised stage {kind!r} failed, its methods were not run: {err}")
    counts = cells["status"].value_counts().to_dict() if len(cells) else {}
    if counts.get("failed"):
        warnings_.append(f"{counts['failed']} cell(s) failed; see the error column of cells.csv")
    timing = {
        "pretrain_seconds": rep_seconds,
        "cells_seconds_total": float(cells["seconds"].fillna(0).sum()),
        "tune_seconds_total": float(cells["tune_seconds"].fillna(0).sum()),
        "fit_seconds_total": float(cells["fit_seconds"].fillna(0).sum()),
    }
    return {
        "spec": spec.to_dict(),
        "fingerprint": fingerprint,
        "data": {
            "source": str(ds.source) if getattr(ds, "source", None) else spec.data,
            "sha256": getattr(ds, "sha256", None),
            "n_rows": int(len(y)), "n_labeled": int(len(labeled)),
            "n_unlabeled": int(len(unlabeled_idx)), "n_features": int(ds.X.shape[1]),
            "class_names": names,
            "class_counts": {n: int(c) for n, c in zip(names, np.bincount(
                y[labeled], minlength=len(names)), strict=True)},
        },
        "holdout": {"n_rows": int(len(holdout_idx)),
                    "class_counts": dict(zip(names, map(int, hold_counts), strict=True)),
                    "median_accuracy_interval_width": width},
        "pool": {"n_rows": int(len(pool_idx)),
                 "class_counts": dict(zip(names, map(int, pool_counts), strict=True))},
        "budgets": [int(b) for b in budgets],
        "max_unlabeled_per_cell": spec.max_unlabeled,
        "selection_representation": order_kind,
        "status_counts": {k: int(v) for k, v in counts.items()},
        "protocol": PROTOCOL_NOTES,
        "warnings": warnings_,
        "representation": {"diagnostics": diagnostics, "errors": rep_errors},
        "timing": timing,
        "execution": {"jobs": jobs, "cluster": None if cluster is None else str(cluster)},
    }


def _write_candidates(out, ds, ctx, methods, cells, features, spec) -> dict[str, Any]:
    """Refit the best method at the largest budget on all pool labels; score unlabeled rows."""
    unl = ctx.unlabeled_idx
    rep_kind = "vae" if "vae" in features else "raw"
    ok = cells[cells["status"] == "ok"]
    if (ok["strategy"] == "random").any():
        ok = ok[ok["strategy"] == "random"]
    proba = np.zeros((len(unl), ctx.n_classes), dtype=np.float32)
    best_name, top = None, 0
    note = "no finished cell; probabilities are zero"
    if len(ok):
        top = int(ok["n_labels"].max())
        means = ok[ok["n_labels"] == top].groupby("method")["accuracy"].mean()
        best_name = str(means.sort_values(ascending=False, kind="stable").index[0])
        method = methods[best_name]
        row = ok[(ok["method"] == best_name) & (ok["n_labels"] == top)].iloc[0]
        params = json.loads(row["params"]) if isinstance(row["params"], str) else {}
        X = features[method.representation]
        seed = derive_seed(spec.seed, "candidates", best_name)
        X_unl = None
        if method.semi_supervised and len(unl):
            rng = np.random.default_rng(seed)
            sub = unl if len(unl) <= spec.max_unlabeled else np.sort(
                rng.choice(unl, spec.max_unlabeled, replace=False))
            X_unl = X[sub]
        try:
            est = fit_method(method, params, seed, X[ctx.pool_idx], ctx.y[ctx.pool_idx], X_unl)
            if len(unl):
                from ..methods import align_proba

                proba = align_proba(est.predict_proba(X[unl]), est.classes_,
                                    ctx.n_classes).astype(np.float32)
            note = f"{best_name} refitted on all {len(ctx.pool_idx)} pool labels"
        except Exception as exc:  # noqa: BLE001
            note = f"refit of {best_name} failed ({type(exc).__name__}: {exc}); zeros written"
            log.warning("candidates: %s", note)
    write_candidates(
        out / "candidates.npz", np.asarray(ds.row_ids)[unl], features[rep_kind][unl], proba,
        method=best_name, n_labels=len(ctx.pool_idx), class_names=list(ds.class_names),
        representation_kind=rep_kind,
    )
    return {"method": best_name, "best_at_budget": top, "n_rows": int(len(unl)),
            "representation": rep_kind, "note": note}


def _write_card(out: Path, spec: StudySpec, injected: bool, info: dict) -> None:
    if injected or not Path(spec.data).is_file():
        info.setdefault("notes", []).append("data card not written (dataset given directly)")
        return
    try:
        from ..data import make_card, write_card
    except ImportError:
        info.setdefault("notes", []).append("data card not written (semisup.data.make_card "
                                            "unavailable)")
        return
    card = make_card(
        spec.data, label_column=spec.label_column, id_column=spec.id_column,
        unlabeled_markers=spec.unlabeled_markers, kinds=dict(spec.kinds) or None,
        delimiter=spec.delimiter, encoding=spec.encoding,
    )
    write_card(card, out / "data_card.md")
