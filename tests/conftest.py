"""Shared test set-up."""

from __future__ import annotations

import os

import matplotlib

matplotlib.use("Agg")
# One torch / BLAS thread per test worker: the suite runs with pytest-xdist on every core.
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

# Property tests draw the same examples on every run, so a CI failure can be replayed here.
from hypothesis import settings  # noqa: E402

settings.register_profile("semisup", derandomize=True, print_blob=True)
settings.load_profile("semisup")
