"""The stage table as text and CSV: aligned, four significant digits, flags as words."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd

from tui.table_text import format_csv, format_table


def small_table() -> pd.DataFrame:
    return pd.DataFrame({
        "stage": [0, 1, 2], "kind": ["start", "linear", "lightgbm"], "shrinkage": [np.nan, 1.0, 0.5],
        "features": ["", "all", "age,bmi"], "train_rmse": [74.9183, 51.5, 48.25], "valid_rmse": [83.49, 58.82, 59.1],
        "change": [np.nan, -24.6689, 0.28], "valid_r2": [-0.0208, 0.4933, 0.4887], "seconds": [0.0, 0.004, 1.5],
        "overfit": [False, False, True], "best": [False, True, False],
    })


def test_the_text_table_aligns_numbers_right_and_marks_best_and_overfit():
    lines = format_table(small_table()).splitlines()
    assert lines[0].split() == ["stage", "kind", "shrink", "train", "rmse", "valid", "rmse", "change", "valid", "r2",
                                "features", "secs", "flags"]
    header_end = lines[0].index("train rmse") + len("train rmse")
    assert [line[header_end - 6:header_end] for line in lines[1:]] == [" 74.92", " 51.50", " 48.25"]
    assert lines[2].endswith("best") and lines[3].endswith("overfit")
    assert "-24.67" in lines[2] and "+0.28" in lines[3]  # one style per column: the largest value's four digits


def test_the_csv_table_reads_back_to_the_same_numbers():
    table = small_table()
    back = pd.read_csv(io.StringIO(format_csv(table)))
    assert np.array_equal(back["train_rmse"], table["train_rmse"])
    assert back["best"].tolist() == [False, True, False]  # written as true/false, read by pandas as booleans
