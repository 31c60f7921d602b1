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
_LINESTYLES = {"random": "-", "representative": "--", "uncertainty": ":"}
_MARKERS = {"random": "o", "representative": "s", "uncertainty": "^"}


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


def curve_figure(
    curves: pd.DataFrame,
    metric: str,
    *,
    target: float | None = None,
    chosen: Mapping | None = None,
    interval: float | None = None,
) -> bytes:
    """Learning curves of one metric: measured means with their intervals, the fitted curve
    with its bootstrap band (dashed where extrapolated), the target line and the choice.

    ``curves`` has the columns of curves.csv (method, strategy, metric, n_labels, mean, low,
    high, measured; optionally extrapolated).
    """
    data = curves[curves["metric"] == metric].copy()
    data["measured"] = _truthy(data["measured"])
    if "extrapolated" in data.columns:
        data["extrapolated"] = _truthy(data["extrapolated"])
    else:
        data["extrapolated"] = False
    fig = Figure(figsize=(8.0, 4.8))
    ax = fig.add_subplot(1, 1, 1)
    methods = sorted(data["method"].astype(str).unique())
    palette = [
        "#1b6ca8", "#d1495b", "#2e933c", "#edae49", "#6c4f9c", "#00798c", "#8c564b",
        "#e377c2", "#7f7f7f", "#bcbd22",
    ]
    colors = {m: palette[i % len(palette)] for i, m in enumerate(methods)}
    for (method, strategy), grp in data.groupby(["method", "strategy"], sort=True):
        color = colors[str(method)]
        ls = _LINESTYLES.get(str(strategy), "-.")
        label = f"{method} ({strategy})"
        fitted = grp[~grp["measured"]].sort_values("n_labels")
        if not fitted.empty:
            inside = fitted[~fitted["extrapolated"]]
            beyond = fitted[fitted["extrapolated"]]
            if not beyond.empty and not inside.empty:
                beyond = pd.concat([inside.iloc[[-1]], beyond])
            ax.fill_between(fitted["n_labels"], fitted["low"], fitted["high"], color=color,
                            alpha=0.15, linewidth=0)
            ax.plot(inside["n_labels"], inside["mean"], color=color, linestyle=ls,
                    linewidth=1.8, label=label)
            ax.plot(beyond["n_labels"], beyond["mean"], color=color, linestyle=ls,
                    linewidth=1.0, alpha=0.7)
            label = None
        meas = grp[grp["measured"]].sort_values("n_labels")
        if not meas.empty:
            yerr = np.vstack([meas["mean"] - meas["low"], meas["high"] - meas["mean"]])
            ax.errorbar(meas["n_labels"], meas["mean"], yerr=np.clip(yerr, 0, None),
                        color=color, marker=_MARKERS.get(str(strategy), "D"), markersize=4,
                        linestyle="none" if label is None else ls, capsize=2, label=label)
    if not data.empty:
        n_meas = data.loc[data["measured"], "n_labels"]
        if not n_meas.empty and data["extrapolated"].any():
            ax.axvspan(float(n_meas.max()), float(data["n_labels"].max()), color="#999999",
                       alpha=0.08, linewidth=0)
            ax.text(float(n_meas.max()), 0.02, " extrapolated", transform=ax.get_xaxis_transform(),
                    fontsize=8, color="#555555", va="bottom")
    if not data.empty:
        # y range from the means and fitted bands (not from very wide measured intervals,
        # which are clipped), so the curves stay readable.
        core = pd.concat([data["mean"], data.loc[~data["measured"], ["low", "high"]].stack()])
        if target is not None:
            core = pd.concat([core, pd.Series([float(target)])])
        lo, hi = float(core.min()), float(core.max())
        pad = max(0.02, 0.08 * (hi - lo))
        ax.set_ylim(max(0.0, lo - pad), min(1.0, hi + pad) + 0.005)
    if target is not None:
        ax.axhline(target, color="#222222", linestyle=(0, (4, 3)), linewidth=1.0,
                   label=f"target {target:g}")
    if chosen is not None:
        pred = chosen.get("predicted") or {}
        if chosen.get("n_labels") and pred.get("mean") is not None:
            ax.plot([chosen["n_labels"]], [pred["mean"]], marker="*", markersize=14,
                    color="#111111", linestyle="none", label="plan", zorder=5)
    ax.set_xscale("log")
    ticks = sorted(set(int(v) for v in data.loc[data["measured"], "n_labels"]))
    if data["extrapolated"].any():
        ticks.append(int(data["n_labels"].max()))
    if len(ticks) > 10:  # thin out, keeping the ends
        keep = np.unique(np.round(np.linspace(0, len(ticks) - 1, 10)).astype(int))
        ticks = [ticks[i] for i in keep]
    if ticks:
        ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("label budget (labeled training rows, log scale)")
    ax.set_ylabel(METRIC_LABELS.get(metric, metric) + " on the holdout")
    title = f"Learning curves: {METRIC_LABELS.get(metric, metric)}"
    if interval:
        title += f" (bands: {interval:.0%} bootstrap intervals)"
    ax.set_title(title, fontsize=11)
    ax.grid(True, which="both", alpha=0.25)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), fontsize=8, frameon=False)
    return _png(fig)
