"""The error tree, atomic writes, seeding and the CLI shell."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import semisup
from semisup._atomic import atomic_path, atomic_write_bytes, atomic_write_text
from semisup._seeding import derive_rng, derive_seed

ROOT = Path(__file__).resolve().parents[1]


def run_cli(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "semisup", *args], capture_output=True,
                          text=True, env=env, cwd=cwd, timeout=120)


def test_errors_are_value_errors_with_one_root():
    # Python's own exception hierarchy: DataError must still be caught by `except ValueError`.
    assert issubclass(semisup.DataError, ValueError)
    assert issubclass(semisup.ConfigError, ValueError)
    for cls in (semisup.DataError, semisup.ConfigError, semisup.StoreError, semisup.PlanError):
        assert issubclass(cls, semisup.SemisupError)
    assert issubclass(semisup.DataWarning, UserWarning)


def test_atomic_write_replaces_whole_file(tmp_path):
    target = tmp_path / "sub" / "out.txt"
    atomic_write_text(target, "first")
    atomic_write_text(target, "second")
    assert target.read_text() == "second"
    atomic_write_bytes(target, b"\x00\x01")
    assert target.read_bytes() == b"\x00\x01"
    assert [p.name for p in target.parent.iterdir()] == ["out.txt"]


def test_atomic_write_gives_the_mode_open_would(tmp_path):
    # Reference: a file made by Python's own open() under the same umask.
    plain = tmp_path / "plain.txt"
    plain.write_text("x")
    atomic = atomic_write_text(tmp_path / "atomic.txt", "x")
    assert (atomic.stat().st_mode & 0o777) == (plain.stat().st_mode & 0o777)


def test_atomic_path_leaves_old_file_on_failure(tmp_path):
    target = tmp_path / "keep.csv"
    target.write_text("old")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("interrupted")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["keep.csv"]


def test_derived_seeds_are_stable_and_distinct():
    a = derive_seed(7, "draw", 3)
    assert a == derive_seed(7, "draw", 3)
    assert a != derive_seed(7, "draw", 4)
    assert a != derive_seed(8, "draw", 3)
    # numpy's SeedSequence is the reference: the same entropy and spawn key give the same stream.
    x = derive_rng(7, "draw", 3).random(5)
    np.testing.assert_array_equal(x, np.random.default_rng(a).random(5))


def test_cli_version_and_help():
    out = run_cli("--version")
    assert out.returncode == 0 and out.stdout.strip() == f"semisup {semisup.__version__}"
    for command in ("demo", "card", "study", "plan", "report"):
        out = run_cli(command, "--help")
        assert out.returncode == 0, out.stderr
        assert "usage: semisup " + command in out.stdout


def test_cli_usage_mistake_is_one_line_exit_2():
    out = run_cli("card")
    assert out.returncode == 2
    assert out.stderr.startswith("error: ") and len(out.stderr.strip().splitlines()) == 1
    out = run_cli("plan", "somewhere", "--target", "accuracy", "--cost-per-label", "1")
    assert out.returncode == 2
    assert "METRIC=VALUE" in out.stderr and "Traceback" not in out.stderr


def test_importing_semisup_does_not_load_torch():
    code = "import sys, semisup; print('torch' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert out.stdout.strip() == "False"


@pytest.mark.parametrize("budgets, expected", [
    ("5,abc", "'abc' is not a number"),
    ("5.5,10", "5.5 is not a whole number"),
    ("0,10", "0 is not a whole number"),
])
def test_cli_bad_budgets_are_one_line_errors(tmp_path, budgets, expected):
    table = tmp_path / "t.csv"
    table.write_text("x,y\n1,a\n2,b\n3,\n")
    out = run_cli("study", str(table), "--label-column", "y", "--budgets", budgets,
                  "--out", str(tmp_path / "s"))
    assert out.returncode == 2
    assert expected in out.stderr and "Traceback" not in out.stderr
    assert not (tmp_path / "s").exists()
