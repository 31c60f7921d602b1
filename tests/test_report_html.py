"""report.html: self-contained, escaped, complete, renders in headless Chromium."""

from __future__ import annotations

import json
import shutil
import subprocess
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from _plan_synth import TRUTH, stand_in_select_rows, write_study

from semisup import StoreError
from semisup.plan import PlanRequest, make_plan
from semisup.report import CAUTIONS, curve_figure, write_report
from semisup.study import summarize_curves

EVIL = "<script>alert(1)</script>"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


class _Tags(HTMLParser):
    """Collects start tags and attributes with Python's own HTML parser."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


def _evil_study(folder):
    truth = {EVIL: TRUTH["latent-logreg"], "supervised-logreg": TRUTH["supervised-logreg"]}
    write_study(folder, truth=truth, class_names=(EVIL, "dog"), column_names=(EVIL, "x2"),
                row_prefix=EVIL, failed=1)
    card = {"n_rows": 5000, "label_column": EVIL,
            "column_kinds": {EVIL: "numeric", "x2": "categorical"},
            "warnings": [f"column {EVIL} looks like an id"]}
    (folder / "data_card.json").write_text(json.dumps(card), encoding="utf-8")
    make_plan(folder, PlanRequest("accuracy", 0.9, 2.0, labels_owned=100, n_next=10),
              select_rows=stand_in_select_rows, n_boot=30)
    return folder


@pytest.fixture(scope="module")
def evil_report(tmp_path_factory):
    folder = _evil_study(tmp_path_factory.mktemp("evil"))
    path = write_report(folder)
    return folder, path, path.read_text(encoding="utf-8")


def test_user_strings_are_escaped(evil_report):
    _, _, text = evil_report
    # Escaping checked with the standard library's html.escape rules: the raw tag never
    # appears, the escaped form does (in class names, column names, method names, row ids).
    assert EVIL not in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    parser = _Tags()
    parser.feed(text)
    assert not [t for t, _ in parser.tags if t in ("script", "iframe", "object", "embed")]


def test_report_is_self_contained(evil_report):
    folder, _, text = evil_report
    parser = _Tags()
    parser.feed(text)
    for tag, attrs in parser.tags:
        for name in ("src", "href"):
            value = attrs.get(name)
            if value is not None:
                assert value.startswith(("data:image/png;base64,", "#")), (tag, value)
    assert "<link" not in text and "http://" not in text and "https://" not in text
    wide = [a["src"] for t, a in parser.tags if t == "img" and a.get("class") == "wide"]
    assert len(wide) == 3  # one figure per metric (and one image per panel for phones)
    pngs = sorted(p.name for p in (folder / "figures").glob("*.png"))
    assert pngs == ["curves_accuracy.png", "curves_balanced_accuracy.png", "curves_macro_f1.png"]
    for p in (folder / "figures").glob("*.png"):
        assert p.read_bytes().startswith(PNG_MAGIC)
        svg = p.with_suffix(".svg").read_bytes()
        assert b"<svg" in svg and b"<script" not in svg


def test_report_has_every_section(evil_report):
    _, _, text = evil_report
    for part in ("Job summary", "Data card highlights", "Learning curves", "Methods",
                 "Plan and backtest", "Rows to label next", "Protocol", "Warnings",
                 "Cautions", "Backtest: refit without the largest budget", "Decision:",
                 "Runner-up", "Cells that did not finish", "stratified nested draws"):
        assert part in text, part
    for caution in CAUTIONS:
        assert caution.split(":")[0][:40] in text


def test_report_without_plan_says_how_to_make_one(tmp_path):
    folder = write_study(tmp_path / "s")
    # The study writes its measured points to curves.csv (semisup.study.summarize_curves).
    summarize_curves(pd.read_csv(folder / "cells.csv")).to_csv(folder / "curves.csv",
                                                               index=False)
    text = write_report(folder).read_text(encoding="utf-8")
    assert "No plan has been made" in text and "semisup plan" in text
    assert "Plan and backtest" in text and "Decision:" not in text
    assert (folder / "figures" / "curves_accuracy.png").is_file()


def test_report_needs_a_study_folder(tmp_path):
    with pytest.raises(StoreError, match="does not exist"):
        write_report(tmp_path / "nope")
    (tmp_path / "empty").mkdir()
    with pytest.raises(StoreError, match="neither cells.csv nor study.json"):
        write_report(tmp_path / "empty")


def test_curve_figure_is_a_png_of_the_right_size():
    curves = pd.DataFrame({
        "method": ["m"] * 4, "strategy": ["random"] * 4, "metric": ["accuracy"] * 4,
        "n_labels": [10, 20, 10, 40], "mean": [0.6, 0.7, 0.61, 0.75],
        "low": [0.55, 0.65, 0.6, 0.7], "high": [0.65, 0.75, 0.62, 0.8],
        "measured": [True, True, False, False], "extrapolated": [False, False, False, True],
    })
    png = curve_figure(curves, "accuracy", target=0.7).png
    assert png.startswith(PNG_MAGIC)
    # Width and height from the PNG header (IHDR), per the PNG specification.
    width, height = int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")
    assert 500 < width < 1500 and 300 < height < 900


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def _render(browser, page, shot, profile):
    """Screenshot ``page`` with headless Chromium; return (returncode, console lines)."""
    cmd = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
           f"--screenshot={shot}", "--window-size=1200,3000", page.resolve().as_uri()]
    run = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    # Chromium logs page console messages as ":CONSOLE" lines; uncaught errors say "Uncaught".
    console = [line for line in run.stderr.splitlines()
               if ":CONSOLE" in line or "Uncaught" in line]
    return run.returncode, console, run.stderr


def test_report_renders_in_headless_chromium(evil_report, tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("chromium is not installed (apt-get install -y chromium); CI installs it")
    # Control: the console check does catch a page with a script error.
    bad = tmp_path / "bad.html"
    bad.write_text("<html><body><script>undefinedFunction();</script></body></html>")
    _, console, _ = _render(browser, bad, tmp_path / "bad.png", tmp_path / "profile-bad")
    assert any("Uncaught" in line for line in console)

    _, path, _ = evil_report
    shot = tmp_path / "report.png"
    code, console, stderr = _render(browser, path, shot, tmp_path / "profile")
    assert code == 0, stderr[-2000:]
    assert not console, console
    png = shot.read_bytes()
    assert png.startswith(PNG_MAGIC)
    # The page is not blank: many distinct colours in the screenshot (read with matplotlib).
    import io

    from matplotlib.image import imread
    pixels = imread(io.BytesIO(png), format="png")
    assert pixels.shape[1] == 1200
    assert len(np.unique(pixels.reshape(-1, pixels.shape[-1])[::97], axis=0)) > 20


def test_render_html_escapes_every_piece():
    # Pure renderer: headers, cells, captions, bullets, headings and titles all go through
    # the standard library's html.escape.
    from semisup.report import ReportContent, Section, Table, render_html

    sec = Section(EVIL, EVIL).para(EVIL).bullets([EVIL]).heading(EVIL)
    sec.table(Table([EVIL], [[EVIL], [1.5]], caption=EVIL))
    text = render_html(ReportContent(EVIL, EVIL, [sec]))
    assert EVIL not in text and text.count("&lt;script&gt;") >= 8


def _cells_text(text: str) -> list[str]:
    class Cells(HTMLParser):
        def __init__(self):
            super().__init__()
            self.inside, self.cells = False, []

        def handle_starttag(self, tag, attrs):
            if tag in ("td", "th"):
                self.inside = True
                self.cells.append("")

        def handle_endtag(self, tag):
            if tag in ("td", "th"):
                self.inside = False

        def handle_data(self, data):
            if self.inside:
                self.cells[-1] += data

    parser = Cells()
    parser.feed(text)
    return parser.cells


@pytest.fixture(scope="module")
def readable_report(tmp_path_factory):
    folder = write_study(tmp_path_factory.mktemp("readable") / "records-study",
                         class_counts={"cat": 300, "dog": 100}, n_labeled=400, n_holdout=150)
    study = json.loads((folder / "study.json").read_text(encoding="utf-8"))
    study["data"]["source"] = "/data/intake/records_2024.csv"
    study["pool"] = {"n_rows": 250}  # budgets 20..160 draw different rows, 320 would not
    # one holdout shared by the repeats: the study's summary_budget then stays below the pool
    study["evaluation"] = {"protocol": "holdout", "shared_across_repeats": True,
                           "n_pool_min": 250}
    study["representation"] = {"diagnostics": {"vae": {"elbo": {"train": -44.48, "held_out":
                                                                 -52.9},
                                                        "recon": {"numeric": 0.31}}},
                               "errors": {}}
    (folder / "study.json").write_text(json.dumps(study), encoding="utf-8")
    card = {"source": "/data/intake/records_2024.csv", "size_bytes": 1234567, "n_rows": 5000,
            "n_encoded_features": 81, "labeled_fraction": 0.08, "imbalance_ratio": 3.0,
            "imbalance_note": "Imbalanced ...", "kinds": {"numeric": ["x1"],
                                                          "categorical": ["x2"]},
            "columns": [{"name": "x1", "kind": "numeric", "dtype": "float64", "missing": 12,
                         "missing_fraction": 0.0024, "distinct": 4990}]}
    (folder / "data_card.json").write_text(json.dumps(card), encoding="utf-8")
    make_plan(folder, PlanRequest("macro_f1", 0.8, 2.5, labels_owned=100, n_next=5),
              select_rows=stand_in_select_rows, n_boot=30)
    plan = json.loads((folder / "plan.json").read_text(encoding="utf-8"))
    text = write_report(folder, currency="EUR").read_text(encoding="utf-8")
    return folder, plan, text


def test_rows_to_label_next_say_when_they_lean_towards_the_pool(readable_report, tmp_path):
    # The plan's summary and the report describe the selection with one phrase
    # (semisup.plan.selection_phrase); a plan whose rows were weighted towards the pool says so.
    folder, plan, text = readable_report
    assert f"Chosen by {plan['label_next']['strategy']} selection. Send" in text
    assert plan["label_next"]["weighted_to_pool"] is False and "lean towards" not in text
    copy = shutil.copytree(folder, tmp_path / "weighted")
    plan["label_next"]["weighted_to_pool"] = True
    (copy / "plan.json").write_text(json.dumps(plan), encoding="utf-8")
    weighted = write_report(copy).read_text(encoding="utf-8")
    assert ("selection, weighted towards the pool regions the labeled rows miss. Send"
            in weighted)
    assert "these rows lean towards the regions the labels miss" in weighted


def test_title_names_the_data_file(readable_report):
    _, _, text = readable_report
    assert "<title>Label-budget study of records_2024.csv</title>" in text
    assert "Label-budget study: study" not in text


def test_card_and_diagnostics_read_as_words_and_formatted_numbers(readable_report):
    _, _, text = readable_report
    cells = _cells_text(text)
    for raw in ("size_bytes", "n_encoded_features", "labeled_fraction", "imbalance_ratio"):
        assert raw not in text, raw
    assert "file size" in cells and "1.2 MB" in cells
    assert "model inputs after encoding" in cells and "8.0%" in cells
    assert not [c for c in cells if "{" in c or "}" in c], "a raw JSON dict in a table cell"
    assert "VAE \u203a ELBO \u203a train" in cells and "-44.48" in cells
    # imbalance_ratio 3.0 is at the card's own threshold (semisup.data._card.IMBALANCE_RATIO)
    assert "Imbalanced labels" in text and "a note is added from" not in text


def test_summary_shows_the_plan_metric_where_repeats_differ(readable_report):
    _, _, text = readable_report
    # The plan's metric (macro-F1) at 160 labels: the largest budget below the pool of 250.
    assert "Measured macro-F1 at 160 training labels" in text
    # measured points come from the study's curves.csv (summarize_curves' 95% default)
    assert "95% interval of the measured mean over 5 repeats (Student-t)" in text
    # ... shown under the curves, not in the job summary beside the plan's 90% intervals
    summary = text[text.index("id=\"summary\""):text.index("id=\"data\"")]
    assert "95%" not in summary and "Student-t" not in summary


def test_prices_carry_the_currency_and_intervals_their_kind(readable_report):
    _, plan, text = readable_report
    assert "price EUR 2.50 per label" in text
    cost = plan["chosen"]["cost"] if plan["chosen"] else plan["best"]["cost"]
    assert f"EUR {cost:,.2f}" in text
    assert "90% interval of the forecast (bootstrap)" in text
    assert "0.020 &gt; 0.020" not in text


def test_warnings_read_as_sentences_without_rounding_artefacts():
    from semisup.report._text import warning_text

    text = warning_text("x: the power law fits poorly (RMS residual 0.020 > 0.020); y")
    assert text.startswith("X: ") and "0.020 > 0.020" not in text
    assert "0.020, just above a limit that also rounds to 0.020" in text
    assert warning_text("residual 0.023 > 0.021") == "Residual 0.023 > 0.021"  # left alone
    assert warning_text("1.020 > 0.020") == "1.020 > 0.020"


def test_numbers_are_formatted_for_people():
    from semisup.report._text import count, money, percent, short, span

    assert count(1234567.0) == "1,234,567" and percent(0.8) == "80%"
    assert money(1234.5, "EUR") == "EUR 1,234.50" and money(2.5) == "2.50"
    assert span(0.81234, 0.9) == "0.812\u20130.900"
    assert short({"elbo": {"train": -44.5}, "cv_folds": 3}) == "ELBO train: -44.5; CV folds: 3"
