"""Pool workers end when their coordinator is killed with SIGKILL (no clean-up runs there)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

psutil = pytest.importorskip("psutil")

ROOT = Path(__file__).resolve().parents[1]

COORDINATOR = """
import os, sys, time
from semisup.study._backends import _dumps, make_pool

if __name__ == "__main__":
    pool = make_pool(2, _dumps(None))
    pids = set()
    while len(pids) < 2:  # both workers started (tasks land on whichever is free)
        futures = [pool.submit(time.sleep, 0.2) for _ in range(4)]
        for f in futures:
            f.result()
        pids = {p.pid for p in pool._processes.values()}
    for _ in range(4):
        pool.submit(time.sleep, 600)  # the workers are busy when the coordinator dies
    print(" ".join(str(p) for p in sorted(pids)), flush=True)
    time.sleep(600)
"""


def _alive(pid: int) -> bool:
    try:
        return psutil.Process(pid).status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


@pytest.mark.slow
@pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX")
def test_workers_exit_after_kill_9_of_the_coordinator(tmp_path):
    script = tmp_path / "coordinator.py"
    script.write_text(COORDINATOR)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, str(script)], stdout=subprocess.PIPE, text=True,
                            env=env, cwd=tmp_path)
    try:
        worker_pids = [int(p) for p in proc.stdout.readline().split()]
        assert len(worker_pids) == 2 and all(_alive(p) for p in worker_pids)
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        # Liveness, not speed: poll until the workers are gone, giving up after 30 s.
        deadline = time.monotonic() + 30
        while any(_alive(p) for p in worker_pids) and time.monotonic() < deadline:
            time.sleep(0.2)
        left = [p for p in worker_pids if _alive(p)]
        assert left == [], f"workers {left} outlived their coordinator"
    finally:
        for pid in worker_pids if "worker_pids" in locals() else []:
            if _alive(pid):
                os.kill(pid, signal.SIGKILL)
        if proc.poll() is None:
            proc.kill()
