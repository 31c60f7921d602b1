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
from pathlib import Path
from typing import Any

import numpy as np

from .._seeding import derive_seed

__all__ = ["fit_representations", "method_features", "repeat_key", "representation_seed"]

log = logging.getLogger(__name__)


def representation_seed(study_seed: int, kind: str, repeat: int = 0) -> int:
    """Seed of repeat ``repeat``'s draw of stage ``kind`` (repeat 0: the study's own)."""
    if repeat == 0:
        return derive_seed(study_seed, "pretrain", kind)
    return derive_seed(study_seed, "pretrain", kind, "repeat", repeat)


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


def _fit_one(kind, X_all, fit_rows, blocks, params, seed, cache_dir, representation_fn=None):
    """Fit one draw of stage ``kind``; return (features of every row, diagnostics, seconds)."""
    t0 = time.perf_counter()
    if representation_fn is None:
        from ..pretrain import fit_representation as representation_fn
    # Thread counts are the stage's own parameter (n_threads): the mixture defaults to one
    # BLAS thread, 1.9 s against 71 s on digits on a busy machine (benchmarks/results/study.md).
    transformer, diag = representation_fn(kind, X_all[fit_rows], blocks=blocks, params=params,
                                          seed=seed, cache_dir=cache_dir)
    return (np.asarray(transformer.transform(X_all), dtype=np.float32), diag,
            time.perf_counter() - t0)


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


def fit_representations(
    kinds: set[str], ds: Any, fit_rows: np.ndarray, spec: Any, out_dir: Path,
    representation_fn: Callable[..., Any] | None = None, *, repeats: int = 1, jobs: int = 1,
) -> tuple[dict[str, np.ndarray], dict[str, Any], dict[str, str], dict[str, float]]:
    """Fit each needed unsupervised stage once per repeat on ``ds.X[fit_rows]`` (features
    only).

    Returns ``(features, diagnostics, errors, seconds)``: ``features[repeat_key(kind, r)]``
    holds every row of ``ds`` in repeat ``r``'s draw of that representation (``"raw"`` is
    the table itself); ``diagnostics[kind]`` describes the study's own draw (repeat 0); a
    stage any of whose draws fails is in ``errors`` (its methods are not run; the others
    still are); ``seconds[kind]`` sums the fits. With ``jobs`` > 1 (and the real stage or a
    picklable stand-in) the draws are fitted in that many processes.
    """
    features: dict[str, np.ndarray] = {"raw": np.asarray(ds.X, dtype=np.float32)}
    diagnostics: dict[str, Any] = {}
    errors: dict[str, str] = {}
    seconds: dict[str, float] = {}
    X_all = np.asarray(ds.X)
    cache = Path(out_dir) / "cache"
    tasks = [(kind, r) for kind in sorted(kinds) for r in range(max(1, int(repeats)))]
    args = {
        (kind, r): (kind, X_all, np.asarray(fit_rows), ds.blocks,
                    dict(spec.pretrain.get(kind, {})), representation_seed(spec.seed, kind, r),
                    cache)
        for kind, r in tasks
    }
    results: dict[tuple[str, int], Any] = {}
    if jobs > 1 and len(tasks) > 1 and _picklable(representation_fn):
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(max_workers=min(jobs, len(tasks)),
                                 mp_context=mp.get_context("spawn")) as pool:
            futures = {t: pool.submit(_fit_one, *args[t], representation_fn=representation_fn)
                       for t in tasks}
            for t, fut in futures.items():
                try:
                    results[t] = fut.result()
                except Exception as exc:  # noqa: BLE001  (its methods fail; others run)
                    results[t] = exc
    else:
        for t in tasks:
            try:
                results[t] = _fit_one(*args[t], representation_fn=representation_fn)
            except Exception as exc:  # noqa: BLE001  (its methods fail; the baselines run)
                results[t] = exc
    for kind, r in tasks:
        res = results[(kind, r)]
        if isinstance(res, Exception):
            errors.setdefault(kind, f"{type(res).__name__}: {res}")
            continue
        feats, diag, secs = res
        features[repeat_key(kind, r)] = feats
        seconds[kind] = seconds.get(kind, 0.0) + secs
        if r == 0:
            diagnostics[kind] = diag
    for kind in errors:
        log.warning("unsupervised stage %r failed: %s", kind, errors[kind])
        seconds.setdefault(kind, 0.0)
    return features, diagnostics, errors, seconds
