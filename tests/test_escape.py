"""Output escaping: spreadsheet formulas (OWASP CSV Injection guidance) and Markdown text."""

from __future__ import annotations

import math

import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from semisup._escape import (
    FORMULA_PREFIXES,
    markdown_text,
    neutralise_cell,
    neutralise_frame,
    restore_cell,
)


@pytest.mark.parametrize("value", ["=1+1", "+A1", "-2+3", "@SUM(A1)", "\tx", "\rx",
                                   '=HYPERLINK("http://x","y")', "-"])
def test_formula_like_cells_get_a_quote(value):
    # OWASP "CSV Injection": prefix cells starting with = + - @ tab CR with a single quote
    assert neutralise_cell(value) == "'" + value


@pytest.mark.parametrize("value", ["-3", "+1.5e3", "-0.25", "plain", "a=b", "", 5, None])
def test_numbers_and_plain_text_are_left_alone(value):
    assert neutralise_cell(value) == value


def test_frame_columns_and_names_are_neutralised():
    frame = pd.DataFrame({"=id": ["=cmd", "ok"], "n": [1, 2]})
    out = neutralise_frame(frame)
    assert list(out.columns) == ["'=id", "n"]
    assert out["'=id"].tolist() == ["'=cmd", "ok"] and out["n"].tolist() == [1, 2]
    assert frame["=id"].tolist() == ["=cmd", "ok"]  # the input is not changed
    assert set(FORMULA_PREFIXES) == {"=", "+", "-", "@", "\t", "\r"}


def test_markdown_text_renders_as_the_same_literal_text():
    markdown_it = pytest.importorskip("markdown_it")
    md = markdown_it.MarkdownIt("commonmark").enable("table")
    for raw in ["a`b", "x|y", "<script>alert(1)</script>", "*em* _u_", "[l](javascript:x)",
                "back\\slash", "&amp;", "~~s~~"]:
        # reference: markdown-it-py renders the escaped text back to the raw text, HTML-escaped
        html = md.render(f"| h |\n|---|\n| {markdown_text(raw)} |\n")
        cell = html.split("<td>")[1].split("</td>")[0]
        expected = raw.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
        assert cell == expected.replace('"', "&quot;"), (raw, cell)
    assert "\n" not in markdown_text("two\nlines")


@given(st.text(alphabet=st.sampled_from("'=+-@\t\r1.ab"), max_size=6))
def test_restore_inverts_neutralise_and_no_output_starts_a_formula(value):
    out = neutralise_cell(value)
    assert restore_cell(out) == value
    if out[:1] in FORMULA_PREFIXES:  # left alone only as a plain number
        # reference: Python's float() reads the whole cell as one finite number (float()
        # would also skip surrounding blank space, which a plain number has none of)
        assert out == value and out == out.strip(), out
        assert math.isfinite(float(out)), out
