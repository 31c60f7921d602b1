"""The --help texts quote the defaults the code applies (read from their sources here)."""

from __future__ import annotations

import dataclasses
import inspect
import re

import pytest

from semisup.cli import build_parser, help_defaults
from semisup.methods import default_methods
from semisup.plan import PlanRequest
from semisup.selection import STRATEGIES
from semisup.study import StudySpec
from semisup.study._draws import default_budgets


def _sub_help(name: str) -> str:
    parser = build_parser()
    action = next(a for a in parser._actions if a.dest == "command")
    text = action.choices[name].format_help()
    # argparse wraps lines, also after the hyphen of a long method name
    return re.sub(r"\s+", " ", re.sub(r"(?<=\w-)\n\s*(?=\w)", "", text))


def _default(cls, name):
    return next(f.default for f in dataclasses.fields(cls) if f.name == name)


def test_study_help_quotes_the_spec_defaults():
    text = _sub_help("study")
    assert "(default: all)" not in text
    assert f"(default: {', '.join(default_methods())};" in text
    for key in ("repeats", "trials", "seed"):
        assert f"(default: {_default(StudySpec, key)})" in text, key
    assert f"(default: {_default(StudySpec, 'holdout'):g})" in text
    assert f"(default: {', '.join(_default(StudySpec, 'strategies'))};" in text
    assert ", ".join(STRATEGIES) in text
    n_points = inspect.signature(default_budgets).parameters["n_points"].default
    assert f"about {n_points} budgets from 2 x the number of classes up to the pool size" in text


def test_the_budget_grid_the_help_describes_is_the_one_used():
    # The help says: about n_points budgets, geometric, from 2 x classes to the pool size.
    grid = default_budgets(n_classes=4, pool_size=700)
    assert grid[0] == 8 and grid[-1] == 700
    n_points = inspect.signature(default_budgets).parameters["n_points"].default
    assert len(grid) == n_points
    ratios = [b / a for a, b in zip(grid, grid[1:], strict=False)]
    assert max(ratios) / min(ratios) < 1.1  # geometric: constant ratio up to rounding


def test_plan_help_and_argparse_defaults_come_from_plan_request():
    parser = build_parser()
    args = parser.parse_args(["plan", "d", "--target", "accuracy=0.9", "--cost-per-label", "1"])
    assert args.confidence == _default(PlanRequest, "confidence")
    assert args.cost_per_round == _default(PlanRequest, "cost_per_round")
    text = _sub_help("plan")
    assert f"(default: {_default(PlanRequest, 'confidence'):g})" in text
    assert f"(default: {_default(PlanRequest, 'cost_per_round'):g})" in text


def test_card_out_help_names_where_the_card_goes(tmp_path, monkeypatch):
    text = _sub_help("card")
    assert "<data stem>.card.md in the current folder" in text


@pytest.mark.parametrize("key", sorted(help_defaults()))
def test_every_quoted_default_appears_in_some_help(key):
    value = help_defaults()[key]
    texts = " ".join(_sub_help(c) for c in ("study", "plan", "card", "report", "demo"))
    assert value in texts, (key, value)
