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
from matplotlib.text import Text
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter, NullLocator

from ..plan import FORECAST_CEILING, METRIC_WORDS
from ..study import truthy

__all__ = [
    "FAMILY_TITLES",
    "METRIC_LABELS",
    "PALETTE",
    "BudgetFacts",
    "Rendered",
    "build_curve_figure",
    "curve_figure",
    "curve_panels",
    "interval_name",
]

METRIC_LABELS = METRIC_WORDS

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


#: Resolution of the PNG figures (pixels per inch): a point of text is DPI / 72 pixels.
DPI = 110
#: Smallest text in a figure, in points (8 pt is 12 PNG pixels at :data:`DPI`).
MIN_TEXT_PT = 8.0
#: Width of one panel drawn on its own (the phone view), in inches: shown about 366 CSS px
#: wide on a 390 px screen, 8 pt text stays above 9 CSS px.
PANEL_WIDTH_IN = 3.6


@dataclass(frozen=True)
class Rendered:
    """One figure in both formats, with the size of its smallest text in PNG pixels."""

    png: bytes
    svg: bytes
    text_px: float = MIN_TEXT_PT * DPI / 72


@dataclass(frozen=True)
class BudgetFacts:
    """Label counts read from study.json / plan.json for the budget axis (None = unknown)."""

    n_holdout: int | None = None
    labels_owned: int | None = None
    currency: str = ""


def interval_name(level: float | None, kind: str, n_repeats: Sequence[int] = (), *,
                  brief: bool = False) -> str:
    """``"95% interval of the measured mean over 5 repeats (Student-t)"`` or ``"90% interval
    of the forecast (bootstrap)"`` (kind ``"continued"``: the plan continued the curves
    beyond the largest measured budget with the corpus prior); ``brief`` gives the short form
    for a table header (``"90% interval"``)."""
    lvl = f"{level:.0%} " if level else ""
    if brief:
        return f"{lvl}interval"
    if kind == "repeat":
        reps = sorted({int(n) for n in n_repeats if n and n > 0})
        over = ("" if not reps else f" over {reps[0]} repeats" if len(reps) == 1
                else f" over {reps[0]}\u2013{reps[-1]} repeats")
        return f"{lvl}interval of the measured mean{over} (Student-t)"
    if kind == "continued":
        return (f"{lvl}interval of the forecast (bootstrap up to the largest measured budget; "
                "beyond it, how real curves continued)")
    return f"{lvl}interval of the forecast (bootstrap)"


def smallest_text_pt(fig: Figure) -> float:
    """The font size (points) of the smallest visible text of ``fig``."""
    sizes = [t.get_fontsize() for t in fig.findobj(Text)
             if t.get_visible() and t.get_text().strip()]
    return float(min(sizes)) if sizes else MIN_TEXT_PT


def _render(fig: Figure) -> Rendered:
    FigureCanvasAgg(fig)
    png = io.BytesIO()
    fig.savefig(png, format="png", dpi=DPI, bbox_inches="tight", metadata={"Software": None})
    FigureCanvasSVG(fig)
    svg = io.BytesIO()
    fig.savefig(svg, format="svg", bbox_inches="tight",
                metadata={"Creator": None, "Date": None, "Format": None, "Type": None})
    return Rendered(png.getvalue(), svg.getvalue(), smallest_text_pt(fig) * DPI / 72)


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
    top = min(hi, FORECAST_CEILING)
    for i, method in enumerate(methods):
        grp = data[data["method"].astype(str) == method]
        style = {"color": PALETTE[i % len(PALETTE)], "marker": _MARKERS[i % len(_MARKERS)]}
        dash = _DASHES[i % len(_DASHES)]
        fitted = grp[~grp["measured"]].sort_values("n_labels")
        if not fitted.empty:
            # Forecasts above the ceiling are not drawn: the line ends there and the band is
            # cut at it (the text says "at least 0.99" for them).
            mean = fitted["mean"].astype(float).to_numpy()
            ax.fill_between(fitted["n_labels"], _clip(fitted["low"], lo, top),
                            _clip(fitted["high"], lo, top), color=style["color"], alpha=0.12,
                            linewidth=0)
            ax.plot(fitted["n_labels"], np.where(mean > FORECAST_CEILING, np.nan,
                                                 np.clip(mean, lo, hi)),
                    color=style["color"], linestyle=dash, linewidth=1.6)
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


def tick_budgets(measured: Sequence[int], right_end: int | None, *,
                 min_gap: float) -> tuple[list[int], list[int]]:
    """Tick positions (every measured budget and the right end) and the ones that get a
    label: the right end, the largest measured budget, then from the largest down every
    budget at least ``min_gap`` (a share of the axis in log scale) from the labelled ones,
    so no two labels overlap and none is dropped for a mere count."""
    ticks = sorted({int(v) for v in measured} | ({int(right_end)} if right_end else set()))
    if not ticks:
        return [], []
    span_log = max(np.log(ticks[-1] / ticks[0]), 1e-9)
    first = [ticks[-1]] + ([max(int(v) for v in measured)] if len(measured) else [])
    labelled: list[int] = []
    for v in [*first, *reversed(ticks)]:
        if v in labelled:
            continue
        if all(abs(np.log(v / u)) / span_log >= min_gap for u in labelled):
            labelled.append(v)
    return ticks, sorted(labelled)


def _budget_axis(ax, data: pd.DataFrame, facts: BudgetFacts, *, top: bool,
                 min_gap: float) -> None:
    ax.set_xscale("log")
    n_meas = data.loc[data["measured"], "n_labels"]
    right = int(data["n_labels"].max()) if data["extrapolated"].any() else None
    ticks, labelled = tick_budgets(list(n_meas), right, min_gap=min_gap)
    if ticks:
        ax.xaxis.set_major_locator(FixedLocator(ticks))
    shown = set(labelled)
    ax.xaxis.set_major_formatter(FuncFormatter(
        lambda v, _: f"{v:,.0f}" if int(round(v)) in shown else ""))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.tick_params(axis="x", labelsize=MIN_TEXT_PT, labelbottom=True)
    if facts.n_holdout and top and ticks:
        # A fixed holdout only: the same positions, counted with the labels kept for
        # evaluation (under cross-fitting no label is kept aside, so there is no such axis).
        sec = ax.secondary_xaxis("top")
        sec.xaxis.set_major_locator(FixedLocator(ticks))
        sec.xaxis.set_minor_locator(NullLocator())
        sec.xaxis.set_major_formatter(FuncFormatter(
            lambda v, _: f"{v + facts.n_holdout:,.0f}" if int(round(v)) in shown else ""))
        sec.tick_params(labelsize=MIN_TEXT_PT, colors="#5b6570")
        sec.set_xlabel(f"all labels: training + {facts.n_holdout:,} of the fixed holdout",
                       fontsize=MIN_TEXT_PT, color="#5b6570")
    ax.grid(True, which="major", alpha=0.25)


def curve_figure(curves: pd.DataFrame, metric: str, **options) -> Rendered:
    """:func:`build_curve_figure` rendered as PNG and SVG (same keyword options)."""
    return _render(build_curve_figure(curves, metric, **options))


def curve_panels(curves: pd.DataFrame, metric: str, **options) -> list[Rendered]:
    """The same panels as :func:`curve_figure`, one narrow figure each (for phone screens)."""
    data = curves[curves["metric"].astype(str) == metric]
    keys = _panel_keys(data, options.get("families"))
    return [_render(build_curve_figure(curves, metric, only=key, **options)) for key in keys]


def _panel_keys(data: pd.DataFrame, families: Mapping[str, str] | None) -> list[tuple]:
    strategies = sorted(data["strategy"].astype(str).unique(),
                        key=lambda x: (x != "random", x)) or [""]
    groups = _families(data["method"].astype(str).unique().tolist(), families or {}) \
        or {"other": []}
    return [(f, st) for f in groups for st in strategies]


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
    only: tuple[str, str] | None = None,
) -> Figure:
    """Learning curves of one metric as small multiples: one panel per method family (and
    one row per selection strategy). Points are measured means with their interval; lines
    are the fitted curves with their band (a grey area where extrapolated); the
    target is a horizontal line, the plan's choice a star (its labels, purchase and cost in
    the panel's legend, below the panel, so nothing covers the data).

    ``curves`` has the columns of curves.csv (method, strategy, metric, n_labels, mean, low,
    high, measured; optionally extrapolated). ``families`` maps method names to their
    family; ``measured_interval`` / ``fitted_interval`` name the intervals in the legend.
    ``chosen_reached=False`` marks ``chosen`` as the best option that misses the target's
    confidence (an open star) instead of the plan's choice. ``only`` = (family, strategy)
    draws that one panel alone, :data:`PANEL_WIDTH_IN` wide (the phone view).
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
    if only is not None:
        panels = [only]
        ncols, nrows = 1, 1
        fig = Figure(figsize=(PANEL_WIDTH_IN, 4.3), layout="constrained")
    else:
        ncols = len(strategies) if len(strategies) > 1 else min(2, len(groups))
        nrows = -(-len(panels) // ncols)
        fig = Figure(figsize=(0.8 + 4.7 * ncols, 1.4 + 3.6 * nrows), layout="constrained")
    axes = fig.subplots(nrows, ncols, sharey=True, sharex=True, squeeze=False).ravel()
    for ax in axes[len(panels):]:
        ax.set_axis_off()
    ylim = _ylim(data, target)
    ok_choice = chosen if chosen and chosen.get("n_labels") and (
        chosen.get("predicted") or {}).get("mean") is not None else None
    label = METRIC_LABELS.get(metric, metric)
    min_gap = 0.1 if only is not None else 0.06
    for i, ((family, strategy), ax) in enumerate(zip(panels, axes, strict=False)):
        methods = groups.get(family, [])
        rows = data[data["strategy"] == strategy]
        _panel(ax, rows, methods, ylim=ylim)
        ax.set_ylim(*ylim)
        _budget_axis(ax, data, facts, top=i < ncols, min_gap=min_gap)
        title = FAMILY_TITLES[family]
        if only is not None:
            title = title.replace(" (", "\n(")
        if len(strategies) > 1:
            title += f"\n{strategy} selection"
        ax.set_title(title, fontsize=9, loc="left")
        if target is not None:
            ax.axhline(target, color=_TARGET, linestyle=(0, (4, 2)), linewidth=1.1)
            ax.text(0.01, target, f" target {target:g}", transform=ax.get_yaxis_transform(),
                    fontsize=MIN_TEXT_PT, color=_TARGET, va="bottom")
        _extrapolated_area(ax, rows)
        if facts.labels_owned:
            ax.axvline(facts.labels_owned, color="#5b6570", linestyle=(0, (1, 2)),
                       linewidth=1.0)
        if ok_choice is not None and str(ok_choice.get("method")) in methods and str(
                ok_choice.get("strategy")) == strategy:
            _mark_choice(ax, ok_choice, facts, reached=chosen_reached)
        handles, names = ax.get_legend_handles_labels()
        if handles:
            ax.legend(handles, names, fontsize=MIN_TEXT_PT, loc="upper center",
                      bbox_to_anchor=(0.5, -0.13 if only is None else -0.16),
                      ncols=1 if only is not None else 2, frameon=False, borderpad=0.2,
                      handlelength=2.6)
        if i % ncols == 0:
            ax.set_ylabel(f"{label} on the evaluation rows", fontsize=9)
        ax.tick_params(axis="y", labelsize=MIN_TEXT_PT)
    owned = (f"; dotted line: the {facts.labels_owned:,} labels owned"
             if facts.labels_owned else "")
    fig.supxlabel("training labels (log scale)" + owned, fontsize=9)
    if only is None:
        notes = []
        if measured_interval:
            notes.append(f"points: measured mean; bars: {measured_interval}")
        if fitted_interval and (~data["measured"]).any():
            notes.append(f"lines: forecast; bands: {fitted_interval}; grey area: "
                         "extrapolated")
        fig.suptitle("\n".join([f"Learning curves: {label}", *notes]), fontsize=9.5)
    return fig


def _extrapolated_area(ax, rows: pd.DataFrame) -> None:
    n_meas = rows.loc[rows["measured"], "n_labels"]
    if n_meas.empty or not rows["extrapolated"].any():
        return
    start, stop = float(n_meas.max()), float(rows["n_labels"].max())
    ax.axvspan(start, stop, color="#8a9099", alpha=0.12, linewidth=0)
    # at the foot of the grey area, away from the target line and the curves' tops
    ax.text(stop, 0.02, "extrapolated ", transform=ax.get_xaxis_transform(),
            fontsize=MIN_TEXT_PT, color="#3d454d", va="bottom", ha="right")


def _mark_choice(ax, chosen: Mapping, facts: BudgetFacts, *, reached: bool = True) -> None:
    """The star; what it stands for (labels, purchase, cost) goes in the legend."""
    pred = chosen.get("predicted") or {}
    n, mean = float(chosen["n_labels"]), float(pred["mean"])
    text = f"{int(n):,} labels"
    n_new = chosen.get("n_new")
    if n_new:
        text += f", buy {int(n_new):,}"
    cost = chosen.get("cost")
    if cost is not None:
        text += f", cost {_money(float(cost), facts.currency)}"
    name = "the plan's choice" if reached else "best option (too unsure)"
    ax.plot([n], [min(mean, FORECAST_CEILING)], marker="*", markersize=15, linestyle="none",
            zorder=6, color="#111111" if reached else "white",
            markeredgecolor="#111111" if not reached else "white",
            markeredgewidth=0.8 if reached else 1.2, label=f"{name}: {text}", clip_on=False)
