"""Options and the choice: the cheapest (method, budget, strategy) that is sure enough.

Among options as cheap as the choice that are all sure enough, the study cannot favour one
on the target, so the plan takes the simplest (:func:`simplicity`: no unsupervised stage
first, then the quickest to fit), then the most probable. Pure: bands, prices and the target
in; option records out.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from ._bootstrap import CurveBand, probability_meets
from ._costs import plan_cost

__all__ = ["Option", "best_effort", "budget_grid", "choose", "curve_options", "simplicity"]

#: Sort key of a method name: smaller is preferred among equal options.
Prefer = Callable[[str], tuple]


@dataclass(frozen=True)
class Option:
    """One priced (method, strategy, budget) with its predicted metric and probability."""

    method: str
    strategy: str
    n_labels: int
    mean: float
    low: float
    high: float
    probability: float
    cost: float
    extrapolated: bool
    n_new: int = 0
    rounds: int = 0
    fit: str = "power_law"
    flagged: bool = False

    def to_dict(self) -> dict:
        d = asdict(self)
        out = {
            "method": self.method,
            "strategy": self.strategy,
            "n_labels": int(self.n_labels),
            "predicted": {"mean": d.pop("mean"), "low": d.pop("low"), "high": d.pop("high")},
            "probability": self.probability,
            "cost": self.cost,
            "extrapolated": bool(self.extrapolated),
        }
        for key in ("n_new", "rounds", "fit", "flagged"):
            out[key] = d[key]
        return out


def curve_options(
    band: CurveBand,
    *,
    method: str,
    strategy: str,
    target: float,
    confidence: float,
    label_price: float,
    labels_owned: int,
    cost_per_round: float,
    show: Iterable[float] = (),
    discount: np.ndarray | None = None,
) -> list[Option]:
    """Options of one curve: the budgets in ``show`` plus the cheapest one that meets the
    target with probability >= ``confidence`` (if any grid budget does).

    ``band`` holds error rates; the target is on the metric scale (metric = 1 - error).
    ``discount`` (per grid budget, metric scale) is subtracted from the samples before the
    share that meets the target is counted: the continuation prior's decision margin.
    """
    metric_samples = 1.0 - band.samples
    if discount is not None:
        metric_samples = metric_samples - np.asarray(discount, dtype=float)
    prob = probability_meets(metric_samples, target)
    show_set = {int(round(v)) for v in show}
    first_ok = next((i for i, p in enumerate(prob) if p >= confidence), None)
    out = []
    for i, n in enumerate(band.grid):
        n_int = int(round(n))
        if n_int not in show_set and i != first_ok:
            continue
        cost, n_new, rounds = plan_cost(
            n_int, label_price=label_price, labels_owned=labels_owned,
            cost_per_round=cost_per_round,
        )
        out.append(Option(
            method=method, strategy=strategy, n_labels=n_int,
            mean=float(1.0 - band.point[i]), low=float(1.0 - band.high[i]),
            high=float(1.0 - band.low[i]), probability=float(prob[i]), cost=float(cost),
            extrapolated=bool(band.extrapolated[i]), n_new=n_new, rounds=rounds,
            fit=band.fit.kind, flagged=band.fit.flagged,
        ))
    return out


def simplicity(families: Mapping[str, str], cells: pd.DataFrame) -> Prefer:
    """Sort key of a method's simplicity: its family's place in the registry's
    ``FAMILY_ORDER`` (unknown families last), then its median seconds per cell in ``cells``
    (the study's cells; a method without them, or cells without ``seconds``, last)."""
    from ..methods import FAMILY_ORDER

    seconds = (cells.groupby("method")["seconds"].median().to_dict()
               if "seconds" in cells.columns else {})

    def key(method: str) -> tuple:
        rank = FAMILY_ORDER.get(families.get(method, ""), len(FAMILY_ORDER))
        return (rank, float(seconds.get(method, np.inf)))
    return key


def _no_preference(method: str) -> tuple:
    return ()


def _rank(o: Option, prefer: Prefer) -> tuple:
    return (o.cost, o.n_labels, prefer(o.method), -o.probability, o.method, o.strategy)


def choose(options: Sequence[Option], confidence: float, *,
           prefer: Prefer | None = None) -> tuple[Option | None, Option | None]:
    """Cheapest option with probability >= ``confidence`` and the runner-up.

    Ties in cost go to the smaller budget, then the simpler option (``prefer``, e.g.
    :func:`simplicity`; none by default), then the higher probability. The runner-up is the
    cheapest qualifying option of a different (method, strategy) pair, or None.
    """
    prefer = prefer or _no_preference
    ok = sorted((o for o in options if o.probability >= confidence),
                key=lambda o: _rank(o, prefer))
    if not ok:
        return None, None
    chosen = ok[0]
    runner = next((o for o in ok if (o.method, o.strategy) != (chosen.method, chosen.strategy)),
                  None)
    return chosen, runner


def best_effort(options: Sequence[Option], *, prefer: Prefer | None = None) -> Option | None:
    """The option with the highest predicted metric; of those that read the same to three
    decimals, the simpler (``prefer``), then the more probable and cheaper one."""
    if not options:
        return None
    prefer = prefer or _no_preference
    return min(options, key=lambda o: (-round(o.mean, 3), prefer(o.method), -o.probability, o.cost,
                                       o.n_labels, o.method, o.strategy))


def budget_grid(n_measured: np.ndarray, limit: float, *, points: int = 80,
                extra: Iterable[float] = ()) -> np.ndarray:
    """Whole-number budgets from the smallest measured one up to ``limit``, geometric, plus
    the measured budgets and any ``extra`` budgets inside that range."""
    n_measured = np.unique(np.asarray(n_measured, dtype=float))
    lo = float(n_measured[0])
    geo = np.round(np.geomspace(lo, limit, points))
    extras = [v for v in extra if lo <= v <= limit]
    grid = np.unique(np.concatenate([geo, n_measured, np.asarray(extras, dtype=float)]))
    return grid[(grid >= lo) & (grid <= limit)]
