"""The unsupervised stage of a study: each representation fitted once, applied to every row."""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from .._seeding import derive_seed

__all__ = ["fit_representations"]

log = logging.getLogger(__name__)


def fit_representations(
    kinds: set[str], ds: Any, fit_rows: np.ndarray, spec: Any, out_dir: Path,
    representation_fn: Callable[..., Any] | None = None,
) -> tuple[dict[str, np.ndarray], dict[str, Any], dict[str, str], dict[str, float]]:
    """Fit each needed unsupervised stage once on ``ds.X[fit_rows]`` (features only).

    Returns ``(features, diagnostics, errors, seconds)``: ``features[kind]`` holds every row
    of ``ds`` in that representation (``"raw"`` is the table itself); a stage that fails is
    in ``errors`` (its methods are not run; the others still are).
    """
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
                seed=derive_seed(spec.seed, "pretrain", kind), cache_dir=Path(out_dir) / "cache",
            )
            features[kind] = np.asarray(transformer.transform(ds.X), dtype=np.float32)
            diagnostics[kind] = diag
        except Exception as exc:  # noqa: BLE001  (its methods fail; the baselines still run)
            errors[kind] = f"{type(exc).__name__}: {exc}"
            log.warning("unsupervised stage %r failed: %s", kind, errors[kind])
        seconds[kind] = time.perf_counter() - t0
    return features, diagnostics, errors, seconds
