"""What the user asks the plan for: the target, the confidence and the prices."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

from .._errors import PlanError

__all__ = ["METRICS", "PlanRequest"]

#: Metrics a target can be set on; all are higher-is-better and lie in [0, 1].
METRICS = ("accuracy", "balanced_accuracy", "macro_f1")


def _number(name: str, value: object) -> float:
    try:
        out = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise PlanError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(out):
        raise PlanError(f"{name} must be a finite number, got {value!r}")
    return out


@dataclass(frozen=True)
class PlanRequest:
    """The question a plan answers.

    Parameters
    ----------
    metric : "accuracy", "balanced_accuracy" or "macro_f1" (measured on the evaluation rows).
    target : value of ``metric`` to reach, in (0, 1).
    cost_per_label : price of one label (any currency), >= 0.
    confidence : required probability of meeting the target, in (0, 1).
    cost_per_round : fixed price of one labeling round, >= 0.
    labels_owned : training labels already paid for; None means the labeled rows of the table
        less the holdout.
    class_costs : price of one label per class name, overriding ``cost_per_label``.
    n_next : rows to list in label_next.csv; None means what the plan buys.
    """

    metric: str
    target: float
    cost_per_label: float
    confidence: float = 0.8
    cost_per_round: float = 0.0
    labels_owned: int | None = None
    class_costs: Mapping[str, float] = field(default_factory=dict)
    n_next: int | None = None

    def __post_init__(self) -> None:
        if self.metric == "log_loss":
            raise PlanError("metric 'log_loss' cannot be a target (it has no upper bound); "
                            f"use one of {', '.join(METRICS)}")
        if self.metric not in METRICS:
            raise PlanError(f"unknown metric {self.metric!r}; use one of {', '.join(METRICS)}")
        target = _number("target", self.target)
        if not 0 < target < 1:
            raise PlanError(f"target {self.metric}={target:g} must lie strictly between 0 and 1")
        confidence = _number("confidence", self.confidence)
        if not 0 < confidence < 1:
            raise PlanError(f"confidence {confidence:g} must lie strictly between 0 and 1, "
                            "e.g. 0.8")
        for name in ("cost_per_label", "cost_per_round"):
            if _number(name, getattr(self, name)) < 0:
                raise PlanError(f"{name} must be >= 0, got {getattr(self, name)}")
        costs = {}
        for key, value in dict(self.class_costs or {}).items():
            price = _number(f"class cost of {key!r}", value)
            if price < 0:
                raise PlanError(f"class cost of {key!r} must be >= 0, got {value}")
            costs[str(key)] = price
        if self.labels_owned is not None:
            if int(self.labels_owned) != self.labels_owned or self.labels_owned < 0:
                raise PlanError(f"labels_owned must be a whole number >= 0, got "
                                f"{self.labels_owned!r}")
        if self.n_next is not None:
            if int(self.n_next) != self.n_next or self.n_next < 0:
                raise PlanError(f"n_next must be a whole number >= 0, got {self.n_next!r}")
        object.__setattr__(self, "target", target)
        object.__setattr__(self, "confidence", confidence)
        object.__setattr__(self, "cost_per_label", float(self.cost_per_label))
        object.__setattr__(self, "cost_per_round", float(self.cost_per_round))
        object.__setattr__(self, "class_costs", costs)

    def to_dict(self) -> dict:
        return {
            "metric": self.metric,
            "target": self.target,
            "cost_per_label": self.cost_per_label,
            "confidence": self.confidence,
            "cost_per_round": self.cost_per_round,
            "labels_owned": self.labels_owned,
            "class_costs": dict(self.class_costs),
            "n_next": self.n_next,
        }
