"""Figures of the report (matplotlib, Agg backend, no global pyplot state).

Each function takes tables the study or the plan already computed and returns the figure as
PNG (for the report) and SVG (beside it); nothing here computes a new statistic. Colours,
markers and dash patterns are our own: every method in a panel differs in hue, lightness,
marker and dash, so panels stay readable in grey scale and for the common colour-vision
deficiencies (``tests/test_report_figures.py`` checks the palette with a simulation).
"""

from __future__ import annotations

import io
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter, NullLocator

from ..study._folder import truthy

__all__ = [
    "FAMILY_TITLES",
    "METRIC_LABELS",
    "PALETTE",
    "BudgetFacts",
    "Rendered",
    "build_curve_figure",
    "curve_figure",
    "interval_name",
]

METRIC_LABELS = {
    "accuracy": "accuracy",
    "balanced_accuracy": "balanced accuracy",
    "macro_f1": "macro-F1",
    "log_loss": "log loss",
}

#: Panel titles per method family (``MethodSpec.family``), in panel order.
FAMILY_TITLES = {
    "supervised": "Supervised baselines (labeled rows only)",
    "classic-ssl": "Classic semi-supervised",
    "generative": "Generative (mixture EM)",
    "latent": "On the unsupervised representation (VAE / mixture)",
    "other": "Other methods",
}

#: Method colours, in the order they are given within a panel: lightness steps from dark to
#: light and hues on the blue-orange axis, which red-green colour-vision deficiencies keep.
PALETTE = ("#0f2557", "#c2410c", "#4a90d9", "#8b3a8f", "#d9a21b", "#9ad0c2")
_MARKERS = ("o", "s", "^", "D", "v", "P")
_DASHES = ("-", (0, (5, 2)), (0, (1.5, 1.5)), (0, (6, 2, 1.5, 2)), (0, (3, 3)), (0, (8, 3)))
_INK = "#1d2329"
_TARGET = "#6b1f1f"


@dataclass(frozen=True)
class Rendered:
    """One figure in both formats."""

    png: bytes
    svg: bytes


@dataclass(frozen=True)
class BudgetFacts:
    """Label counts read from study.json / plan.json for the budget axis (None = unknown)."""

    n_holdout: int | None = None
    labels_owned: int | None = None
    currency: str = ""


def interval_name(level: float | None, kind: str, n_repeats: Sequence[int] = (), *,
                  brief: bool = False) -> str:
    """``"90% Student-t interval of the mean over 5 repeats"`` and the like; ``brief`` gives
    the short form for a table header (``"90% Student-t interval"``)."""
    lvl = f"{level:.0%} " if level else ""
    if brief:
        return f"{lvl}{'Student-t' if kind == 'repeat' else 'bootstrap'} interval"
    if kind == "repeat":
        reps = sorted({int(n) for n in n_repeats if n and n > 0})
        over = ("" if not reps else f" over {reps[0]} repeats" if len(reps) == 1
                else f" over {reps[0]}-{reps[-1]} repeats")
        return f"{lvl}Student-t interval of the mean{over}"
    return f"{lvl}bootstrap interval of the fitted curve"


def _render(fig: Figure) -> Rendered:
    FigureCanvasAgg(fig)
    png = io.BytesIO()
    fig.savefig(png, format="png", dpi=110, bbox_inches="tight", metadata={"Software": None})
    FigureCanvasSVG(fig)
    svg = io.BytesIO()
    fig.savefig(svg, format="svg", bbox_inches="tight",
                metadata={"Creator": None, "Date": None, "Format": None, "Type": None})
    return Rendered(png.getvalue(), svg.getvalue())


def _families(methods: Sequence[str], families: Mapping[str, str]) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for m in sorted(methods):
        fam = families.get(m, "other")
        out.setdefault(fam if fam in FAMILY_TITLES else "other", []).append(m)
    order = list(FAMILY_TITLES)
    return {f: out[f] for f in sorted(out, key=order.index)}


def _money(value: float, currency: str) -> str:
    text = f"{value:,.2f}"
    return f"{currency} {text}".strip() if currency else text


def _clip(values: pd.Series, lo: float, hi: float) -> np.ndarray:
    return np.clip(values.astype(float).to_numpy(), lo, hi)


def _panel(ax, data: pd.DataFrame, methods: list[str], *, ylim: tuple[float, float]) -> None:
    lo, hi = ylim
    for i, method in enumerate(methods):
        grp = data[data["method"].astype(str) == method]
        style = {"color": PALETTE[i % len(PALETTE)], "marker": _MARKERS[i % len(_MARKERS)]}
        dash = _DASHES[i % len(_DASHES)]
        fitted = grp[~grp["measured"]].sort_values("n_labels")
        if not fitted.empty:
            ax.fill_between(fitted["n_labels"], _clip(fitted["low"], lo, hi),
                            _clip(fitted["high"], lo, hi), color=style["color"], alpha=0.12,
                            linewidth=0)
            ax.plot(fitted["n_labels"], _clip(fitted["mean"], lo, hi), color=style["color"],
                    linestyle=dash, linewidth=1.6)
        meas = grp[grp["measured"]].sort_values("n_labels")
        if not meas.empty:
            mean = meas["mean"].astype(float).to_numpy()
            low, high = _clip(meas["low"], lo, hi), _clip(meas["high"], lo, hi)
            yerr = np.vstack([np.clip(mean - low, 0, None), np.clip(high - mean, 0, None)])
            ax.errorbar(meas["n_labels"], mean, yerr=yerr, linestyle="none" if not
                        fitted.empty else dash, markersize=5, capsize=2.5, elinewidth=1.0,
                        markeredgecolor="white", markeredgewidth=0.6, label=method, **style)
            # An interval cut by the axes ends in an open triangle at the edge.
            for edge, cut, marker in ((lo, meas["low"].astype(float) < lo - 1e-12, "v"),
                                      (hi, meas["high"].astype(float) > hi + 1e-12, "^")):
                if cut.any():
                    ax.plot(meas.loc[cut, "n_labels"], np.full(int(cut.sum()), edge),
                            linestyle="none", marker=marker, markersize=5, clip_on=False,
                            markerfacecolor="white", markeredgecolor=style["color"])
        elif not fitted.empty:
            ax.plot([], [], linestyle=dash, label=method, **style)


def _ylim(data: pd.DataFrame, target: float | None) -> tuple[float, float]:
    core = data["mean"].astype(float)
    if target is not None:
        core = pd.concat([core, pd.Series([float(target)])])
    if core.empty:
        return 0.0, 1.0
    lo, hi = float(core.min()), float(core.max())
    pad = max(0.03, 0.12 * (hi - lo))
    return max(0.0, lo - pad), min(1.0, hi + pad) + 0.005


def _budget_axis(ax, data: pd.DataFrame, facts: BudgetFacts, *, top: bool) -> None:
    ax.set_xscale("log")
    n_meas = data.loc[data["measured"], "n_labels"]
    ticks = sorted({int(v) for v in n_meas})
    if data["extrapolated"].any():
        ticks.append(int(data["n_labels"].max()))
    ticks = sorted(set(ticks))
    if len(ticks) > 7:  # thin out, keeping the ends
        keep = np.unique(np.round(np.linspace(0, len(ticks) - 1, 7)).astype(int))
        ticks = [ticks[i] for i in keep]
    if ticks:
        ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:,.0f}"))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.tick_params(axis="x", labelsize=8, labelbottom=True)
    if facts.n_holdout and top and ticks:
        # The same positions, counted with the labels kept for evaluation.
        sec = ax.secondary_xaxis("top")
        sec.xaxis.set_major_locator(FixedLocator(ticks))
        sec.xaxis.set_minor_locator(NullLocator())
        sec.xaxis.set_major_formatter(
            FuncFormatter(lambda v, _: f"{v + facts.n_holdout:,.0f}"))
        sec.tick_params(labelsize=7, colors="#5b6570")
        sec.set_xlabel(f"all labels: training + {facts.n_holdout:,} kept for evaluation",
                       fontsize=7.5, color="#5b6570")
    ax.grid(True, which="major", alpha=0.25)


def curve_figure(curves: pd.DataFrame, metric: str, **options) -> Rendered:
    """:func:`build_curve_figure` rendered as PNG and SVG (same keyword options)."""
    return _render(build_curve_figure(curves, metric, **options))


def build_curve_figure(
    curves: pd.DataFrame,
    metric: str,
    *,
    target: float | None = None,
    chosen: Mapping | None = None,
    families: Mapping[str, str] | None = None,
    facts: BudgetFacts | None = None,
    measured_interval: str = "",
    fitted_interval: str = "",
    chosen_reached: bool = True,
) -> Figure:
    """Learning curves of one metric as small multiples: one panel per method family (and
    one row per selection strategy). Points are measured means with their interval; lines
    are the fitted curves with their band (a grey area where extrapolated); the
    target is a horizontal line, the plan's choice a star with the labels to buy.

    ``curves`` has the columns of curves.csv (method, strategy, metric, n_labels, mean, low,
    high, measured; optionally extrapolated). ``families`` maps method names to their
    family; ``measured_interval`` / ``fitted_interval`` name the intervals in the legend.
    ``chosen_reached=False`` marks ``chosen`` as the best option that misses the target's
    confidence (an open star) instead of the plan's choice.
    """
    facts = facts or BudgetFacts()
    data = curves[curves["metric"].astype(str) == metric].copy()
    data["measured"] = truthy(data["measured"])
    data["extrapolated"] = (truthy(data["extrapolated"]) if "extrapolated" in data.columns
                            else False)
    data["strategy"] = data["strategy"].astype(str)
    strategies = sorted(data["strategy"].unique(), key=lambda x: (x != "random", x)) or [""]
    groups = _families(data["method"].astype(str).unique().tolist(), families or {})
    if not groups:
        groups = {"other": []}
    # Panels: one per (family, strategy); strategies side by side, families down the page
    # (with one strategy, families wrap into two columns).
    panels = [(f, st) for f in groups for st in strategies]
    ncols = len(strategies) if len(strategies) > 1 else min(2, len(groups))
    nrows = -(-len(panels) // ncols)
    fig = Figure(figsize=(0.8 + 4.7 * ncols, 1.2 + 3.1 * nrows), layout="constrained")
    axes = fig.subplots(nrows, ncols, sharey=True, sharex=True, squeeze=False).ravel()
    for ax in axes[len(panels):]:
        ax.set_axis_off()
    ylim = _ylim(data, target)
    ok_choice = chosen if chosen and chosen.get("n_labels") and (
        chosen.get("predicted") or {}).get("mean") is not None else None
    label = METRIC_LABELS.get(metric, metric)
    for i, ((family, strategy), ax) in enumerate(zip(panels, axes, strict=False)):
        methods = groups[family]
        rows = data[data["strategy"] == strategy]
        _panel(ax, rows, methods, ylim=ylim)
        ax.set_ylim(*ylim)
        _budget_axis(ax, data, facts, top=i < ncols)
        title = FAMILY_TITLES[family]
        if len(strategies) > 1:
            title += f"\n{strategy} selection"
        ax.set_title(title, fontsize=9, loc="left")
        if target is not None:
            ax.axhline(target, color=_TARGET, linestyle=(0, (4, 2)), linewidth=1.1)
            ax.text(0.01, target, f" target {target:g}", transform=ax.get_yaxis_transform(),
                    fontsize=7.5, color=_TARGET, va="bottom")
        _extrapolated_area(ax, rows)
        if facts.labels_owned:
            ax.axvline(facts.labels_owned, color="#5b6570", linestyle=(0, (1, 2)),
                       linewidth=1.0)
            ax.text(facts.labels_owned, 0.99, f" owned {facts.labels_owned:,}",
                    transform=ax.get_xaxis_transform(), fontsize=7, color="#3d454d",
                    va="top", ha="left")
        if ok_choice is not None and str(ok_choice.get("method")) in methods and str(
                ok_choice.get("strategy")) == strategy:
            _mark_choice(ax, ok_choice, facts, reached=chosen_reached)
        handles, names = ax.get_legend_handles_labels()
        if handles:
            ax.legend(handles, names, fontsize=7.5, loc="lower right", frameon=True,
                      framealpha=0.85, borderpad=0.3, handlelength=2.6)
        if i % ncols == 0:
            ax.set_ylabel(f"{label} on the evaluation rows", fontsize=9)
        ax.tick_params(axis="y", labelsize=8)
    fig.supxlabel("training labels (log scale)" + (
        f"; dotted vertical line: the {facts.labels_owned:,} labels owned"
        if facts.labels_owned else ""), fontsize=9)
    notes = []
    if measured_interval:
        notes.append(f"points: measured mean; bars: {measured_interval}")
    if fitted_interval and (~data["measured"]).any():
        notes.append(f"lines: fitted curve; bands: {fitted_interval}; grey area: extrapolated")
    fig.suptitle("\n".join([f"Learning curves: {label}", *notes]), fontsize=9.5)
    return fig


def _extrapolated_area(ax, rows: pd.DataFrame) -> None:
    n_meas = rows.loc[rows["measured"], "n_labels"]
    if n_meas.empty or not rows["extrapolated"].any():
        return
    start, stop = float(n_meas.max()), float(rows["n_labels"].max())
    ax.axvspan(start, stop, color="#8a9099", alpha=0.12, linewidth=0)
    ax.text(stop, 0.91, "extrapolated ", transform=ax.get_xaxis_transform(), fontsize=7,
            color="#3d454d", va="top", ha="right")


def _mark_choice(ax, chosen: Mapping, facts: BudgetFacts, *, reached: bool = True) -> None:
    pred = chosen.get("predicted") or {}
    n, mean = float(chosen["n_labels"]), float(pred["mean"])
    ax.plot([n], [mean], marker="*", markersize=15, linestyle="none", zorder=6,
            color="#111111" if reached else "white", markeredgecolor="#111111" if not reached
            else "white", markeredgewidth=0.8 if reached else 1.2,
            label="the plan's choice" if reached else "best option (too unsure)", clip_on=False)
    n_new = chosen.get("n_new")
    text = f"{int(n):,} labels"
    if n_new:
        text += f"\n(buy {int(n_new):,})"
    cost = chosen.get("cost")
    if cost is not None:
        text += f"\ncost {_money(float(cost), facts.currency)}"
    ax.annotate(text, (n, mean), xytext=(-8, -10), textcoords="offset points", ha="right",
                va="top", fontsize=7.5, color="#111111",
                bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "#999999", "lw": 0.5})
