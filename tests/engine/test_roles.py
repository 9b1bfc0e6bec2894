"""Tests of stages.roles: each column's role from its values, and the column reports of the setup screen."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from stages.data import prepare
from stages.roles import ID, ColumnReport, describe_columns, infer_role
from stages.schema import BOOLEAN, CATEGORICAL, DATETIME, NUMERIC


@pytest.mark.parametrize(
    ("values", "role"),
    [
        (pd.Series([True, False, True]), BOOLEAN),
        (pd.Series(["Yes", "no", "YES", None]), BOOLEAN),
        (pd.Series(["TRUE", "false"]), BOOLEAN),
        (pd.Series([0, 1, 1, 0]), NUMERIC),
        (pd.Series([1.5, 2.5, np.nan]), NUMERIC),
        (pd.Series([1, 2, 3], dtype=object), NUMERIC),
        (pd.Series(pd.to_datetime(["2024-01-01", "2024-02-01"])), DATETIME),
        (pd.Series(["2024-01-05", "05/02/2024", "March 3, 2024", "2024-01-07 10:00"]), DATETIME),
        (pd.Series(["red", "green", "red"]), CATEGORICAL),
        (pd.Series(["yes", "true"]), CATEGORICAL),
        (pd.Series(pd.Categorical(["u", "v", "u"])), CATEGORICAL),
    ],
    ids=["bool", "yes-no-text", "true-false-text", "zero-one-numbers", "floats", "object-ints",
         "datetime-dtype", "dates-as-text", "text", "two-true-words", "category-dtype"],
)
def test_infer_role_follows_the_rules(values, role):
    assert infer_role(values)[0] == role


def test_pure_numbers_as_text_are_never_dates():
    assert infer_role(pd.Series(["20240101", "20240102", "20240103"]))[0] == CATEGORICAL


def test_text_that_is_mostly_not_dates_is_categorical():
    values = pd.Series(["2024-01-01"] * 18 + ["soon", "later"])
    assert infer_role(values)[0] == CATEGORICAL


def test_unique_text_over_20_rows_is_an_id():
    assert infer_role(pd.Series([f"order-{i}" for i in range(21)])) == (ID, "a distinct value on every row: an id, not a feature")
    assert infer_role(pd.Series([f"order-{i}" for i in range(20)]))[0] == CATEGORICAL


def test_whole_numbers_that_rise_or_fall_down_every_row_are_an_id():
    assert infer_role(pd.Series(np.arange(100, 130)))[0] == ID
    assert infer_role(pd.Series(np.arange(30)[::-1]))[0] == ID
    assert infer_role(pd.Series(pd.array(range(30), dtype="Int64")))[0] == ID
    # not row numbers: floats, a repeat, a fraction, a missing value, too few rows, or no order
    assert infer_role(pd.Series(np.arange(30.0)))[0] == NUMERIC
    assert infer_role(pd.Series(np.r_[np.arange(29), 28]))[0] == NUMERIC
    assert infer_role(pd.Series(np.arange(30) + 0.5))[0] == NUMERIC
    assert infer_role(pd.Series(np.r_[np.arange(29.0), np.nan]))[0] == NUMERIC
    assert infer_role(pd.Series(np.arange(20)))[0] == NUMERIC
    assert infer_role(pd.Series(np.random.RandomState(0).permutation(30)))[0] == NUMERIC
    roles = {r.name: r.role for r in describe_columns(pd.DataFrame({"n": np.arange(30), "x": np.arange(30) % 7}))}
    assert roles == {"n": ID, "x": NUMERIC}


def test_the_first_id_column_names_the_rows_even_when_ignored():
    frame = pd.DataFrame({"ref": [f"r{i}" for i in range(30)], "row": np.arange(30), "x": np.arange(30) % 7,
                          "y": np.arange(30) % 5})
    prepared = prepare(frame, "y", ignore=["ref"])
    assert prepared.schema.names == ["x"] and prepared.schema.id_column == "ref"
    assert prepare(frame, "y", features=["x", "row"]).schema.id_column == "ref"
    assert prepare(frame.drop(columns="ref"), "y").schema.id_column == "row"
    assert prepare(frame[["x", "y"]], "y").schema.id_column == ""


def test_more_than_1000_levels_is_excluded_with_the_count():
    many = pd.Series([f"level {i}" for i in range(1001)] * 2)
    role, note = infer_role(many)
    assert role == "excluded" and "1,001" in note
    assert infer_role(pd.Series([f"level {i}" for i in range(1000)] * 2))[0] == CATEGORICAL


@pytest.mark.parametrize("values", [pd.Series(["a", "a", None]), pd.Series([7, 7, 7])], ids=["text", "number"])
def test_constant_column_is_excluded(values):
    role, note = infer_role(values)
    assert role == "excluded" and note.startswith("constant")


@pytest.mark.parametrize("values", [pd.Series([None, None], dtype=object), pd.Series([np.nan, np.nan])])
def test_all_missing_column_is_excluded(values):
    assert infer_role(values) == ("excluded", "every value is missing")


def test_lists_in_cells_are_excluded():
    assert infer_role(pd.Series([[1], [2, 3]]))[0] == "excluded"


def test_describe_columns_reports_counts_and_examples():
    frame = pd.DataFrame({"city": ["Oslo", "Lima", None, "Oslo", "Pune", "Kyiv"], "km": [1.0, 2, 3, 4, 5, np.nan]})
    city, km = describe_columns(frame)
    assert city == ColumnReport("city", CATEGORICAL, str(frame["city"].dtype), 1, 4, ("Oslo", "Lima", "Pune"), "")
    assert (km.role, km.n_missing, km.n_unique, km.examples) == (NUMERIC, 1, 5, ("1.0", "2.0", "3.0"))


def test_describe_columns_handles_duplicate_names():
    frame = pd.DataFrame([[1, "a"], [2, "b"]], columns=["x", "x"])
    assert [r.role for r in describe_columns(frame)] == [NUMERIC, CATEGORICAL]




def test_text_columns_arrow_holds_are_described_as_the_rules_describe_them():
    n = 2500
    rng = np.random.RandomState(0)
    frame = pd.DataFrame({
        "depot": rng.choice(["north", "east", "south"], size=n),
        "flag": rng.choice(["Yes", "no "], size=n),
        "order": [f"o{i}" for i in range(n)],
        "when": pd.date_range("2024-01-01", periods=n, freq="h").strftime("%Y-%m-%d %H:%M"),
        "mostly": ["n/a", "?", "x"] + [str(i) for i in range(n - 3)],
        "same": ["a"] * n,
        "empty": pd.array([None] * n, dtype="string[pyarrow]"),
        "levels": [f"l{i % 1500}" for i in range(n)],
    }).astype("string[pyarrow]")
    frame.loc[::7, "depot"] = None
    frame["km"] = rng.normal(size=n).round(1)
    frame.loc[::5, "km"] = np.nan
    frame["row"] = np.arange(n)
    frame["one"] = 3.0
    fast = describe_columns(frame)
    # reference: the rules over each column's values as numpy gives them (pandas' hash of every value)
    from stages import roles as data

    for report in fast:
        values = frame[report.name]
        non_missing, uniques = data._distinct(values)
        role, note = data._role(values.dtype, non_missing, uniques, len(values))
        expected = (role, note, len(values) - len(non_missing), len(uniques), tuple(str(v) for v in uniques[:3]))
        assert (report.role, report.note, report.n_missing, report.n_unique, report.examples) == expected, report.name
    roles = {r.name: r.role for r in fast}
    assert (roles["order"], roles["when"], roles["flag"], roles["mostly"], roles["levels"]) == (
        ID, DATETIME, BOOLEAN, NUMERIC, "excluded")
