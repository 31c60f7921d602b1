"""Do the unlabeled rows help? The best method with a generative stage against the best
supervised-only method, on the study's own draws.

A method "with a generative stage" fits a model of the features on the unlabeled rows (a VAE,
a Gaussian mixture, M2, mixture EM: the registry's families ``latent`` and ``generative``);
a supervised-only method (family ``supervised``) never sees them. Every method of a study is
trained on the same labeled draw and scored on the same evaluation rows in a given repeat, so
at each measured budget the two are compared pair by pair over the repeats: the mean paired
difference and its t-interval (the paired t-test's interval; Student 1908). The methods are
picked as the best of each group by their mean at that budget, which favours both a little
and cancels out in the comparison only in part; the answer is read at the largest measured
budget, where the draws differ least from the final model.

Pure functions; the plan records the result as ``unlabeled_rows`` and the decision lines
print its sentence.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd
from scipy import stats

__all__ = [
    "STAGE_FAMILIES",
    "SUPERVISED_FAMILY",
    "PairedGain",
    "measured_gains",
    "method_families",
    "paired_interval",
    "unlabeled_summary",
]

#: Registry families whose methods fit a model of the features on the unlabeled rows.
STAGE_FAMILIES = ("latent", "generative")
#: The registry family of methods that use the labeled rows only.
SUPERVISED_FAMILY = "supervised"


def method_families() -> dict[str, str]:
    """Every registered method's family (``semisup.methods``' registry)."""
    from ..methods import list_methods

    return {m.name: m.family for m in list_methods()}


def paired_interval(a: np.ndarray, b: np.ndarray, level: float) -> tuple[float, float, float]:
    """Mean of ``a - b`` over the finite pairs and its two-sided t-interval at ``level``:
    ``(mean, low, high)``. Fewer than two pairs give nan bounds (nan mean without pairs);
    pairs that all differ alike give a zero-width interval."""
    d = np.asarray(a, dtype=float) - np.asarray(b, dtype=float)
    d = d[np.isfinite(d)]
    if d.size == 0:
        return float("nan"), float("nan"), float("nan")
    mean = float(d.mean())
    if d.size < 2:
        return mean, float("nan"), float("nan")
    se = float(d.std(ddof=1) / np.sqrt(d.size))
    half = float(stats.t.ppf(0.5 + level / 2, d.size - 1) * se)
    return mean, mean - half, mean + half


@dataclass(frozen=True)
class PairedGain:
    """At one budget: the best method with a generative stage less the best supervised-only
    method, paired over the repeats both finished."""

    n_labels: int
    stage_method: str
    supervised_method: str
    stage_mean: float
    supervised_mean: float
    gain: float
    low: float
    high: float
    n_pairs: int

    @property
    def verdict(self) -> str:
        """"helps" (interval above 0), "hurts" (below 0) or "unclear"."""
        if np.isfinite(self.low) and self.low > 0:
            return "helps"
        if np.isfinite(self.high) and self.high < 0:
            return "hurts"
        return "unclear"

    def to_dict(self) -> dict:
        out = asdict(self)
        out["verdict"] = self.verdict
        return {k: (None if isinstance(v, float) and not np.isfinite(v) else v)
                for k, v in out.items()}


def _best(g: pd.DataFrame, metric: str) -> str:
    means = g.groupby("method")[metric].mean()
    top = means.max()
    # ties: the first name, so the choice does not depend on the cells' order
    return str(sorted(means.index[means == top])[0])


def measured_gains(cells: pd.DataFrame, metric: str, families: Mapping[str, str], *,
                   strategy: str = "random", level: float = 0.9) -> list[PairedGain]:
    """One :class:`PairedGain` per budget at which both groups have finished cells.

    ``cells``: the study's ok cells (method, strategy, n_labels, repeat, ``metric``);
    ``families``: method name -> registry family (methods not in it are left out).
    """
    need = {"method", "n_labels", "repeat", metric}
    if cells.empty or not need <= set(cells.columns):
        return []
    c = cells[cells[metric].notna()]
    if "strategy" in c.columns:
        c = c[c["strategy"] == strategy]
    fam = c["method"].map(lambda m: families.get(str(m), ""))
    stage, sup = c[fam.isin(STAGE_FAMILIES)], c[fam == SUPERVISED_FAMILY]
    out = []
    for n in sorted(set(stage["n_labels"]) & set(sup["n_labels"])):
        s_n, u_n = stage[stage["n_labels"] == n], sup[sup["n_labels"] == n]
        s_m, u_m = _best(s_n, metric), _best(u_n, metric)
        a = s_n[s_n["method"] == s_m].groupby("repeat")[metric].mean()
        b = u_n[u_n["method"] == u_m].groupby("repeat")[metric].mean()
        both = a.index.intersection(b.index)
        if both.size == 0:
            continue
        gain, low, high = paired_interval(a[both].to_numpy(), b[both].to_numpy(), level)
        out.append(PairedGain(int(n), s_m, u_m, float(a.mean()), float(b.mean()), gain, low,
                              high, int(both.size)))
    return out


def unlabeled_summary(gains: list[PairedGain], metric_words: str, level: float) -> dict:
    """What the plan records: every budget's comparison, the answer at the largest budget and
    one sentence for the decision lines ({} when the study has not both kinds of method)."""
    if not gains:
        return {}
    last = gains[-1]
    ahead = [g.n_labels for g in gains if g.verdict == "helps"]
    behind = [g.n_labels for g in gains if g.verdict == "hurts"]
    if np.isfinite(last.low):
        span = (f"; paired over {last.n_pairs} draws, the {level:.0%} interval of the "
                f"difference is {last.low:+.3f} to {last.high:+.3f}")
    else:
        span = " (one paired draw, so no interval)"
    diff = last.stage_mean - last.supervised_mean
    where = "above" if diff >= 0 else "below"
    head = (f"Do the unlabeled rows help? At {last.n_labels:,} labels, the largest measured "
            f"budget, the best method with a generative stage ({last.stage_method}, "
            f"{metric_words} {last.stage_mean:.3f}) is {abs(diff):.3f} {where} the best "
            f"supervised-only method ({last.supervised_method}, {last.supervised_mean:.3f})"
            f"{span}")
    answer = {"helps": "there, the unlabeled rows help",
              "hurts": "there, fitting a model of the unlabeled rows costs accuracy; a "
                       "supervised-only model is the safer choice",
              "unclear": "the study cannot tell whether the unlabeled rows help there"}
    sentence = f"{head}: {answer[last.verdict]}."
    if len(gains) > 1:
        sentence += (f" Across the {len(gains)} measured budgets the stage is clearly ahead "
                     f"at {_budgets(ahead)} and clearly behind at {_budgets(behind)}.")
    return {"metric": metric_words, "interval": level, "verdict": last.verdict,
            "at_largest": last.to_dict(), "by_budget": [g.to_dict() for g in gains],
            "sentence": sentence}


def _budgets(ns: list[int]) -> str:
    if not ns:
        return "none"
    text = [f"{n:,}" for n in ns]
    return text[0] if len(text) == 1 else ", ".join(text[:-1]) + " and " + text[-1]
