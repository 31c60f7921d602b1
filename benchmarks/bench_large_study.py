"""Benchmark: the default study on a million rows, as a new user runs it.

A generated mixed table (``--rows``, default 1,000,000; 24 numeric and 4 categorical
columns, 6 classes, 500 labels) is studied with every default and ``--jobs 2`` by the
command line (``semisup study big.parquet --label-column y --id-column rid --jobs 2``),
stderr sent to a log file as a job would. A monitor samples the whole process tree every
second and prints:

- wall time of the study (goal: under 15 minutes on 2 cores);
- peak resident memory: the largest sum over the tree of each process's RSS, and of its PSS
  (proportional set size: pages shared by several processes, such as the memory-mapped
  feature files, counted once in all), against the encoded matrix's size as the reference
  measured in the same run (goal: under 6 GB);
- the longest silence of the log: the largest gap between two lines (goal: at most 30 s);
- with ``--after``: ``plan``, ``report``, ``fit`` and ``predict`` on the study and the same
  million rows (goal: predict under 2 minutes).

``--stop-after S`` ends the study with SIGTERM after S seconds (as a scheduler's time limit
would) and reports how far it got: cells done, seconds per cell by method (wall and, from the
store, each cell's own clock) and the progress lines' interval. The load average is printed,
and the CPU seconds (user + sys) of the whole process tree beside the wall time: the machine
may be shared. ``--reuse-stage FOLDER`` copies an earlier study's ``cache/`` (the fitted
unsupervised stage of the same table and settings) into the new study folder first, so a run
that measures the cells does not fit the stage again (its own time is in the earlier run).

    nice -n 5 env PYTHONPATH=. python benchmarks/bench_large_study.py --after
    PYTHONPATH=. python benchmarks/bench_large_study.py --rows 30000      # a smoke run
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
GOAL_SECONDS = 15 * 60
GOAL_BYTES = 6 * 1024**3
GOAL_GAP = 30.0
GOAL_PREDICT = 120.0


def make_table(path: Path, n_rows: int, n_labels: int = 500, seed: int = 0) -> None:
    """24 numeric columns from 6 classes' Gaussian clusters through a random map, 4
    categorical columns tied to the class, ``n_labels`` labels; written as Parquet."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    y = rng.integers(0, 6, size=n_rows)
    centres = rng.normal(scale=1.2, size=(6, 8))
    latent = centres[y] + rng.normal(size=(n_rows, 8))
    W = rng.normal(size=(8, 24)) / np.sqrt(8)
    X = np.tanh(latent @ W) + 0.3 * rng.normal(size=(n_rows, 24))
    frame = pd.DataFrame(X.astype(np.float32), columns=[f"x{i:02d}" for i in range(24)])
    for j, levels in enumerate((3, 5, 8, 12)):
        own = (y + j) % levels
        noise = rng.integers(0, levels, size=n_rows)
        pick = np.where(rng.random(n_rows) < 0.6, own, noise)
        frame[f"c{j}"] = np.asarray([f"l{v}" for v in range(levels)], dtype=object)[pick]
    labels = np.full(n_rows, None, dtype=object)
    chosen = rng.choice(n_rows, size=n_labels, replace=False)
    labels[chosen] = np.asarray([f"class{v}" for v in range(6)], dtype=object)[y[chosen]]
    frame["y"] = labels
    frame["rid"] = np.arange(n_rows).astype(str)
    frame.to_parquet(path, index=False)


def table_in(workdir: Path | None, n_rows: int) -> tuple[Path, Path]:
    """(work folder, table): the generated table of ``n_rows`` rows in ``workdir`` (a new
    temporary folder when None), made unless it is there already."""
    work = workdir or Path(tempfile.mkdtemp(prefix="semisup-large-"))
    work.mkdir(parents=True, exist_ok=True)
    table = work / "big.parquet"
    if not table.exists():
        make_table(table, n_rows)
    return work, table


def _tree(pid: int) -> list[int]:
    """``pid`` and every descendant (from /proc)."""
    children: dict[int, list[int]] = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat", encoding="ascii", errors="replace") as fh:
                ppid = int(fh.read().rsplit(")", 1)[1].split()[1])
        except (OSError, ValueError, IndexError):
            continue
        children.setdefault(ppid, []).append(int(entry))
    out, todo = [], [pid]
    while todo:
        p = todo.pop()
        out.append(p)
        todo.extend(children.get(p, []))
    return out


def _memory(pid: int) -> tuple[int, int]:
    """(RSS, PSS) in bytes of one process."""
    rss = pss = 0
    try:
        with open(f"/proc/{pid}/smaps_rollup", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Rss:"):
                    rss = int(line.split()[1]) * 1024
                elif line.startswith("Pss:"):
                    pss = int(line.split()[1]) * 1024
    except OSError:
        pass
    return rss, pss


class Monitor(threading.Thread):
    """Peak RSS / PSS of a process tree, sampled every second."""

    def __init__(self, pid: int) -> None:
        super().__init__(daemon=True)
        self.pid, self.peak_rss, self.peak_pss, self.peak_procs = pid, 0, 0, 0
        self.stop = threading.Event()

    def run(self) -> None:
        while not self.stop.wait(1.0):
            procs = _tree(self.pid)
            mem = [_memory(p) for p in procs]
            self.peak_rss = max(self.peak_rss, sum(m[0] for m in mem))
            self.peak_pss = max(self.peak_pss, sum(m[1] for m in mem))
            self.peak_procs = max(self.peak_procs, len(procs))


def run_logged(cmd: list[str], log_path: Path, stop_after: float | None = None) -> dict:
    """Run ``cmd`` with stdout and stderr to ``log_path``; time it, watch its memory and the
    gaps between its log lines."""
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    stamps: list[float] = []
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.monotonic()
    with log_path.open("w", encoding="utf-8") as log:
        proc = subprocess.Popen(cmd, stdout=log, stderr=subprocess.STDOUT, env=env,
                                start_new_session=True)
        monitor = Monitor(proc.pid)
        monitor.start()
        seen = 0
        stopped = False
        while proc.poll() is None:
            time.sleep(0.5)
            text = log_path.read_text(encoding="utf-8", errors="replace")
            lines = text.count("\n")
            if lines > seen:
                stamps.extend([time.monotonic() - t0] * (lines - seen))
                seen = lines
            if stop_after and time.monotonic() - t0 > stop_after and not stopped:
                proc.send_signal(signal.SIGTERM)
                stopped = True
        wall = time.monotonic() - t0
        monitor.stop.set()
        monitor.join()
    after = resource.getrusage(resource.RUSAGE_CHILDREN)  # the tree, once every process ended
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    points = [0.0, *stamps, wall]
    gaps = [b - a for a, b in zip(points, points[1:], strict=False)]
    return {"seconds": wall, "cpu_seconds": cpu, "exit": proc.returncode, "stopped": stopped,
            "peak_rss_bytes": monitor.peak_rss, "peak_pss_bytes": monitor.peak_pss,
            "peak_processes": monitor.peak_procs, "log_lines": len(stamps),
            "longest_silence_seconds": max(gaps),
            "log_tail": log_path.read_text(encoding="utf-8", errors="replace")[-2500:]}


def _cells_done(out: Path) -> dict:
    """Cells stored so far and each method's mean seconds per cell (the cells' own clocks)."""
    import sqlite3

    path = out / "study.sqlite"
    if not path.exists():
        return {}
    con = sqlite3.connect(path)
    try:
        rows = con.execute("select method, status, seconds from cells").fetchall()
    except sqlite3.Error:
        return {}
    finally:
        con.close()
    per: dict[str, list[float]] = {}
    for method, _, seconds in rows:
        per.setdefault(method, []).append(float(seconds or 0.0))
    return {"cells_stored": len(rows),
            "cells_ok": sum(1 for r in rows if r[1] == "ok"),
            "seconds_per_cell": {m: round(sum(v) / len(v), 1) for m, v in sorted(per.items())},
            "cells_per_method": {m: len(v) for m, v in sorted(per.items())}}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--workdir", type=Path, default=None)
    ap.add_argument("--stop-after", type=float, default=None, metavar="S")
    ap.add_argument("--after", action="store_true", help="plan, report, fit, predict too")
    ap.add_argument("--reuse-stage", type=Path, default=None, metavar="FOLDER",
                    help="copy FOLDER/cache (an earlier study of the same table) first")
    ap.add_argument("--extra", nargs=argparse.REMAINDER, default=[],
                    help="more arguments for semisup study")
    args = ap.parse_args()
    t0 = time.perf_counter()
    work, table = table_in(args.workdir, args.rows)
    print(f"table {table}: {args.rows:,} rows ({time.perf_counter() - t0:.0f}s to make); "
          f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores", flush=True)
    py = sys.executable
    out = work / "study"
    start = ["--restart"]
    if args.reuse_stage:
        shutil.rmtree(out, ignore_errors=True)
        shutil.copytree(args.reuse_stage / "cache", out / "cache")
        start = []  # a new folder holding only the stage's cache: nothing to restart
    study = run_logged([py, "-m", "semisup", "study", str(table), "--label-column", "y",
                        "--id-column", "rid", "--jobs", str(args.jobs), "--out", str(out),
                        *start, *args.extra], work / "study.log", args.stop_after)
    info_path = out / "study.json"
    n_cols = None
    if info_path.exists():
        info = json.loads(info_path.read_text())
        n_cols = info["data"]["n_features"]
        study["unsupervised_stage"] = info.get("unsupervised_stage")
        study["pretrain_seconds"] = info["timing"]["pretrain_seconds"]
        study["status_counts"] = info["status_counts"]
    matrix = args.rows * (n_cols or 0) * 4
    study.update(_cells_done(out))
    print(json.dumps({k: v for k, v in study.items() if k != "log_tail"}, indent=1))
    print(study["log_tail"])
    gb = 1024**3
    print(f"study: {study['seconds'] / 60:.1f} min (goal {GOAL_SECONDS / 60:.0f}; ratio "
          f"{study['seconds'] / GOAL_SECONDS:.2f}), exit {study['exit']}")
    print(f"peak memory of the process tree: RSS sum {study['peak_rss_bytes'] / gb:.2f} GB, "
          f"PSS sum {study['peak_pss_bytes'] / gb:.2f} GB (goal 6 GB)"
          + (f"; {study['peak_pss_bytes'] / matrix:.1f}x the encoded matrix "
             f"({matrix / gb:.2f} GB, {n_cols} columns)" if matrix else ""))
    print(f"longest silence of the log: {study['longest_silence_seconds']:.0f}s "
          f"(goal {GOAL_GAP:.0f}s), {study['log_lines']} lines")
    print(f"CPU seconds of the process tree (user + sys): {study['cpu_seconds']:.0f} "
          f"({study['cpu_seconds'] / study['seconds']:.2f} cores busy on average)")
    if args.after and study["exit"] == 0:
        steps = {
            "plan": [py, "-m", "semisup", "plan", str(out), "--target", "accuracy=0.8",
                     "--cost-per-label", "1"],
            "report": [py, "-m", "semisup", "report", str(out)],
            "fit": [py, "-m", "semisup", "fit", str(out), "--out", str(work / "model")],
            "predict": [py, "-m", "semisup", "predict", str(work / "model"), str(table),
                        "--out", str(work / "predictions.csv")],
        }
        for name, cmd in steps.items():
            res = run_logged(cmd, work / f"{name}.log")
            extra = f" (goal {GOAL_PREDICT:.0f}s)" if name == "predict" else ""
            print(f"{name}: exit {res['exit']}, {res['seconds']:.0f}s{extra}, peak PSS "
                  f"{res['peak_pss_bytes'] / gb:.2f} GB")
            if res["exit"] != 0:
                print(res["log_tail"])
    print(f"load average at the end {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
