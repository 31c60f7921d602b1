"""Learning-curve figures: small multiples per method family, the choice, the target, the
interval names, clipped bars, the budget axis; a palette that survives colour-vision
deficiencies and grey scale."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_rgb

from semisup.report import PALETTE, BudgetFacts, curve_figure
from semisup.report._figures import build_curve_figure, interval_name

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def _curves(repeats: int = 5) -> pd.DataFrame:
    rows = []
    for method, base in (("supervised-logreg", 0.60), ("supervised-svm", 0.62),
                         ("latent-logreg", 0.70), ("label-spreading", 0.66)):
        for n in (20, 40, 80):
            mean = base + 0.05 * np.log2(n / 20)
            # A wide interval at the smallest budget: runs past the axes and must be cut.
            half = 0.6 if n == 20 else 0.02
            rows.append({"method": method, "strategy": "random", "metric": "accuracy",
                         "n_labels": n, "mean": mean, "low": mean - half, "high": mean + half,
                         "measured": True, "extrapolated": False, "n_repeats": repeats})
        for n in (20, 40, 80, 160):
            mean = base + 0.05 * np.log2(n / 20)
            rows.append({"method": method, "strategy": "random", "metric": "accuracy",
                         "n_labels": n, "mean": mean, "low": mean - 0.03,
                         "high": mean + 0.03, "measured": False, "extrapolated": n > 80,
                         "n_repeats": 0})
    return pd.DataFrame(rows)


FAMILIES = {"supervised-logreg": "supervised", "supervised-svm": "supervised",
            "latent-logreg": "latent", "label-spreading": "classic-ssl"}
CHOSEN = {"method": "latent-logreg", "strategy": "random", "n_labels": 120, "n_new": 70,
          "predicted": {"mean": 0.83, "low": 0.8, "high": 0.86}, "cost": 140.0}


@pytest.fixture(scope="module")
def figure():
    fig = build_curve_figure(
        _curves(), "accuracy", target=0.8, chosen=CHOSEN, families=FAMILIES,
        facts=BudgetFacts(n_holdout=300, labels_owned=50, currency="EUR"),
        measured_interval=interval_name(0.9, "repeat", [5]),
        fitted_interval=interval_name(0.9, "bootstrap"))
    return fig


def _panels(fig):
    return [ax for ax in fig.axes if ax.get_title(loc="left")]


def _texts(fig) -> str:
    out = [fig._suptitle.get_text() if fig._suptitle else ""]
    for ax in [*fig.axes, *(c for a in fig.axes for c in a.child_axes)]:
        out.extend(t.get_text() for t in ax.texts)
        out.append(ax.get_title(loc="left") if hasattr(ax, "get_title") else "")
        out.append(ax.xaxis.get_label().get_text())
        out.extend(t.get_text() for t in ax.get_xticklabels())
        leg = ax.get_legend()
        if leg is not None:
            out.extend(t.get_text() for t in leg.get_texts())
    if fig._supxlabel is not None:
        out.append(fig._supxlabel.get_text())
    return "\n".join(out)


def test_one_panel_per_method_family(figure):
    titles = [ax.get_title(loc="left") for ax in _panels(figure)]
    assert len(titles) == 3
    assert titles[0].startswith("Supervised baselines")
    assert any("Classic semi-supervised" in t for t in titles)
    assert any("unsupervised representation" in t for t in titles)


def test_the_choice_target_and_intervals_are_shown_and_named(figure):
    panels = _panels(figure)
    stars = [(ax.get_title(loc="left"), line) for ax in panels for line in ax.get_lines()
             if line.get_marker() == "*"]
    assert len(stars) == 1 and "unsupervised representation" in stars[0][0]
    assert list(stars[0][1].get_xdata()) == [120] and list(stars[0][1].get_ydata()) == [0.83]
    for ax in panels:  # the target line in every panel
        assert any(list(line.get_ydata()) == [0.8, 0.8] for line in ax.get_lines())
    text = _texts(figure)
    assert "90% interval of the measured mean over 5 repeats (Student-t)" in text
    assert "90% interval of the forecast (bootstrap)" in text
    assert "target 0.8" in text and "buy 70" in text and "cost EUR 140.00" in text
    # the choice's labels, purchase and cost are in the legend, below the data
    assert "the plan's choice: 120 labels, buy 70, cost EUR 140.00" in text


def test_the_budget_axis_counts_evaluation_and_owned_labels(figure):
    text = _texts(figure)
    assert "all labels: training + 300 of the fixed holdout" in text
    assert "dotted line: the 50 labels owned" in text and "training labels (log scale)" in text
    top = [c for ax in _panels(figure) for c in ax.child_axes]
    assert top, "no secondary axis with the total label count"
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(figure).draw()
    labels = {t.get_text() for t in top[0].get_xticklabels()}
    assert {"320", "340", "380"} <= labels  # 20, 40, 80 training labels + 300


def test_no_secondary_axis_without_a_holdout():
    fig = build_curve_figure(_curves(), "accuracy", families=FAMILIES,
                             facts=BudgetFacts(n_holdout=None, labels_owned=50))
    assert not [c for ax in _panels(fig) for c in ax.child_axes]
    assert "kept for evaluation" not in _texts(fig) and "holdout" not in _texts(fig)


def test_tick_labels_never_collide_and_keep_the_ends():
    from semisup.report._figures import tick_budgets

    ticks, labelled = tick_budgets([20, 32, 50, 80, 126, 200, 261], 1044, min_gap=0.06)
    assert ticks == [20, 32, 50, 80, 126, 200, 261, 1044]
    assert {20, 80, 261, 1044} <= set(labelled)  # 80 kept: nothing crowds it
    logs = np.log(labelled)
    assert np.diff(logs).min() / (logs[-1] - logs[0]) >= 0.06


def test_forecasts_above_the_ceiling_are_not_drawn():
    from semisup.plan import FORECAST_CEILING

    curves = _curves()
    curves.loc[~curves["measured"], ["mean", "high"]] = 1.0
    fig = build_curve_figure(curves, "accuracy", families=FAMILIES)
    for ax in _panels(fig):
        for line in ax.get_lines():
            y = np.asarray(line.get_ydata(), dtype=float)
            assert not (y[np.isfinite(y)] > FORECAST_CEILING + 1e-9).any() or \
                line.get_linestyle() == "None"


def test_error_bars_stay_inside_the_axes(figure):
    for ax in _panels(figure):
        lo, hi = ax.get_ylim()
        for coll in ax.collections:
            for seg in getattr(coll, "get_segments", lambda: [])():
                ys = np.asarray(seg)[:, 1]
                assert ys.min() >= lo - 1e-9 and ys.max() <= hi + 1e-9


def test_rendered_as_png_and_svg():
    out = curve_figure(_curves(), "accuracy", families=FAMILIES)
    assert out.png.startswith(PNG_MAGIC)
    assert out.svg.lstrip().startswith(b"<?xml") and b"<svg" in out.svg
    width, height = int.from_bytes(out.png[16:20], "big"), int.from_bytes(out.png[20:24], "big")
    assert 600 < width < 2000 and 300 < height < 1100  # PNG header (IHDR), PNG specification


def _cam02(rgb):
    from colorspacious import cspace_convert

    return cspace_convert(np.clip(rgb, 0, 1), "sRGB1", "CAM02-UCS")


def _min_distance(points) -> float:
    return min(float(np.linalg.norm(a - b)) for a, b in itertools.combinations(points, 2))


@pytest.mark.parametrize("deficiency", ["protanomaly", "deuteranomaly", "tritanomaly"])
def test_palette_survives_colour_vision_deficiencies(deficiency):
    # Simulation: Machado, Oliveira & Fernandes (2009), "A physiologically-based model for
    # simulation of color vision deficiency", as implemented by colorspacious ("sRGB1+CVD"),
    # at severity 100 (dichromacy). Distances in CAM02-UCS (Luo et al. 2006), where about 1
    # unit is a just noticeable difference (from memory); the bar of 15 units is our own
    # choice (common practice, no source).
    from colorspacious import cspace_convert

    rgb = np.array([to_rgb(c) for c in PALETTE])
    seen = cspace_convert(rgb, {"name": "sRGB1+CVD", "cvd_type": deficiency, "severity": 100},
                          "sRGB1")
    assert _min_distance(_cam02(seen)) >= 15
    # Control: the check does fail for a red/green pair of similar lightness under
    # deuteranomaly, though the pair is far apart for normal vision.
    if deficiency == "deuteranomaly":
        pair = np.array([to_rgb("#cc3333"), to_rgb("#3a8f3a")])
        pair_seen = cspace_convert(pair, {"name": "sRGB1+CVD", "cvd_type": deficiency,
                                          "severity": 100}, "sRGB1")
        assert _min_distance(_cam02(pair_seen)) < 15 < _min_distance(_cam02(pair))


def test_palette_differs_in_lightness_for_grey_scale():
    # Grey scale keeps only lightness: CIELAB L* (CIE 1976) of every pair differs by at least
    # 6 units (our bar, common practice, no source); markers and dashes differ as well.
    from colorspacious import cspace_convert

    light = cspace_convert(np.array([to_rgb(c) for c in PALETTE]), "sRGB1", "CIELab")[:, 0]
    assert min(abs(a - b) for a, b in itertools.combinations(light, 2)) >= 6
    from semisup.report._figures import _DASHES, _MARKERS

    assert len(set(_MARKERS)) == len(PALETTE) == len({str(d) for d in _DASHES})
