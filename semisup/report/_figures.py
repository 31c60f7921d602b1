"""Figures of the report (matplotlib, Agg backend, no global pyplot state).

Each function takes tables already computed by the study or the plan and returns PNG bytes;
nothing here computes new numbers.
"""

from __future__ import annotations

import io
from collections.abc import Mapping

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

__all__ = ["METRIC_LABELS", "curve_figure"]

METRIC_LABELS = {
    "accuracy": "accuracy",
    "balanced_accuracy": "balanced accuracy",
    "macro_f1": "macro-F1",
}


def _png(fig: Figure) -> bytes:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight",
                metadata={"Software": None})
    return buf.getvalue()


def _truthy(series: pd.Series) -> pd.Series:
    if series.dtype == bool:
        return series
    return series.astype(str).str.strip().str.lower().isin(("true", "1", "yes"))


_PALETTE = (
    # The first six (the default study's methods) differ in hue, not only in shade.
    "#1b6ca8", "#d1495b", "#2e933c", "#edae49", "#6c4f9c", "#8c564b", "#e377c2",
    "#00798c", "#7f7f7f", "#bcbd22",
)


def _panel(ax, data: pd.DataFrame, colors: Mapping[str, str], *, target, chosen,
           show_labels: bool) -> None:
    for method, grp in data.groupby("method", sort=True):
        color = colors[str(method)]
        label = str(method) if show_labels else None
        fitted = grp[~grp["measured"]].sort_values("n_labels")
        if not fitted.empty:
            inside = fitted[~fitted["extrapolated"]]
            beyond = fitted[fitted["extrapolated"]]
            if not beyond.empty and not inside.empty:
                beyond = pd.concat([inside.iloc[[-1]], beyond])
            ax.fill_between(fitted["n_labels"], fitted["low"], fitted["high"], color=color,
                            alpha=0.13, linewidth=0)
            ax.plot(inside["n_labels"], inside["mean"], color=color, linewidth=1.8,
                    label=label)
            ax.plot(beyond["n_labels"], beyond["mean"], color=color, linewidth=1.0,
                    linestyle="--", alpha=0.8)
            label = None
        meas = grp[grp["measured"]].sort_values("n_labels")
        if not meas.empty:
            yerr = np.vstack([meas["mean"] - meas["low"], meas["high"] - meas["mean"]])
            ax.errorbar(meas["n_labels"], meas["mean"], yerr=np.clip(yerr, 0, None),
                        color=color, marker="o", markersize=4, capsize=2, elinewidth=0.9,
                        linestyle="none" if label is None else "-", label=label)
    n_meas = data.loc[data["measured"], "n_labels"]
    if not n_meas.empty and data["extrapolated"].any():
        ax.axvspan(float(n_meas.max()), float(data["n_labels"].max()), color="#999999",
                   alpha=0.08, linewidth=0)
        ax.text(float(n_meas.max()), 0.02, " extrapolated", transform=ax.get_xaxis_transform(),
                fontsize=8, color="#555555", va="bottom")
    if target is not None:
        ax.axhline(target, color="#222222", linestyle=(0, (4, 3)), linewidth=1.0,
                   label=f"target {target:g}" if show_labels else None)
    if chosen is not None:
        pred = chosen.get("predicted") or {}
        ax.plot([chosen["n_labels"]], [pred["mean"]], marker="*", markersize=14,
                color="#111111", linestyle="none", zorder=5,
                label="the plan's choice" if show_labels else None)
    ax.set_xscale("log")
    ticks = sorted({int(v) for v in n_meas})
    if data["extrapolated"].any():
        ticks.append(int(data["n_labels"].max()))
    if len(ticks) > 8:  # thin out, keeping the ends
        keep = np.unique(np.round(np.linspace(0, len(ticks) - 1, 8)).astype(int))
        ticks = [ticks[i] for i in keep]
    if ticks:
        ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.grid(True, which="both", alpha=0.25)


def curve_figure(
    curves: pd.DataFrame,
    metric: str,
    *,
    target: float | None = None,
    chosen: Mapping | None = None,
    interval: float | None = None,
) -> bytes:
    """Learning curves of one metric, one panel per selection strategy: measured means with
    their intervals, the fitted curve with its bootstrap band (dashed where extrapolated), the
    target line and the plan's choice.

    ``curves`` has the columns of curves.csv (method, strategy, metric, n_labels, mean, low,
    high, measured; optionally extrapolated).
    """
    data = curves[curves["metric"] == metric].copy()
    data["measured"] = _truthy(data["measured"])
    if "extrapolated" in data.columns:
        data["extrapolated"] = _truthy(data["extrapolated"])
    else:
        data["extrapolated"] = False
    data["strategy"] = data["strategy"].astype(str)
    strategies = sorted(data["strategy"].unique(), key=lambda x: (x != "random", x)) or [""]
    methods = sorted(data["method"].astype(str).unique())
    colors = {m: _PALETTE[i % len(_PALETTE)] for i, m in enumerate(methods)}
    ncols = len(strategies)
    fig = Figure(figsize=(2.0 + 4.6 * ncols, 4.6))
    axes = fig.subplots(1, ncols, sharey=True, squeeze=False)[0]
    ok_choice = chosen if chosen and chosen.get("n_labels") and (
        chosen.get("predicted") or {}).get("mean") is not None else None
    for i, (ax, strategy) in enumerate(zip(axes, strategies, strict=True)):
        part = data[data["strategy"] == strategy]
        here = ok_choice if ok_choice and str(ok_choice.get("strategy")) == strategy else None
        _panel(ax, part, colors, target=target, chosen=here, show_labels=(i == 0))
        if ncols > 1:
            ax.set_title(f"{strategy} selection", fontsize=10)
        ax.set_xlabel("label budget (log scale)")
    if ok_choice is not None and str(ok_choice.get("strategy")) != strategies[0]:
        axes[0].plot([], [], marker="*", markersize=12, color="#111111", linestyle="none",
                     label="the plan's choice")
    axes[0].set_ylabel(METRIC_LABELS.get(metric, metric) + " on the holdout")
    if not data.empty:
        # y range from the means and the target; wide intervals are clipped at the edge so
        # the curves stay readable.
        core = data["mean"].astype(float)
        if target is not None:
            core = pd.concat([core, pd.Series([float(target)])])
        lo, hi = float(core.min()), float(core.max())
        pad = max(0.03, 0.12 * (hi - lo))
        axes[0].set_ylim(max(0.0, lo - pad), min(1.0, hi + pad) + 0.005)
    title = f"Learning curves: {METRIC_LABELS.get(metric, metric)}"
    if interval:
        title += f" (bands: {interval:.0%} bootstrap intervals; dashed: extrapolated)"
    fig.suptitle(title, fontsize=11)
    handles, labels = axes[0].get_legend_handles_labels()
    if handles:
        fig.legend(handles, labels, loc="center left", bbox_to_anchor=(1.0, 0.5), fontsize=8,
                   frameon=False)
    fig.tight_layout()
    return _png(fig)
