"""Tests of stages.data: reading files, task inference and prepare() (column roles: test_roles.py)."""

from __future__ import annotations

import gzip
import os

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stages.data import Prepared, infer_task, load_frame, prepare, read_table
from stages.errors import DataError
from stages.roles import describe_columns
from stages.schema import BOOLEAN, CATEGORICAL, NUMERIC


def write(path, text: str) -> str:
    path.write_bytes(text.encode("utf-8"))
    return str(path)


# ----------------------------------------------------------------------------- reading CSV


def test_csv_round_trip_keeps_numbers_text_and_booleans(tmp_path):
    frame = pd.DataFrame({"n": [1, 2, 3], "x": [0.5, np.nan, 2.0], "s": ["a", "b", None], "b": [True, False, True]})
    frame.to_csv(tmp_path / "d.csv", index=False)
    back = read_table(tmp_path / "d.csv")
    assert list(back.columns) == ["n", "x", "s", "b"]
    assert back["n"].dtype == np.int64
    assert back["x"].dtype == np.float64 and np.isnan(back["x"][1])
    assert pd.api.types.is_string_dtype(back["s"]) and back["s"].isna().tolist() == [False, False, True]
    assert back["b"].dtype == bool


@pytest.mark.parametrize(("delimiter", "suffix"), [(";", ".csv"), ("\t", ".csv"), ("\t", ".tsv"), ("|", ".txt")])
def test_delimiter_is_detected(tmp_path, delimiter, suffix):
    text = delimiter.join(["a", "b", "c"]) + "\n" + "\n".join(delimiter.join(["1", "x,y", "2.5"]) for _ in range(4))
    frame = read_table(write(tmp_path / f"d{suffix}", text + "\n"))
    assert list(frame.columns) == ["a", "b", "c"]
    assert frame["b"].tolist() == ["x,y"] * 4


def test_comma_is_the_fallback_for_a_single_column(tmp_path):
    frame = read_table(write(tmp_path / "one.csv", "price\n1\n2\n"))
    assert list(frame.columns) == ["price"]
    assert frame["price"].tolist() == [1, 2]


def test_byte_order_mark_is_removed_from_the_first_column_name(tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbfid,price\n1,2\n3,4\n")
    assert list(read_table(path).columns) == ["id", "price"]


def test_mixed_line_endings_and_quoted_newlines_are_read(tmp_path):
    path = tmp_path / "mixed.csv"
    path.write_bytes(b'a,b\r\n1,"two\nlines"\n3,x\r5,y\r\n')
    frame = read_table(path)
    assert frame["a"].tolist() == [1, 3, 5]
    assert frame["b"].tolist() == ["two\nlines", "x", "y"]


def test_gzip_csv_is_read(tmp_path):
    path = tmp_path / "d.csv.gz"
    with gzip.open(path, "wt", encoding="utf-8") as handle:
        handle.write("a;b\n1;2\n3;4\n")
    assert read_table(path)["b"].tolist() == [2, 4]


def test_unknown_extension_is_read_as_csv(tmp_path):
    assert read_table(write(tmp_path / "d.data", "a,b\n1,2\n"))["a"].tolist() == [1]


def test_header_wider_than_the_sniff_window_is_read_and_checked(tmp_path):
    names = [f"column_{i:05d}" for i in range(8000)]
    text = ",".join(names) + "\n" + ",".join("1" for _ in names) + "\n"
    assert read_table(write(tmp_path / "wide.csv", text)).shape == (1, 8000)
    with pytest.raises(DataError, match="'column_00001' appears twice"):
        read_table(write(tmp_path / "dup.csv", text.replace("column_07999", "column_00001", 1)))


def test_load_frame_names_a_file_by_its_name_and_a_frame_as_frame(tmp_path):
    frame, name = load_frame(write(tmp_path / "deliveries.csv", "a\n1\n"))
    assert name == "deliveries.csv" and len(frame) == 1
    given = pd.DataFrame({"a": [1]})
    same, label = load_frame(given)
    assert same is given and label == "frame"


# ----------------------------------------------------------------------------- reading Parquet


def test_parquet_round_trip_keeps_dtypes(tmp_path):
    frame = pd.DataFrame({
        "n": np.array([1, 2, 3], dtype=np.int64),
        "x": [0.5, np.nan, 2.0],
        "s": ["a", "b", None],
        "b": [True, False, True],
        "t": pd.to_datetime(["2024-01-01", "2024-01-02", "2024-01-03"]),
        "c": pd.Categorical(["u", "v", "u"]),
    })
    for suffix in (".parquet", ".pq"):
        frame.to_parquet(tmp_path / f"d{suffix}", engine="pyarrow")
        back = read_table(tmp_path / f"d{suffix}")
        assert list(back.columns) == list(frame.columns)
        assert back["n"].dtype == np.int64 and back["b"].dtype == bool
        assert pd.api.types.is_datetime64_any_dtype(back["t"])
        assert isinstance(back["c"].dtype, pd.CategoricalDtype)
        assert back["s"].tolist()[:2] == ["a", "b"]


@pytest.mark.parametrize("index", [None, pd.RangeIndex(5, 9), pd.Index([7, 3, 9, 1], name="order_id"),
                                   pd.Index(["a", "b", "c", "d"])], ids=["none", "range", "named", "unnamed"])
def test_parquet_read_a_column_at_a_time_equals_pyarrow_reading_the_whole_table(tmp_path, index):
    # Reference: pyarrow.parquet.read_table(...).to_pandas(), which rebuilds every dtype and the
    # index from the pandas metadata; the frame is then numbered from 0, a named index kept as a column.
    frame = pd.DataFrame({
        "count": pd.array([1, None, 3, 4], dtype="Int64"),
        "label": pd.array(["x", None, "z", "w"], dtype="string"),
        "kind": pd.Categorical(["u", "v", "u", None]),
        "when": pd.date_range("2024-03-30", periods=4, tz="Europe/Paris"),
        "flag": pd.array([True, None, False, True], dtype="boolean"),
        "value": [1.0, 2.5, np.nan, 4.0],
    })
    if index is not None:
        frame.index = index
    frame.to_parquet(tmp_path / "d.parquet", index=None if index is None else True)
    expected = pq.read_table(tmp_path / "d.parquet").to_pandas()
    if not isinstance(expected.index, pd.RangeIndex):
        expected = expected.reset_index(drop=expected.index.name is None)
    pd.testing.assert_frame_equal(read_table(tmp_path / "d.parquet"), expected.reset_index(drop=True))


def test_parquet_with_an_unknown_extension_is_recognised(tmp_path):
    pd.DataFrame({"a": [1, 2]}).to_parquet(tmp_path / "d.bin")
    assert read_table(tmp_path / "d.bin")["a"].tolist() == [1, 2]


@pytest.mark.parametrize(
    "column",
    [
        pa.array([[1, 2], [3]]),
        pa.array([{"u": 1}, {"u": 2}]),
        pa.array([[("k", 1)], [("k", 2)]], type=pa.map_(pa.string(), pa.int64())),
    ],
    ids=["list", "struct", "map"],
)
def test_parquet_with_nested_values_names_the_column(tmp_path, column):
    pq.write_table(pa.table({"ok": [1, 2], "nested": column}), tmp_path / "n.parquet")
    with pytest.raises(DataError, match=r"^n\.parquet: column 'nested' holds nested values"):
        read_table(tmp_path / "n.parquet")


def test_parquet_with_no_rows_is_refused(tmp_path):
    pd.DataFrame({"a": pd.Series([], dtype=float)}).to_parquet(tmp_path / "e.parquet")
    with pytest.raises(DataError, match="no rows"):
        read_table(tmp_path / "e.parquet")


def test_damaged_parquet_is_refused(tmp_path):
    (tmp_path / "bad.parquet").write_bytes(b"this is not parquet at all")
    with pytest.raises(DataError, match=r"^bad\.parquet: is not a valid Parquet file"):
        read_table(tmp_path / "bad.parquet")


# ----------------------------------------------------------------------------- unreadable files


def test_missing_file_is_named(tmp_path):
    with pytest.raises(DataError, match=r"^nowhere\.csv: no such file$"):
        read_table(tmp_path / "nowhere.csv")


def test_folder_instead_of_a_file_is_refused(tmp_path):
    (tmp_path / "folder.csv").mkdir()
    with pytest.raises(DataError, match=r"^folder\.csv: is a folder"):
        read_table(tmp_path / "folder.csv")


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0, reason="root can read any file")
def test_unreadable_file_says_permission_denied(tmp_path):
    path = tmp_path / "locked.csv"
    write(path, "a\n1\n")
    path.chmod(0)
    try:
        with pytest.raises(DataError, match=r"^locked\.csv: permission denied"):
            read_table(path)
    finally:
        path.chmod(0o644)


def test_permission_error_from_the_system_is_reported(tmp_path, monkeypatch):
    import stages.data

    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    path = write(tmp_path / "locked.csv", "a\n1\n")
    monkeypatch.setattr(stages.reading, "open", refuse, raising=False)
    with pytest.raises(DataError, match=r"^locked\.csv: permission denied"):
        read_table(path)


@pytest.mark.parametrize("content", [b"", b"\n\n  \n", b"\xef\xbb\xbf"], ids=["zero-bytes", "blank-lines", "bom-only"])
def test_empty_file_is_refused(tmp_path, content):
    (tmp_path / "empty.csv").write_bytes(content)
    with pytest.raises(DataError, match=r"^empty\.csv: the file is empty$"):
        read_table(tmp_path / "empty.csv")


def test_header_with_no_rows_is_refused(tmp_path):
    with pytest.raises(DataError, match=r"^head\.csv: the file has a header but no rows$"):
        read_table(write(tmp_path / "head.csv", "a,b,c\n"))


def test_duplicate_column_name_in_the_header_is_named(tmp_path):
    path = write(tmp_path / "deliveries.csv", "id,price,price\n1,2,3\n")
    with pytest.raises(DataError) as caught:
        read_table(path)
    assert str(caught.value) == "deliveries.csv: column 'price' appears twice in the header"


def test_text_that_is_not_utf8_names_the_byte_offset(tmp_path):
    (tmp_path / "latin.csv").write_bytes(b"name,city\nx,Montr\xe9al\n")
    with pytest.raises(DataError, match=r"^latin\.csv: the text is not UTF-8 \(byte 0xe9 at offset 17\)"):
        read_table(tmp_path / "latin.csv")


def test_bad_byte_after_the_sniff_window_is_found(tmp_path):
    body = b"a,b\n" + b"1,2\n" * 40_000 + b"3,\xff\n"
    (tmp_path / "late.csv").write_bytes(body)
    with pytest.raises(DataError, match=rf"byte 0xff at offset {len(body) - 2}\)"):
        read_table(tmp_path / "late.csv")


def test_parser_error_names_the_line(tmp_path):
    with pytest.raises(DataError, match=r"^rows\.csv: line 4 has 3 fields, but the header has 2$"):
        read_table(write(tmp_path / "rows.csv", "a,b\n1,2\n3,4\n5,6,7\n"))


def test_rows_longer_than_the_header_are_refused_not_turned_into_an_index(tmp_path):
    with pytest.raises(DataError, match=r"^long\.csv: the rows have more fields than the header \(2 names\)$"):
        read_table(write(tmp_path / "long.csv", "a,b\n1,2,3\n4,5,6\n"))


def test_unclosed_quote_names_the_line(tmp_path):
    with pytest.raises(DataError, match=r"^q\.csv: a quote opened on line 3 is never closed"):
        read_table(write(tmp_path / "q.csv", 'a,b\n1,2\n3,"4\n5,6\n'))


def test_messages_name_the_file_not_its_absolute_path(tmp_path):
    with pytest.raises(DataError) as caught:
        read_table(write(tmp_path / "head.csv", "a\n"))
    assert str(tmp_path) not in str(caught.value)


# ----------------------------------------------------------------------------- task


@pytest.mark.parametrize(
    ("values", "task"),
    [
        (pd.Series([True, False]), "binary"),
        (pd.Series([0, 1, 1]), "binary"),
        (pd.Series([0.0, 1.0, np.nan]), "binary"),
        (pd.Series(["spam", "ham", "spam"]), "binary"),
        (pd.Series([1, 2, 1]), "regression"),
        (pd.Series([0.5, 1.5, 3.0]), "regression"),
        (pd.Series(["1.5", "2.5", "n/a", "4"]), "regression"),
    ],
    ids=["bool", "zero-one", "zero-one-float", "two-strings", "two-other-numbers", "numbers", "mostly-numbers"],
)
def test_infer_task_follows_the_rules(values, task):
    assert infer_task(values) == task


def test_three_to_a_hundred_text_classes_are_multiclass_and_more_are_refused_with_a_hint():
    assert infer_task(pd.Series(["a", "b", "c", "a"]), source="d.csv", target="species") == "multiclass"
    hundred = pd.Series([f"c{i}" for i in range(100)] * 2)
    assert infer_task(hundred) == "multiclass"
    with pytest.raises(DataError, match=r"^d\.csv: target 'species' has 101 classes; a multiclass target may "
                                        r"have at most 100 \(group rare levels"):
        infer_task(pd.Series([f"c{i}" for i in range(101)] * 2), source="d.csv", target="species")


# ----------------------------------------------------------------------------- prepare


def deliveries() -> pd.DataFrame:
    return pd.DataFrame({
        "distance": [1.0, 2.0, 3.0, 4.0, 5.0, 6.0],
        "zone": ["north", "south", "north", "east", "south", "north"],
        "express": ["yes", "no", "no", "yes", "no", "yes"],
        "minutes_late": [3.0, np.nan, 5.0, None, 8.0, 1.0],
    })


def test_prepare_drops_rows_whose_target_is_missing_and_says_how_many():
    frame = deliveries()
    frame["minutes_late"] = frame["minutes_late"].astype(object)
    frame.loc[0, "minutes_late"] = ""
    prepared = prepare(frame, "minutes_late")
    assert isinstance(prepared, Prepared)
    assert "dropped 3 rows whose target 'minutes_late' is missing" in prepared.notes
    assert prepared.rows.tolist() == [2, 4, 5] and prepared.rows.dtype == np.int64
    assert prepared.y.tolist() == [5.0, 8.0, 1.0]
    assert prepared.frame["distance"].tolist() == [3.0, 5.0, 6.0]
    assert list(prepared.frame.index) == [0, 1, 2]


def test_prepare_shares_the_frame_when_every_row_is_kept_and_leaves_the_frame_as_it_was():
    frame = deliveries().dropna()
    before = frame.copy()
    prepared = prepare(frame, "minutes_late")
    assert np.shares_memory(prepared.frame["distance"].to_numpy(), frame["distance"].to_numpy())
    assert list(prepared.frame.index) == [0, 1, 2, 3]  # renumbered from 0 ...
    pd.testing.assert_frame_equal(frame, before)  # ... without touching the user's frame (index 0, 2, 4, 5)


def test_prepare_records_whether_the_features_are_the_inferred_ones():
    assert prepare(deliveries(), "minutes_late").features_inferred
    assert prepare(deliveries(), "minutes_late", features=["distance", "zone", "express"]).features_inferred
    assert not prepare(deliveries(), "minutes_late", features=["distance"]).features_inferred


def test_prepare_builds_the_schema_and_float_matrix():
    prepared = prepare(deliveries(), "minutes_late")
    schema = prepared.schema
    assert schema.names == ["distance", "zone", "express"] and schema.task == "regression"
    assert [c.role for c in schema.columns] == [NUMERIC, CATEGORICAL, BOOLEAN]
    assert schema.columns[1].levels == ("north", "south")
    assert prepared.matrix.dtype == np.float64 and prepared.matrix.shape == (4, 3)
    assert prepared.matrix[:, 1].tolist() == [0.0, 0.0, 1.0, 0.0]
    assert prepared.matrix[:, 2].tolist() == [1.0, 0.0, 0.0, 1.0]


@settings(max_examples=40, deadline=None)
@given(st.integers(min_value=2, max_value=300), st.integers(min_value=0, max_value=2**31 - 1))
def test_encoding_rows_in_an_order_equals_encoding_then_reordering(n_rows, seed):
    # Gathering rows while the matrix is filled must give exactly numpy's row indexing of the
    # matrix encoded in frame order (numeric, text and boolean columns, some values missing or infinite).
    rng = np.random.default_rng(seed)
    numbers = rng.normal(size=n_rows)
    numbers[2:][rng.random(n_rows - 2) < 0.1] = np.nan  # the first two stay numbers: the column is kept
    numbers[2:][rng.random(n_rows - 2) < 0.05] = np.inf
    frame = pd.DataFrame({
        "distance": numbers,
        "count": rng.permutation(np.arange(n_rows) % 9),
        "zone": rng.permutation(np.array(["north", "south", "east", None] * n_rows, dtype=object)[:n_rows]),
        "express": rng.permutation(np.array(["yes", "no"] * n_rows)[:n_rows]),
        "minutes_late": rng.normal(size=n_rows),
    })
    prepared = prepare(frame, "minutes_late", encode=False)
    order = rng.permutation(n_rows)
    whole, _ = prepared.schema.encode(prepared.frame)
    np.testing.assert_array_equal(prepared.encode(order), whole[order])


def test_prepare_needs_at_least_two_rows_with_a_target():
    frame = pd.DataFrame({"x": [1, 2, 3], "y": [1.0, np.nan, np.nan]})
    with pytest.raises(DataError, match="only 1 row has a value for target 'y'"):
        prepare(frame, "y")


def test_unknown_target_lists_columns_and_a_close_match():
    with pytest.raises(DataError, match=r"^frame: target 'minutes_lat' is not a column \(did you mean 'minutes_late'\?\)"):
        prepare(deliveries(), "minutes_lat")


def test_duplicate_column_names_in_a_frame_are_refused():
    frame = pd.DataFrame([[1, 2, 3], [4, 5, 6]], columns=["a", "a", "y"])
    with pytest.raises(DataError, match="column 'a' appears twice"):
        prepare(frame, "y")


@pytest.mark.parametrize(
    ("values", "classes"),
    [
        (["no", "yes", "no", "yes"], ("no", "yes")),
        ([1, 0, 0, 1], ("0", "1")),
        ([True, False, True, False], ("False", "True")),
        (["cat", "dog", "dog", "cat"], ("cat", "dog")),
        (["positive", "negative", "negative", "positive"], ("negative", "positive")),
    ],
    ids=["yes", "one", "true", "sorted-second", "positive-word"],
)
def test_default_positive_class(values, classes):
    prepared = prepare(pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], "y": values}), "y")
    assert prepared.schema.task == "binary" and prepared.schema.classes == classes
    assert prepared.y.tolist() == [float(str(v) == classes[1]) for v in values]
    assert f"positive class of 'y' is {classes[1]!r} (negative: {classes[0]!r})" in prepared.notes


def test_explicit_positive_class_is_used():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": ["churned", "stayed", "stayed"]})
    prepared = prepare(frame, "y", positive="churned")
    assert prepared.schema.classes == ("stayed", "churned")
    assert prepared.y.tolist() == [1.0, 0.0, 0.0]


def test_positive_class_that_is_not_a_class_is_refused():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": ["a", "b", "b"]})
    with pytest.raises(DataError, match="positive class 'c' is not one of target 'y'"):
        prepare(frame, "y", positive="c")


def test_infinite_target_is_refused_with_the_count():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], "y": [1.0, np.inf, -np.inf, 2.0]})
    with pytest.raises(DataError, match=r"target 'y' is infinite in 2 rows"):
        prepare(frame, "y")


def test_constant_target_is_refused():
    with pytest.raises(DataError, match="target 'y' is constant"):
        prepare(pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": [4.0, 4.0, 4.0]}), "y")


def test_not_numeric_target_names_the_input_row_and_value():
    frame = pd.DataFrame({"x": range(20), "price": [str(v) for v in range(16)] + [None, "n/a", "3", "4"]})
    with pytest.raises(DataError) as caught:
        prepare(frame, "price", task="regression", source="data.csv")
    assert str(caught.value) == "data.csv: target 'price' is not numeric (row 18: 'n/a')"


def test_binary_task_with_three_classes_says_to_use_multiclass():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "y": ["a", "b", "c"]})
    with pytest.raises(DataError, match="target 'y' has 3 classes; a binary target has two .use task 'multiclass'"):
        prepare(frame, "y", task="binary")


def test_unknown_task_is_refused():
    with pytest.raises(DataError, match="unknown task 'ranking'"):
        prepare(deliveries(), "minutes_late", task="ranking")


def test_excluded_columns_get_a_note_but_ignored_ones_do_not():
    frame = pd.DataFrame({
        "order_id": [f"o{i}" for i in range(30)],
        "placed": pd.date_range("2024-01-01", periods=30).astype(str),
        "note": ["same"] * 30,
        "driver": [f"d{i}" for i in range(30)],
        "x": np.arange(30.0) % 11,
        "y": np.arange(30.0) % 7,
    })
    prepared = prepare(frame, "y", ignore=["driver"])
    assert prepared.schema.names == ["x"]
    joined = "\n".join(prepared.notes)
    assert "column 'order_id' is an id (a distinct value on every row), not a feature" in joined
    assert "column 'placed' is not a feature: it holds dates" in joined
    assert "column 'note' excluded: constant" in joined
    assert "driver" not in joined


def test_an_ignored_column_that_does_not_exist_is_noted_not_fatal():
    prepared = prepare(deliveries(), "minutes_late", ignore=["listing_id"])
    assert "ignored column 'listing_id' is not in the data" in prepared.notes


def test_non_text_column_names_become_text():
    frame = pd.DataFrame({0: [1.0, 2.0, 3.0], "y": [1.0, 2.0, 4.0]})
    assert prepare(frame, "y").schema.names == ["0"]


def test_features_are_the_exact_list_in_order():
    prepared = prepare(deliveries(), "minutes_late", features=["express", "distance"])
    assert prepared.schema.names == ["express", "distance"]
    assert prepared.matrix.shape == (4, 2)


def test_listed_feature_that_would_be_excluded_is_kept_as_categorical():
    frame = pd.DataFrame({"order_id": [f"o{i}" for i in range(25)], "y": np.arange(25.0)})
    prepared = prepare(frame, "y", features=["order_id"])
    assert prepared.schema.columns[0].role == CATEGORICAL
    assert len(prepared.schema.columns[0].levels) == 25


def test_listed_date_feature_is_refused():
    frame = pd.DataFrame({"when": ["2024-01-01", "2024-01-02", "2024-01-03"], "y": [1.0, 2.0, 3.0]})
    with pytest.raises(DataError, match="feature 'when' holds dates; dates are not features"):
        prepare(frame, "y", features=["when"])


def test_unknown_feature_is_named():
    with pytest.raises(DataError, match=r"feature 'distanse' is not a column \(did you mean 'distance'\?\)"):
        prepare(deliveries(), "minutes_late", features=["distanse"])


def test_no_usable_features_is_refused():
    frame = pd.DataFrame({"id": [f"r{i}" for i in range(30)], "y": np.arange(30.0)})
    with pytest.raises(DataError, match="no usable feature columns"):
        prepare(frame, "y")


def test_diabetes_frame_gives_ten_numeric_features_and_442_rows():
    # Source: scikit-learn's bundled diabetes data (Efron et al., 2004), sklearn.datasets.load_diabetes.
    from sklearn.datasets import load_diabetes

    frame = load_diabetes(as_frame=True).frame
    prepared = prepare(frame, "target")
    assert prepared.schema.task == "regression"
    assert len(prepared.schema.columns) == 10
    assert {c.role for c in prepared.schema.columns} == {NUMERIC}
    assert prepared.matrix.shape == (442, 10) and prepared.y.shape == (442,)
    assert prepared.notes == ()


def test_a_frame_with_10000_columns_and_5_rows_describes_and_prepares():
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(5, 10_000)), columns=[f"c{i}" for i in range(10_000)])
    frame["y"] = rng.normal(size=5)
    assert len(describe_columns(frame)) == 10_001
    assert prepare(frame, "y").matrix.shape == (5, 10_000)
