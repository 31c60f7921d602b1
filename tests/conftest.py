"""Shared test set-up."""

from __future__ import annotations

import os

import matplotlib

matplotlib.use("Agg")
# One torch / BLAS thread per test worker: the suite runs with pytest-xdist on every core.
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")
