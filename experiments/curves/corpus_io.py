"""Read the curve corpus (``corpus/*.json``, written by ``build.py``) into curves and truths.

A *curve* is one simulated user's measurements of one method (cells of every budget and
repeat) together with the truth of that method at 1, 1.5, 2, 3, 4 and 8 times the user's
largest measured budget (where the table had the rows). Shared by ``fit_prior.py`` and the
leave-one-table-out benchmark.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "corpus"
RATIOS = (1.0, 1.5, 2.0, 3.0, 4.0, 8.0)
METRIC = "accuracy"


@dataclass
class Curve:
    task: str
    user: int                 # labels the simulated user owns
    method: str
    n: np.ndarray             # budget of each ok cell
    metric: np.ndarray        # the metric of each ok cell
    n_max: int
    truth: dict[float, tuple[float, float]] = field(default_factory=dict)  # r -> (mean, se)


@dataclass
class UserStudy:
    task: str
    user: int
    n_classes: int
    cells: pd.DataFrame       # ok cells of every method (method, n_labels, repeat, metric...)
    curves: list[Curve]


def _frame(cells: dict) -> pd.DataFrame:
    return pd.DataFrame(cells)


def truth_table(task: dict, metric: str = METRIC) -> pd.DataFrame:
    """Truth per (method, n_labels): mean, sd and count of the repeats' metric."""
    cells = task.get("truth", {}).get("cells")
    if not cells:
        return pd.DataFrame(columns=["method", "n_labels", "mean", "sd", "count"])
    t = _frame(cells)
    t = t[t["status"] == "ok"]
    g = t.groupby(["method", "n_labels"])[metric]
    return g.agg(["mean", "std", "count"]).rename(columns={"std": "sd"}).reset_index()


def load_tasks(folder: Path = CORPUS) -> list[dict]:
    out = []
    for path in sorted(Path(folder).glob("*.json")):
        out.append(json.loads(path.read_text()))
    return out


def user_studies(task: dict, metric: str = METRIC) -> list[UserStudy]:
    """Each simulated user of ``task`` with its curves and their truths."""
    name = task["task"]["name"]
    truth = truth_table(task, metric)
    n_eval = task["truth"].get("n_eval") or task["table"]["n_eval"]
    out = []
    for u in task["users"]:
        if "cells" not in u or not u.get("n_max"):
            continue
        cells = _frame(u["cells"])
        cells = cells[(cells["status"] == "ok") & cells[metric].notna()].copy()
        cells["strategy"] = "random"
        curves = []
        for method, g in cells.groupby("method", sort=True):
            n_max = int(g["n_labels"].max())
            tr: dict[float, tuple[float, float]] = {}
            tm = truth[truth["method"] == method]
            for r in RATIOS:
                b = int(round(r * n_max))
                hit = tm[tm["n_labels"] == b]
                if len(hit):
                    mean = float(hit["mean"].iloc[0])
                    cnt = int(hit["count"].iloc[0])
                    sd = float(hit["sd"].iloc[0]) if cnt > 1 else np.nan
                    binom = np.sqrt(max(mean * (1 - mean), 1e-4) / n_eval)
                    se = sd / np.sqrt(cnt) if np.isfinite(sd) else binom
                    tr[r] = (mean, float(max(se, binom / np.sqrt(cnt))))
            curves.append(Curve(name, int(u["n_labeled"]), str(method),
                                g["n_labels"].to_numpy(float), g[metric].to_numpy(float),
                                n_max, tr))
        out.append(UserStudy(name, int(u["n_labeled"]), int(task["table"]["n_classes"]),
                             cells, curves))
    return out
