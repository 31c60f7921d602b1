"""The code follows the project's lint rules (ruff, configured in pyproject.toml)."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_is_clean():
    if shutil.which("ruff") is None and subprocess.run(
        [sys.executable, "-m", "ruff", "--version"], capture_output=True
    ).returncode != 0:
        pytest.skip("ruff is not installed (it comes with the 'test' extra)")
    out = subprocess.run([sys.executable, "-m", "ruff", "check", "--output-format", "concise",
                          "semisup", "tests", "benchmarks"], cwd=ROOT, capture_output=True,
                         text=True)
    assert out.returncode == 0, out.stdout + out.stderr
