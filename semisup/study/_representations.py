"""The unsupervised stage of a study: one draw of each representation per repeat.

Repeat 0 uses the study's draw (seed from the study seed), which the final candidates and
the acquisition orders use too; every other repeat fits its own draw (its own seed, same
rows, same parameters). A VAE is one random draw of many: on Ecdat Benefits (200 labels,
160-label training sets, same folds and tuning seeds) the 5-fold mean of latent-spreading
moved by 0.06 accuracy between two VAE seeds
(experiments/calibration/study_truth_gap.py). With one shared draw that variance is in no
interval and every latent method inherits the same lucky or unlucky draw; with one draw per
repeat the repeats' mean averages over draws and their spread carries it, as the user's
final model is fitted on a fresh draw.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from .._progress import Progress
from .._seeding import derive_seed
from ._shared import open_shared, remove_shared, shared_folder, write_shared

__all__ = [
    "STAGE_SAMPLE_ROWS", "StageChoice", "choose_stage", "fit_representations", "method_features",
    "repeat_key", "representation_seed", "stage_fit_rows", "stage_sample",
]

log = logging.getLogger(__name__)

#: ``stage_rows = "auto"``: past this many rows the stage is fitted on a seeded sample of
#: this many rows and one draw serves every repeat. Measured on real tables in
#: benchmarks/bench_large_stage.py (benchmarks/RESULTS.md, "Unsupervised stage on a sample").
STAGE_SAMPLE_ROWS = 100_000
#: The measurement behind :data:`STAGE_SAMPLE_ROWS`, quoted in the study's log line.
STAGE_SAMPLE_EVIDENCE = ("on AER Fertility, 254,654 rows, latent-logreg and latent-spreading "
                         "with the stage on a 100k sample were within 0.004 of the stage on "
                         "every row; see benchmarks/RESULTS.md")


@dataclass(frozen=True)
class StageChoice:
    """How the study fits its unsupervised stage: on how many rows, how many draws, and why.

    ``n_rows``: the rows the stage could be fitted on; ``fit_rows``: those it is fitted on (a
    seeded sample when fewer); ``draws``: ``"per-repeat"`` or ``"one"``; ``chosen_by``:
    ``"auto"`` (the tool, from the table's size) or ``"spec"`` (the user's settings).
    """

    n_rows: int
    fit_rows: int
    draws: str
    chosen_by: str
    reason: str

    def to_dict(self) -> dict[str, Any]:
        return {"n_rows": self.n_rows, "fit_rows": self.fit_rows, "draws": self.draws,
                "chosen_by": self.chosen_by, "sampled": self.fit_rows < self.n_rows,
                "reason": self.reason}


def choose_stage(n_rows: int, stage_rows: int | str = "auto",
                 stage_draws: str = "auto") -> StageChoice:
    """The unsupervised stage's rows and draws for a table whose stage sees ``n_rows`` rows.

    ``stage_rows`` caps the rows it is fitted on (``"auto"``: :data:`STAGE_SAMPLE_ROWS`,
    ``"all"``: no cap); ``stage_draws = "auto"`` fits one draw per repeat unless the table
    has more rows than that cap, then one draw (per-repeat draws would multiply the stage's
    time and the features every worker holds by the repeats).
    """
    cap = STAGE_SAMPLE_ROWS if stage_rows == "auto" else None if stage_rows == "all" \
        else int(stage_rows)
    large = cap is not None and n_rows > cap
    fit_rows = cap if large else n_rows
    draws = stage_draws if stage_draws != "auto" else ("one" if large else "per-repeat")
    chosen_by = "auto" if "auto" in (stage_rows, stage_draws) else "spec"
    if large:
        reason = (f"the unsupervised stage is fitted on a seeded sample of {fit_rows:,} of its "
                  f"{n_rows:,} rows (more than {cap:,}) and encodes every row")
        if stage_rows == "auto":
            reason += f" ({STAGE_SAMPLE_EVIDENCE})"
    else:
        reason = f"the unsupervised stage is fitted on all {n_rows:,} rows"
    if draws == "one":
        reason += ("; one draw serves every repeat" +
                   (" (a draw per repeat would take repeats times as long)"
                    if stage_draws == "auto" else " (stage_draws = \"one\")"))
    else:
        reason += "; one draw per repeat"
    return StageChoice(int(n_rows), int(fit_rows), draws, chosen_by, reason)


def representation_seed(study_seed: int, kind: str, repeat: int = 0) -> int:
    """Seed of repeat ``repeat``'s draw of stage ``kind`` (repeat 0: the study's own)."""
    if repeat == 0:
        return derive_seed(study_seed, "pretrain", kind)
    return derive_seed(study_seed, "pretrain", kind, "repeat", repeat)


def stage_sample(rows: np.ndarray, n_rows: int, study_seed: int) -> np.ndarray:
    """A seeded random subset of ``rows`` holding ``n_rows`` of them, in ascending order
    (``rows`` itself when it holds no more than that)."""
    rows = np.asarray(rows, dtype=np.int64)
    if len(rows) <= n_rows:
        return rows
    rng = np.random.default_rng(derive_seed(study_seed, "stage-sample"))
    return np.sort(rng.choice(rows, size=int(n_rows), replace=False))


def stage_fit_rows(rows: np.ndarray, spec: Any) -> tuple[np.ndarray, StageChoice]:
    """The rule for the rows the unsupervised stage is fitted on, given ``rows`` (those it
    may see) and the study's ``spec`` (its ``stage_rows``, ``stage_draws`` and ``seed``):
    :func:`choose_stage`, then :func:`stage_sample`. The study and the final model's refit
    (``semisup.model``) both use it, so a refit sees the study's rows."""
    stage = choose_stage(len(rows), getattr(spec, "stage_rows", "auto"),
                         getattr(spec, "stage_draws", "auto"))
    return stage_sample(rows, stage.fit_rows, spec.seed), stage


def repeat_key(kind: str, repeat: int) -> str:
    """Key of repeat ``repeat``'s features in the features mapping (repeat 0: ``kind``)."""
    return kind if repeat == 0 else f"{kind}@{repeat}"


def method_features(features: dict[str, np.ndarray], representation: str,
                    repeat: int = 0) -> np.ndarray:
    """The features a method of ``representation`` is handed in repeat ``repeat`` (its own
    draw of the stage when there is one, else repeat 0's); ``"vae+raw"`` is the encoded
    table with that draw's latent means appended."""
    from ..methods import raw_and_latent, stage_kind

    kind = stage_kind(representation)
    own = features.get(repeat_key(kind, repeat), features[kind])
    if representation != kind:
        return raw_and_latent(features["raw"], own)
    return own


def _accepts_on_step(fn: Any) -> bool:
    import inspect

    try:
        params = inspect.signature(fn).parameters
    except (TypeError, ValueError):  # pragma: no cover - a builtin
        return False
    return "on_step" in params  # a stand-in that names it (not any **kwargs)


def _fit_one(kind, X_all, fit_rows, blocks, params, seed, cache_dir, representation_fn=None,
             on_step=None, out_file=None):
    """Fit one draw of stage ``kind``; return (features of every row, diagnostics, seconds).

    ``X_all`` is the table or the path of its shared ``.npy`` file; with ``out_file`` the
    features are written there (a shared file) and its path is returned in their place.
    """
    t0 = time.perf_counter()
    if representation_fn is None:
        from ..pretrain import fit_representation as representation_fn
    if isinstance(X_all, (str, Path)):
        X_all = open_shared(X_all)
    extra = {"on_step": on_step} if on_step is not None and _accepts_on_step(
        representation_fn) else {}
    # Thread counts are the stage's own parameter (n_threads): the mixture defaults to one
    # BLAS thread, 1.9 s against 71 s on digits on a busy machine (benchmarks/results/study.md).
    transformer, diag = representation_fn(kind, X_all[fit_rows], blocks=blocks, params=params,
                                          seed=seed, cache_dir=cache_dir, **extra)
    feats = np.asarray(transformer.transform(X_all), dtype=np.float32)
    if out_file is not None:
        out_file = Path(out_file)
        write_shared(out_file.parent, out_file.stem, feats)
        feats = str(out_file.parent / f"{out_file.stem}.npy")
    return feats, diag, time.perf_counter() - t0


def _picklable(fn: Any) -> bool:
    """Whether ``fn`` can be sent to a worker process (None: the real stage)."""
    if fn is None:
        return True
    import pickle

    try:
        pickle.dumps(fn)
    except Exception:  # noqa: BLE001  (a closure or lambda: fitted in this process)
        return False
    return True


#: The queue a stage worker reports its steps to (set by the pool's initializer).
_STEP_QUEUE: Any = None


def _init_stage_worker(queue: Any, parent_pid: int) -> None:
    global _STEP_QUEUE
    from ._backends import exit_with_parent, ignore_interrupts

    exit_with_parent(parent_pid)
    ignore_interrupts()
    _STEP_QUEUE = queue


def _fit_in_worker(task: tuple[str, int], *args: Any, **kwargs: Any):
    """:func:`_fit_one` in a stage worker, its steps sent to the coordinator's queue."""
    queue = _STEP_QUEUE

    def on_step(done: int, total: int) -> None:
        if queue is not None:
            queue.put((task, int(done)))

    return _fit_one(*args, on_step=on_step, **kwargs)


class _StageSteps:
    """The coordinator's count of the stage's steps (VAE epochs, mixture fits) over every
    draw: each draw counts up to its most steps, and a finished draw's unused steps (early
    stopping) are counted done, so the time left is an upper bound."""

    def __init__(self, most: dict[tuple[str, int], int], progress: bool | None) -> None:
        self.most = most
        self.done = dict.fromkeys(most, 0)
        kinds = {kind for kind, _ in most}
        what = "VAE epochs" if kinds == {"vae"} else "stage steps"
        self.bar = Progress(sum(most.values()), what, enabled=progress, heartbeat=1.0,
                            at_most=True)

    def step(self, task: tuple[str, int], done: int) -> None:
        new = min(int(done), self.most[task])
        if new > self.done[task]:
            self.bar.update(new - self.done[task])
            self.done[task] = new

    def finish(self, task: tuple[str, int]) -> None:
        self.step(task, self.most[task])

    def close(self) -> None:
        self.bar.close()


def _most_steps(kind: str, params: dict, injected: bool) -> int:
    if injected:
        return 1
    from ..pretrain import representation_steps

    return representation_steps(kind, params)


def fit_representations(
    kinds: set[str], ds: Any, fit_rows: np.ndarray, spec: Any, out_dir: Path,
    representation_fn: Callable[..., Any] | None = None, *, repeats: int = 1, jobs: int = 1,
    stage: StageChoice | None = None, progress: bool | None = None,
) -> tuple[dict[str, np.ndarray], dict[str, Any], dict[str, str], dict[str, float]]:
    """Fit each needed unsupervised stage once per repeat on ``ds.X[fit_rows]`` (features
    only).

    Returns ``(features, diagnostics, errors, seconds)``: ``features[repeat_key(kind, r)]``
    holds every row of ``ds`` in repeat ``r``'s draw of that representation (``"raw"`` is
    the table itself); ``diagnostics[kind]`` describes the study's own draw (repeat 0); a
    stage any of whose draws fails is in ``errors`` (its methods are not run; the others
    still are); ``seconds[kind]`` sums the fits. With ``jobs`` > 1 (and the real stage or a
    picklable stand-in) the draws are fitted in that many processes, which open the table
    from a shared file (study/_shared.py) and write their features to one. Every feature
    matrix returned is such a memory-mapped file under ``cache/shared/``. ``stage`` (the
    design's choice of rows and draws) is said in one log line; the draws' epochs are shown
    by a :class:`Progress` (``progress`` as in :func:`run_study`).
    """
    folder = shared_folder(out_dir)
    remove_shared(out_dir)  # files of an interrupted run
    X_all = write_shared(folder, "raw", np.asarray(ds.X, dtype=np.float32))
    features: dict[str, np.ndarray] = {"raw": X_all}
    diagnostics: dict[str, Any] = {}
    errors: dict[str, str] = {}
    seconds: dict[str, float] = {}
    if not kinds:
        return features, diagnostics, errors, seconds
    if stage is not None:
        log.info("%s", stage.reason)
    cache = Path(out_dir) / "cache"
    tasks = [(kind, r) for kind in sorted(kinds) for r in range(max(1, int(repeats)))]
    rows = np.asarray(fit_rows)
    args = {
        (kind, r): (kind, str(X_all.filename), rows, ds.blocks,
                    dict(spec.pretrain.get(kind, {})), representation_seed(spec.seed, kind, r),
                    cache)
        for kind, r in tasks
    }
    out_files = {t: folder / repeat_key(*t).replace("@", "_") for t in tasks}
    steps = _StageSteps({t: _most_steps(t[0], args[t][4], representation_fn is not None)
                         for t in tasks}, progress)
    results: dict[tuple[str, int], Any] = {}
    try:
        if jobs > 1 and len(tasks) > 1 and _picklable(representation_fn):
            _fit_in_pool(tasks, args, out_files, min(jobs, len(tasks)), representation_fn,
                         steps, results)
        else:
            for t in tasks:
                try:
                    results[t] = _fit_one(*args[t], representation_fn=representation_fn,
                                          on_step=lambda done, total, t=t: steps.step(t, done),
                                          out_file=out_files[t])
                except Exception as exc:  # noqa: BLE001  (its methods fail; the baselines run)
                    results[t] = exc
                steps.finish(t)
    finally:
        steps.close()
    for kind, r in tasks:
        res = results[(kind, r)]
        if isinstance(res, Exception):
            errors.setdefault(kind, f"{type(res).__name__}: {res}")
            continue
        feats, diag, secs = res
        features[repeat_key(kind, r)] = open_shared(feats)
        seconds[kind] = seconds.get(kind, 0.0) + secs
        if r == 0:
            diagnostics[kind] = diag
    for kind in errors:
        log.warning("unsupervised stage %r failed: %s", kind, errors[kind])
        seconds.setdefault(kind, 0.0)
    return features, diagnostics, errors, seconds


def _fit_in_pool(tasks, args, out_files, workers, representation_fn, steps, results) -> None:
    """Fit the draws in ``workers`` spawned processes; their steps come back on a queue."""
    import multiprocessing as mp
    import os
    import queue as queue_mod
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

    from ._backends import stop_pool, terminate_as_interrupt

    context = mp.get_context("spawn")
    step_queue = context.Queue()
    futures: dict[Any, tuple[str, int]] = {}
    with terminate_as_interrupt():
        pool = ProcessPoolExecutor(max_workers=workers, mp_context=context,
                                   initializer=_init_stage_worker,
                                   initargs=(step_queue, os.getpid()))
        try:
            for t in tasks:
                futures[pool.submit(_fit_in_worker, t, *args[t], out_file=out_files[t],
                                    representation_fn=representation_fn)] = t
            pending = set(futures)
            while pending:
                done, pending = wait(pending, timeout=0.5, return_when=FIRST_COMPLETED)
                _drain(step_queue, steps, queue_mod.Empty)
                for fut in done:
                    t = futures[fut]
                    try:
                        results[t] = fut.result()
                    except Exception as exc:  # noqa: BLE001  (its methods fail; others run)
                        results[t] = exc
                    steps.finish(t)
            pool.shutdown(wait=True)
        except BaseException:
            stop_pool(pool, futures)
            raise
        finally:
            step_queue.close()
            step_queue.join_thread()


def _drain(step_queue: Any, steps: _StageSteps, empty: type[Exception]) -> None:
    while True:
        try:
            task, done = step_queue.get_nowait()
        except empty:
            return
        steps.step(task, done)
