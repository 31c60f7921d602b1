"""fit_model: train a study's chosen (or a named) method on every label, as the study would.

- Hyperparameters: tuned on all the labels with the study's own budget (``trials`` optuna
  trials, stratified CV with at most ``cv_folds`` folds), through the study's tuning code.
- Unsupervised stage: the study's own fit, read back from its ``cache/``; when the cache is
  gone, refitted on the rows and with the parameters and seed the study used.
- Semi-supervised methods also see the unlabeled rows (at most the study's ``max_unlabeled``,
  a seeded sample).
- Out-of-distribution flag: the unsupervised stage's per-row density (mixture) or ELBO (VAE);
  rows scoring below the training table's 1st percentile are flagged.
- Pseudo-labels: the cross-fitted accuracy above each confidence cut (see ``_crossfit``).
"""

from __future__ import annotations

import json
import logging
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .. import __version__
from .._errors import ConfigError, DataError, StoreError
from .._jsonio import read_json_object
from .._seeding import derive_seed
from ..study import StudyRecord, read_curves
from ._crossfit import DEFAULT_CUTS, confidence_table, crossfit_proba
from ._model import FittedModel

__all__ = ["FLAG_QUANTILE", "FitResult", "fit_model", "read_study"]

log = logging.getLogger(__name__)

#: Rows whose density score is below this quantile of the training table's scores are flagged
#: as unlike the training data (common practice, no source: a 1% false-flag rate on rows like
#: the training rows).
FLAG_QUANTILE = 0.01


@dataclass
class FitResult:
    """What :func:`fit_model` returns: the model, its fit report and the pool's labels."""

    model: FittedModel
    report: dict[str, Any]
    pseudo_labels: pd.DataFrame | None = None
    notes: list[str] = field(default_factory=list)

    def write_pseudo_labels(self, path: str | os.PathLike[str], *,
                            raw: bool = False) -> Path | None:
        """Write the pool's pseudo-labels (atomically; CSV, TSV or Parquet by the suffix);
        None when there is no pool.

        Text cells and headers a spreadsheet would run as formulas get a leading ``'`` unless
        ``raw`` (Parquet is always raw). ``path`` may not be the study's table, one of the
        study's files or inside a model folder (ConfigError).
        """
        from .._paths import check_output, study_inputs
        from .._tables_out import write_table

        training = self.model.manifest.get("training_data") or {}
        study_dir = training.get("study_dir")
        check_output(path, option="--pseudo-labels", inputs={
            "the study's table": training.get("source"),
            **(study_inputs(study_dir) if study_dir else {})})
        if self.pseudo_labels is None:
            return None
        return write_table(self.pseudo_labels, path, raw=raw, header_prefixes=("proba_",))

    def summary(self) -> str:
        r = self.report
        lines = [f"fitted {r['method']} on {r['n_labeled']} labeled rows"
                 + (f" and {r['n_unlabeled_used']} unlabeled rows" if r["n_unlabeled_used"]
                    else "")
                 + f" ({r['seconds']:.1f} s); parameters {json.dumps(r['params'])}"]
        est = r.get("study_estimate") or {}
        if "plan" in est:
            p = est["plan"]
            ahead = (f" (the plan's budget; this model has {r['n_labeled']}, so the estimate "
                     "applies once the labels it asks to buy are added)"
                     if int(p["n_labels"]) > int(r["n_labeled"]) else "")
            lines.append(f"plan's estimate at {p['n_labels']} labels{ahead}: {p['metric']} "
                         f"{p['predicted']['mean']:.3f} ({p['predicted']['low']:.3f}-"
                         f"{p['predicted']['high']:.3f})")
        if "curve" in est:
            c = est["curve"]
            lines.append(f"study's measured accuracy at {c['n_labels']} labels: {c['mean']:.3f} "
                         f"({c['low']:.3f}-{c['high']:.3f})")
        cf = r["crossfit"]
        if cf.get("accuracy") is not None:
            lines.append(f"cross-fitted accuracy on all {cf['n_labeled']} labels: "
                         f"{cf['accuracy']:.3f} ({cf['accuracy_low']:.3f}-"
                         f"{cf['accuracy_high']:.3f}, Wilson 95%)")
        cut = r["confidence_cut"]
        row = next((c for c in cf["table"] if c["cut"] == cut), None)
        if row is not None and row["accuracy"] is not None:
            lines.append(
                f"pseudo-labels at top probability >= {cut:g}: expected accuracy "
                f"{row['accuracy']:.3f} ({row['accuracy_low']:.3f}-{row['accuracy_high']:.3f}), "
                f"{row['coverage']:.0%} of labeled rows and {row.get('pool_share_above', 0):.0%} "
                "of unlabeled rows reach the cut")
        elif row is not None:
            lines.append(f"no labeled row reached top probability >= {cut:g} when cross-fitted; "
                         "lower --confidence-cut")
        lines.extend(f"note: {n}" for n in self.notes)
        return "\n".join(lines)


def read_study(study_dir: str | os.PathLike[str]) -> tuple[dict, dict | None]:
    """``(study.json, plan.json or None)`` of a study folder; clear errors otherwise."""
    folder = Path(study_dir)
    if not folder.is_dir():
        raise StoreError(f"{folder}: no such study folder; give the folder 'semisup study --out' "
                         "wrote")
    path = folder / "study.json"
    info = read_json_object(path, StoreError, fix="run the study again to rewrite it",
                            missing=f"{folder} has no study.json; run 'semisup study' into it "
                                    "first (or give the study's folder)")
    if not isinstance(info.get("spec"), dict):
        raise StoreError(f"{path} lacks the study spec; run the study again to rewrite it")
    plan = None
    plan_path = folder / "plan.json"
    if plan_path.is_file():
        plan = read_json_object(plan_path, StoreError, fix="run 'semisup plan' again")
    return info, plan


def _current_plan(folder: Path, plan: dict | None, method: str | None) -> dict | None:
    """``plan`` when it was made from the folder's current study state. A stale plan is
    refused when it would choose the method, and otherwise set aside with one warning."""
    if plan is None:
        return None
    from .._errors import PlanError
    from ..plan import plan_status

    try:
        status = plan_status(folder, plan)
    except PlanError as exc:
        raise StoreError(str(exc)) from None
    if not status.stale:
        return plan
    if method is None:
        raise ConfigError(f"{status.message(f'{folder}/plan.json')}, or name a method with "
                          "--method")
    log.warning("%s; its estimate is not shown", status.message(f"{folder}/plan.json"))
    return None


def _choose_method(folder: Path, plan: dict | None, method: str | None) -> str:
    if method:
        return method
    if plan is None:
        raise ConfigError(f"{folder} has no plan.json; run 'semisup plan {folder} ...' first or "
                          "name the method with --method")
    chosen = plan.get("chosen")
    if not isinstance(chosen, dict) or not chosen.get("method"):
        options = [o.get("method") for o in plan.get("options") or [] if isinstance(o, dict)]
        hint = f" (best option: {options[0]})" if options else ""
        raise ConfigError(f"{folder}/plan.json chose no method (the target is not reachable)"
                          f"{hint}; name one with --method")
    return str(chosen["method"])


def _study_estimate(folder: Path, plan: dict | None, method: str) -> dict[str, Any]:
    out: dict[str, Any] = {}
    chosen = (plan or {}).get("chosen")
    if isinstance(chosen, dict) and chosen.get("method") == method:
        out["plan"] = {
            "metric": (plan.get("target") or {}).get("metric"),
            "target": (plan.get("target") or {}).get("value"),
            "n_labels": chosen.get("n_labels"), "strategy": chosen.get("strategy"),
            "predicted": chosen.get("predicted"), "probability": chosen.get("probability"),
            "extrapolated": chosen.get("extrapolated"),
        }
    try:
        c = read_curves(folder / "curves.csv", StoreError)
    except StoreError as exc:
        log.warning("curves.csv not used for the study's estimate: %s", exc)
        c = None
    if c is not None:
        sel = c[(c["method"] == method) & (c["metric"] == "accuracy") & c["measured"]
                & (c["strategy"] == "random")]
        if len(sel):
            r = sel.sort_values("n_labels").iloc[-1]
            out["curve"] = {"metric": "accuracy", "n_labels": int(r["n_labels"]),
                            "mean": float(r["mean"]), "low": float(r["low"]),
                            "high": float(r["high"])}
    return out


def _stage_rows(spec: Any, y: np.ndarray) -> np.ndarray:
    """The rows the study fitted its unsupervised stage on: every row, except the holdout's
    under the holdout protocol unless transductive (specs without an ``evaluation`` key are
    holdout studies)."""
    from ..study import split_holdout

    labeled = np.flatnonzero(y >= 0)
    if spec.transductive or spec.evaluation != "holdout":
        return np.arange(len(y))
    hold_pos, _ = split_holdout(y[labeled], spec.holdout, derive_seed(spec.seed, "holdout"))
    keep = np.ones(len(y), dtype=bool)
    keep[labeled[hold_pos]] = False
    return np.flatnonzero(keep)


def _unsupervised_stage(kind: str, ds: Any, spec: Any, folder: Path, info: dict,
                        own_y: np.ndarray):
    """The study's fitted stage ``kind``: from its cache entry, else refitted as it was
    (``own_y``: the table's own labels, from which the study carved its holdout; labels
    added in rounds are training rows and leave the stage's rows as they were)."""
    from ..pretrain import fit_representation, load_entry

    diag = StudyRecord.from_dict(info).representation.get(kind) or {}
    key, cached = diag.get("cache_key"), diag.get("cache_path")
    if key and cached:
        entry = folder / "cache" / Path(str(cached)).name
        try:
            stage = load_entry(entry, str(key))
        except StoreError as exc:
            log.warning("%s", exc)
            stage = None
        if stage is not None and int(stage.n_features_in_) == ds.X.shape[1]:
            log.info("%s stage reused from the study's cache (%s)", kind, entry)
            return stage, "reused from the study's cache"
    from ..study import stage_fit_rows

    # the study's rule: a seeded sample past stage_rows (the same rows as the study's draw)
    rows, _ = stage_fit_rows(_stage_rows(spec, np.asarray(own_y)), spec)
    log.info("fitting the %s stage on %d rows as the study did (no cache entry found)", kind,
             len(rows))
    stage, diag = fit_representation(
        kind, ds.X[rows], blocks=ds.blocks, params=dict(spec.pretrain.get(kind, {})),
        seed=derive_seed(spec.seed, "pretrain", kind), cache_dir=folder / "cache",
    )
    how = "reused from the study's cache" if diag.get("loaded_from_cache") else \
        "refitted as the study did"
    return stage, how


def _load_data(spec: Any, data: str | os.PathLike[str] | None, info: dict, folder: Path):
    from ..data import TableSource
    from ..study import study_table

    # the table by study.json's absolute path (or --data), refused unless its SHA-256 is the
    # one the study read
    path = study_table(folder, info, data=data, strict=True, option="--data").path
    ds = TableSource.of(spec, path=path).load()
    return ds, []


@dataclass(frozen=True)
class _Study:
    """Stage 1: the study folder, its plan (when current) and the method to fit."""

    folder: Path
    info: dict
    plan: dict | None
    spec: Any
    name: str
    method: Any  # the registry's MethodSpec


@dataclass(frozen=True)
class _Labels:
    """Stage 2: the table with every label (the study's and those added in rounds)."""

    ds: Any
    own_y: np.ndarray  # the table's own labels (the study carved its holdout from these)
    y: np.ndarray
    labeled: np.ndarray
    unlabeled: np.ndarray
    notes: list[str]


@dataclass(frozen=True)
class _Features:
    """Stage 3: the encoded rows, the method's features and the out-of-distribution model."""

    X_enc: np.ndarray
    X: np.ndarray
    representation: Any
    stage_note: str | None
    density: Any
    density_kind: str


@dataclass(frozen=True)
class _Classifier:
    """Stage 4: the tuned classifier on every label and its cross-fitted probabilities."""

    seed: int
    params: dict
    tuning: dict
    estimator: Any
    n_unlabeled_used: int
    oof: np.ndarray
    crossfit_note: Any


def _open_study(study_dir: str | os.PathLike[str], method: str | None) -> _Study:
    from ..methods import get_method
    from ..study import check_exports

    folder = Path(study_dir)
    info, plan = read_study(folder)
    check_exports(folder, command="fit")
    for key in ("data", "label_column"):
        if not info["spec"].get(key):
            raise StoreError(f"{folder}/study.json: the spec lacks {key!r}; run the study again "
                             "to rewrite it")
    spec = StudyRecord.from_dict(info).resolved_spec()
    plan = _current_plan(folder, plan, method)
    name = _choose_method(folder, plan, method)
    m = get_method(name)
    log.info("fitting %s for study %s", name, folder)
    return _Study(folder, info, plan, spec, name, m)


def _all_labels(study: _Study, data: str | os.PathLike[str] | None) -> _Labels:
    from ..study import apply_added_labels, read_added_labels

    spec, folder = study.spec, study.folder
    ds, notes = _load_data(spec, data, study.info, folder)
    added = read_added_labels(folder)  # labels returned by annotators (semisup add-labels)
    own_y = np.asarray(ds.y)
    if len(added):
        ds = apply_added_labels(ds, added, where=str(folder / "labels_added.csv"))
        notes.append(f"{len(added)} labels added to the study (labels_added.csv) are used")
    y = np.asarray(ds.y, dtype=np.int64)
    labeled = np.flatnonzero(y >= 0)
    if len(ds.class_names) < 2 or len(np.unique(y[labeled])) < 2:
        raise DataError(f"{spec.data}: label column {spec.label_column!r} needs labeled rows of "
                        "at least two classes to fit a model")
    return _Labels(ds, own_y, y, labeled, np.flatnonzero(y < 0), notes)


def _features(study: _Study, labels: _Labels) -> _Features:
    """The method's representation (when it reads one) and the stage that flags rows unlike
    the training rows: the representation itself, else the study's VAE (or mixture)."""
    from ..methods import KeepRawFeatures, stage_kind

    ds, m = labels.ds, study.method
    args = (ds, study.spec, study.folder, study.info, labels.own_y)
    X_enc = np.asarray(ds.X, dtype=np.float32)
    if m.representation != "raw":
        stage = stage_kind(m.representation)
        representation, stage_note = _unsupervised_stage(stage, *args)
        density = representation
        if m.representation != stage:  # "vae+raw": the encoded table, latent means appended
            representation = KeepRawFeatures(representation).fit(X_enc)
        X = np.asarray(representation.transform(X_enc), dtype=np.float32)
        return _Features(X_enc, X, representation, stage_note, density, stage)
    diags = StudyRecord.from_dict(study.info).representation
    density_kind = "vae" if "vae" in diags else "mixture"
    log.info("fitting/reading the %s stage for the out-of-distribution flag", density_kind)
    density, _ = _unsupervised_stage(density_kind, *args)
    return _Features(X_enc, X_enc, None, None, density, density_kind)


def _fit_classifier(study: _Study, labels: _Labels, features: _Features,
                    crossfit_folds: int) -> _Classifier:
    """Tune on every label with the study's budget, fit, and cross-fit for the confidence
    table; semi-supervised methods also see (at most ``max_unlabeled``) unlabeled rows."""
    from ..study import fit_method, tune_params

    spec, name, m = study.spec, study.name, study.method
    X, y, labeled, unlabeled = features.X, labels.y, labels.labeled, labels.unlabeled
    n_classes = len(labels.ds.class_names)
    X_lab, y_lab = X[labeled], y[labeled]
    X_unl = None
    if m.semi_supervised and len(unlabeled):
        sub = unlabeled
        if len(sub) > spec.max_unlabeled:
            rng = np.random.default_rng(derive_seed(spec.seed, "final", name, "unlabeled"))
            sub = np.sort(rng.choice(sub, spec.max_unlabeled, replace=False))
        X_unl = X[sub]
    seed = derive_seed(spec.seed, "final", name)
    log.info("tuning %s: %d trials on %d labels", name, spec.trials, len(labeled))
    params, tuning = tune_params(m, X_lab, y_lab, X_unl, trials=spec.trials,
                                 seed=derive_seed(seed, "tuning"), max_folds=spec.cv_folds,
                                 n_classes=n_classes)
    log.info("fitting %s with %s", name, params)
    estimator = fit_method(m, params, seed, X_lab, y_lab, X_unl)

    log.info("cross-fitting %s on the labeled rows for the confidence table", name)
    oof, cf_note = crossfit_proba(m, params, derive_seed(seed, "crossfit"), X_lab, y_lab, X_unl,
                                  n_classes, max_folds=crossfit_folds)
    return _Classifier(seed, params, tuning, estimator, 0 if X_unl is None else len(X_unl),
                       oof, cf_note)


def _manifest(study: _Study, labels: _Labels, features: _Features, report: dict,
              scores: np.ndarray, threshold: float) -> dict[str, Any]:
    """What the model is (written as the model folder's manifest.json)."""
    ds, y = labels.ds, labels.y
    counts = np.bincount(y[labels.labeled], minlength=len(ds.class_names))
    elbo = features.density_kind == "vae"
    return {
        **report,
        "classes": list(ds.class_names),
        "label_column": study.spec.label_column, "id_column": study.spec.id_column,
        "features": [{"column": c, "kind": k} for c, k in ds.encoder.kinds_.items()
                     if k in ("numeric", "categorical")],
        "encoder": ds.encoder.to_state(),
        "training_data": {
            "source": str(ds.source), "sha256": ds.sha256, "n_rows": int(len(y)),
            "class_counts": {c: int(n) for c, n in zip(ds.class_names, counts, strict=True)},
            "study_fingerprint": study.info.get("fingerprint"), "study_dir": str(study.folder),
        },
        "density": {
            "kind": features.density_kind,
            "score": "ELBO at the posterior mean (nats per row)" if elbo else
            "log-density (nats per row)", "threshold": threshold, "quantile": FLAG_QUANTILE,
            "training_quantiles": {str(q): float(np.quantile(scores, q))
                                   for q in (0.001, 0.01, 0.05, 0.5)},
        },
        "semisup_version": __version__,
    }


def fit_model(
    study_dir: str | os.PathLike[str],
    *,
    method: str | None = None,
    data: str | os.PathLike[str] | None = None,
    confidence_cut: float = 0.9,
    crossfit_folds: int = 5,
) -> FitResult:
    """Fit the plan's chosen method (or ``method``) on every labeled row of the study's table.

    Stages: open the study and choose the method; read the table with every label; the
    unsupervised stage and the out-of-distribution model; tune, fit and cross-fit the
    classifier; the flag threshold, the pool's pseudo-labels, the report and the manifest.

    Parameters
    ----------
    study_dir : path
        A study folder (``study.json``, and ``plan.json`` unless ``method`` is given).
    method : str, optional
        A registered method name instead of the plan's choice.
    data : path, optional
        The study's table, when it moved since the study.
    confidence_cut : float in (0, 1)
        Top probability a pseudo-label needs; the report states its cross-fitted accuracy.
    crossfit_folds : int
        Most stratified folds for the cross-fitted estimates.

    Returns
    -------
    FitResult
        ``.model`` (write it with :func:`semisup.model.save_model`), ``.report``,
        ``.pseudo_labels`` (the table's unlabeled rows: class, probabilities, flag, and
        ``accepted`` at the cut).
    """
    if isinstance(confidence_cut, bool) or not 0 < float(confidence_cut) < 1:
        raise ConfigError(f"--confidence-cut {confidence_cut!r} is not allowed; give a "
                          "probability between 0 and 1, e.g. 0.9")
    from ..study import study_lock

    folder = Path(study_dir)
    read_study(folder)  # a missing folder or study.json is one line before the lock
    # no study, add-labels or other fit changes the folder while this fit reads it
    with study_lock(folder, command="fit"):
        return _fit_model(folder, method, data, confidence_cut, crossfit_folds)


def _fit_model(folder: Path, method: str | None, data: Any, confidence_cut: float,
               crossfit_folds: int) -> FitResult:
    t0 = time.perf_counter()
    study = _open_study(folder, method)
    labels = _all_labels(study, data)
    features = _features(study, labels)
    clf = _fit_classifier(study, labels, features, crossfit_folds)

    ds, y, labeled, unlabeled = labels.ds, labels.y, labels.labeled, labels.unlabeled
    model = FittedModel({"classes": list(ds.class_names), "density": {}}, ds.encoder,
                        clf.estimator, features.representation, features.density)
    X_enc = features.X_enc
    scores = model.density_scores(X_enc)
    threshold = float(np.quantile(scores, FLAG_QUANTILE))
    model.manifest["density"]["threshold"] = threshold
    pool_frame = model.output_frame(np.asarray(ds.row_ids)[unlabeled], X_enc[unlabeled]) \
        if len(unlabeled) else None
    pool_top = pool_frame["top_probability"].to_numpy() if pool_frame is not None else None
    cut = float(confidence_cut)
    table = confidence_table(clf.oof, y[labeled], (*DEFAULT_CUTS, cut), pool_top)
    all_rows = confidence_table(clf.oof, y[labeled], (0.0,))[0]

    m = study.method
    report = {
        "method": study.name, "family": m.family, "representation": m.representation,
        "semi_supervised": bool(m.semi_supervised), "params": clf.params, "seed": clf.seed,
        "tuning": clf.tuning, "n_labeled": int(len(labeled)),
        "n_unlabeled_used": int(clf.n_unlabeled_used),
        "unsupervised_stage": features.stage_note,
        "study_estimate": _study_estimate(study.folder, study.plan, study.name),
        "crossfit": {"note": clf.crossfit_note, "n_labeled": all_rows["n_labeled"],
                     "accuracy": all_rows["accuracy"], "accuracy_low": all_rows["accuracy_low"],
                     "accuracy_high": all_rows["accuracy_high"], "table": table},
        "confidence_cut": cut, "seconds": time.perf_counter() - t0,
    }
    model.manifest = _manifest(study, labels, features, report, scores, threshold)
    if pool_frame is not None:
        pool_frame["accepted"] = (pool_frame["top_probability"] >= cut) & \
            ~pool_frame["out_of_distribution"]
    log.info("fit done in %.1f s", report["seconds"])
    return FitResult(model=model, report=report, pseudo_labels=pool_frame, notes=labels.notes)
