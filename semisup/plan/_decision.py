"""The plan in words: the decision lines that the console and the report both show.

Pure: a plan as plan.json's dict in, lines of text out. :func:`decision_lines` gives them in
the order a buyer reads them: the decision with its price, chance and method; what the labels
already owned give; the labels in one short line; why the goal moved since the last plan;
how well this kind of forecast has held up (a sentence the caller passes, when it has one);
the target and the price; the runner-up. ``semisup plan`` prints these lines first and the
report's decision box shows the same lines, so the two never disagree.

Forecasts above :data:`FORECAST_CEILING` are written "at least 0.99": a few hundred evaluated
labels cannot tell 0.995 from 1, and no practitioner believes a forecast of perfect accuracy.
Measured values are written as measured.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

__all__ = [
    "DASH",
    "FORECAST_CEILING",
    "METRIC_WORDS",
    "as_number",
    "decision_lines",
    "forecast_span",
    "forecast_value",
    "money",
    "owned_option",
    "percent",
]

DASH = "\u2013"
#: The highest forecast of a metric the text states as a number (presentation only).
FORECAST_CEILING = 0.99
METRIC_WORDS = {
    "accuracy": "accuracy",
    "balanced_accuracy": "balanced accuracy",
    "macro_f1": "macro-F1",
    "log_loss": "log loss",
}


def as_number(v: object) -> float | None:
    """``v`` as a float; None for None, booleans, text that is not a number and NaN."""
    if isinstance(v, bool) or v is None:
        return None
    try:
        x = float(v)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None
    return None if math.isnan(x) else x


def percent(v: object, digits: int = 0) -> str:
    """A probability or share as a percentage (0.8 -> "80%"; "<1%" and ">99%" at the ends)."""
    x = as_number(v)
    if x is None:
        return DASH
    if digits == 0 and 0 < x < 0.005:
        return "<1%"
    if digits == 0 and 0.995 <= x < 1:
        return ">99%"
    return f"{x:.{digits}%}"


def money(v: object, currency: str = "") -> str:
    """A price with two decimals, after the currency when one is named."""
    x = as_number(v)
    if x is None:
        return DASH
    text = f"{x:,.2f}"
    return f"{currency} {text}" if currency else text


def forecast_value(v: object, *, words: bool = False) -> str:
    """A forecast of a metric: three decimals, or "at least 0.99" (``words``) / "0.99+"
    above :data:`FORECAST_CEILING`."""
    x = as_number(v)
    if x is None:
        return DASH
    if x > FORECAST_CEILING:
        return f"at least {FORECAST_CEILING:.2f}" if words else f"{FORECAST_CEILING:.2f}+"
    return f"{x:.3f}"


def forecast_span(low: object, high: object) -> str:
    """A forecast interval as "0.947\u20130.981"; an upper end above the ceiling reads
    "0.975 or more" (and an interval wholly above it "at least 0.99")."""
    lo, hi = as_number(low), as_number(high)
    if lo is None and hi is None:
        return DASH
    if lo is not None and lo > FORECAST_CEILING:
        return f"at least {FORECAST_CEILING:.2f}"
    if hi is not None and hi > FORECAST_CEILING:
        return f"{forecast_value(lo)} or more"
    return f"{forecast_value(lo)}{DASH}{forecast_value(hi)}"


def owned_option(options: Sequence[Mapping]) -> Mapping | None:
    """What the labels already owned give: of the options that buy nothing, at the largest
    such budget (the final model trains on every label owned), the one most likely to meet
    the target (then the highest predicted metric); None if there is none. A smaller free
    budget that happens to forecast higher is the noise of its own cells, not advice to
    train on fewer labels."""
    free = [o for o in options if isinstance(o, Mapping) and not o.get("n_new")]
    if not free:
        return None
    top = max(as_number(o.get("n_labels")) or 0.0 for o in free)
    free = [o for o in free if (as_number(o.get("n_labels")) or 0.0) == top]
    return max(free, key=lambda o: (as_number(o.get("probability")) or 0.0,
                                    as_number((o.get("predicted") or {}).get("mean")) or 0.0,
                                    -(as_number(o.get("n_labels")) or 0.0)))


def _count(v: object) -> str:
    x = as_number(v)
    return DASH if x is None else f"{round(x):,}"


def _outcome(o: Mapping, metric: str, interval: str, goal: str) -> str:
    """"latent-logreg (random selection) on 300 labels: predicted accuracy 0.981 (90%
    interval 0.962-0.993), a 81% chance of reaching 0.96"."""
    p = o.get("predicted") or {}
    extra = ", extrapolated" if o.get("extrapolated") else ""
    return (f"{o.get('method')} ({o.get('strategy')} selection) on {_count(o.get('n_labels'))} "
            f"labels: predicted {metric} {forecast_value(p.get('mean'), words=True)} "
            f"({interval} {forecast_span(p.get('low'), p.get('high'))}{extra}), "
            f"{_chance(o.get('probability'))} of reaching {goal}")


def _chance(p: object) -> str:
    """"an 81% chance", "a 40% chance": the article as the number is read aloud."""
    text = percent(p)
    vowel = text.startswith(("8", "11%", "18%"))
    return f"{'an' if vowel else 'a'} {text} chance"


def _rounds(n: object) -> str:
    k = int(as_number(n) or 0)
    return f" in {k} labeling rounds" if k > 1 else ""


def decision_lines(plan: Mapping, *, currency: str = "",
                   track_sentence: str | None = None) -> list[str]:
    """The plan's headline, in reading order (see the module docstring).

    Parameters
    ----------
    plan : a plan as plan.json holds it (``Plan.to_dict()``).
    currency : written before every price (e.g. "EUR"); none by default.
    track_sentence : one sentence on how well this kind of forecast has held up; printed
        after the labels (and why the goal moved) and before the target. None: the plan's
        own ``track_sentence`` key, when plan.json has one (so the console and the report
        both show it once the plan records it).

    Returns
    -------
    list of str, the first always starting "Decision:".
    """
    target = plan.get("target") or {}
    metric = METRIC_WORDS.get(str(target.get("metric")), str(target.get("metric", "metric")))
    value = as_number(target.get("value"))
    goal = f"{metric} {value:g}" if value is not None else metric
    level = as_number(plan.get("interval"))
    interval = f"{level:.0%} interval" if level else "interval"
    chosen = plan.get("chosen")
    lines: list[str] = []
    if chosen:
        n_new = int(as_number(chosen.get("n_new")) or 0)
        if n_new > 0:
            lines.append(f"Decision: buy {n_new:,} labels{_rounds(chosen.get('rounds'))} for "
                         f"{money(chosen.get('cost'), currency)} and train "
                         f"{_outcome(chosen, metric, interval, goal)}.")
        else:
            lines.append("Decision: buy no labels; the labels you own are enough. Train "
                         f"{_outcome(chosen, metric, interval, goal)}.")
    else:
        best = plan.get("best")
        limit = as_number(plan.get("max_extrapolation"))
        within = f" within {limit:g}x the largest measured budget" if limit else ""
        lines.append(f"Decision: do not buy labels. No method reaches {goal} with "
                     f"{_chance(plan.get('confidence'))}{within}"
                     + (f"; the best is {_outcome(best, metric, interval, goal)}"
                        + (f" (buy {_count(best.get('n_new'))} for "
                           f"{money(best.get('cost'), currency)})" if best.get("n_new")
                           else "") if best else "") + ".")
    owned = owned_option(list(plan.get("options") or []))
    if owned is not None and not (chosen and not chosen.get("n_new")):
        lines.append(f"With the labels you own: {_outcome(owned, metric, interval, goal)}.")
    labels = plan.get("labels") or {}
    if labels.get("text"):
        lines.append(str(labels["text"]))
    elif plan.get("labels_owned") is not None:
        lines.append(f"You own {_count(plan.get('labels_owned'))} training labels.")
    moved = _moved(plan.get("previous_plan"), metric)
    if moved:
        lines.append(moved)
    if track_sentence is None:
        track_sentence = plan.get("track_sentence")
    if track_sentence:
        lines.append(str(track_sentence).strip())
    price = plan.get("cost_per_label")
    per_label = (f"an average of {money(plan.get('expected_price_per_label'), currency)} per "
                 "label (the class prices weighted by the labeled classes)"
                 if plan.get("class_costs") else f"{money(price, currency)} per label")
    per_round = (f" and {money(plan.get('cost_per_round'), currency)} per labeling round"
                 if as_number(plan.get("cost_per_round")) else "")
    lines.append(f"Target: {goal} or more with a chance of at least "
                 f"{percent(plan.get('confidence'))}; price {per_label}{per_round}.")
    if chosen:
        runner = plan.get("runner_up")
        lines.append(f"Runner-up: {_outcome(runner, metric, interval, goal)}, cost "
                     f"{money(runner.get('cost'), currency)}." if runner else
                     "Runner-up: none (no other method and strategy is sure enough).")
    unlabeled = plan.get("unlabeled_rows") or {}
    if unlabeled.get("sentence"):
        lines.append(str(unlabeled["sentence"]))
    return lines


def _moved(previous: object, metric: str) -> str:
    """"Since the last plan: it expected 0.981 at 300 labels; ..." (why the goal moved)."""
    if not isinstance(previous, Mapping) or as_number(previous.get("expected")) is None:
        return ""
    what = (f"{previous.get('method')} ({previous.get('strategy')} selection) at "
            f"{_count(previous.get('n_labels'))} labels")
    text = (f"Since the last plan: it expected {metric} "
            f"{forecast_value(previous.get('expected'), words=True)} for {what}")
    now = as_number(previous.get("now"))
    if now is None:
        return text + "; the new measurements no longer forecast that budget."
    chance = as_number(previous.get("probability"))
    return (text + f"; the new measurements give {forecast_value(now, words=True)} there"
            + (f" ({_chance(chance)} of reaching the target)" if chance is not None
               else "") + ".")
