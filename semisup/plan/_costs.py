"""Cost model of a labeling plan (pure arithmetic).

cost(n_labels) = n_new * expected price of one label + rounds * cost_per_round, where

- ``n_new = max(0, n_labels - labels_owned)``: labels already owned are not bought again;
- the expected price of one label is ``sum_k p_k * price_k`` over classes ``k``, with ``p_k``
  the expected class mix (the class shares among the labels owned so far) and ``price_k`` the
  class's own price if given, else ``cost_per_label``. The class of a row is unknown before it
  is labeled, so only the expected price can be known in advance;
- ``rounds`` is 0 when nothing is bought, else 1: the plan buys its labels in one round (the
  study simulates an uncertainty strategy budget by budget, not in batches of a fixed size,
  so no batch size is known to split a purchase by).
"""

from __future__ import annotations

from collections.abc import Mapping

from .._errors import PlanError

__all__ = ["expected_label_price", "labeling_rounds", "plan_cost"]


def expected_label_price(
    cost_per_label: float,
    class_costs: Mapping[str, float] | None = None,
    class_counts: Mapping[str, float] | None = None,
) -> float:
    """Expected price of one new label given per-class prices and the expected class mix.

    >>> expected_label_price(1.0, {"b": 3.0}, {"a": 3, "b": 1})
    1.5
    """
    if cost_per_label < 0:
        raise PlanError(f"cost_per_label must be >= 0, got {cost_per_label}")
    class_costs = dict(class_costs or {})
    if not class_costs:
        return float(cost_per_label)
    counts = {k: float(v) for k, v in (class_counts or {}).items()}
    total = sum(counts.values())
    if total <= 0:
        raise PlanError(
            "per-class label prices need the class mix, but the study folder has no class "
            "counts (study.json 'class_counts'); drop --class-cost or rerun the study"
        )
    unknown = sorted(set(class_costs) - set(counts))
    if unknown:
        raise PlanError(f"class {unknown[0]!r} in class_costs is not a class of this study; "
                        f"known classes: {', '.join(sorted(counts))}")
    price = 0.0
    for name, count in counts.items():
        price += count / total * float(class_costs.get(name, cost_per_label))
    return price


def labeling_rounds(n_new: int) -> int:
    """Number of labeling rounds needed to buy ``n_new`` labels (0 or 1)."""
    return 0 if n_new <= 0 else 1


def plan_cost(
    n_labels: int,
    *,
    label_price: float,
    labels_owned: int = 0,
    cost_per_round: float = 0.0,
) -> tuple[float, int, int]:
    """Return ``(cost, n_new, rounds)`` of reaching a budget of ``n_labels`` labels."""
    n_new = max(0, int(n_labels) - int(labels_owned))
    rounds = labeling_rounds(n_new)
    return n_new * float(label_price) + rounds * float(cost_per_round), n_new, rounds
