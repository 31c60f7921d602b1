"""Run one experiment end to end and write its committed summary.

    python experiments/run.py digits            # or breast_cancer, wine
    python experiments/run.py digits --jobs 2

Writes the table (experiments/<name>/<name>.csv, from scikit-learn's bundled data), runs the
study in experiments/<name>/study/ (resumable; not committed), then copies the summary into
experiments/<name>/results/: curves.csv, cells.csv, study.json and accuracy.png.
"""

from __future__ import annotations

import argparse
import json
import logging
import shutil
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))


def plot_curves(curves_csv: Path, out_png: Path, title: str, metric: str = "accuracy") -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import matplotlib.ticker
    import pandas as pd

    from semisup._atomic import atomic_path

    c = pd.read_csv(curves_csv)
    c = c[(c["metric"] == metric) & (c["strategy"] == "random")]
    fig, ax = plt.subplots(figsize=(7, 4.5))
    for method, g in c.groupby("method"):
        g = g.sort_values("n_labels")
        style = "--" if method.startswith("supervised") else "-"
        ax.plot(g["n_labels"], g["mean"], style, marker="o", ms=3, label=method)
        ax.fill_between(g["n_labels"], g["low"], g["high"], alpha=0.12)
    ax.set_xscale("log")
    budgets = sorted(c["n_labels"].unique())
    ax.set_xticks(budgets)
    ax.xaxis.set_major_formatter(matplotlib.ticker.ScalarFormatter())
    ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
    ax.set_xlabel("label budget (labeled training rows)")
    ax.set_ylabel(f"holdout {metric} (mean, 95% interval over repeats)")
    ax.set_title(title)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    with atomic_path(out_png) as tmp:
        fig.savefig(tmp, dpi=110)
    plt.close(fig)


def main() -> int:
    from tables import TABLES, write_table

    from semisup.study import StudySpec, run_study

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("name", choices=sorted(TABLES))
    parser.add_argument("--jobs", type=int, default=None)
    parser.add_argument("--restart", action="store_true")
    args = parser.parse_args()
    logging.basicConfig(level=logging.WARNING, format="%(levelname)s: %(message)s")

    folder = HERE / args.name
    write_table(args.name)
    spec = StudySpec.build(folder / "study.toml", {})
    result = run_study(spec, folder / "study", jobs=args.jobs, restart=args.restart,
                       progress=True)
    results = folder / "results"
    results.mkdir(exist_ok=True)
    for name in ("curves.csv", "cells.csv", "study.json"):
        shutil.copyfile(folder / "study" / name, results / name)
    plot_curves(results / "curves.csv", results / "accuracy.png",
                f"{args.name}: holdout accuracy against label budget")
    (results / "summary.txt").write_text(result.summary() + "\n")
    info = json.loads((results / "study.json").read_text())
    print(result.summary())
    print(f"timing: {json.dumps(info['timing'])}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
