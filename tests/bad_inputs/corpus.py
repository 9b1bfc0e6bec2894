"""The corpus of bad inputs: each one built on demand in a folder, with the handling remnant documents.

Every entry is a small file made from one good table (``x1``, ``x2``, ``colour`` and the target
``y``, 60 rows), broken in one way; the big ones (10,000 columns, a category with 100,000
levels) are generated, never committed. Each entry says what fitting on it does, through every
path (the Python facade, ``remnant fit``, the workbench's setup screen):

* ``error``: the words the one-line error must contain (a DataError from the facade; status 2
  and one ``error:`` line from the command line), or
* ``handling``: what remnant does instead, with the words of the note that says so (if any),
  the rows kept and the features used.

and what ``remnant predict`` with a chain fit on the good table does on it (``predict_error``,
or empty when it writes one prediction per row). An entry with ``pending`` is a handling not yet
met: its tests are expected to fail, strictly, until the reason given is fixed.

``corpus_entries()`` returns the entries; ``build_corpus(folder)`` writes them all.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

TARGET = "y"
ROWS = 60
GOOD_NAME = "good.csv"


@dataclass(frozen=True)
class Entry:
    """One bad input: how to build it and what remnant does with it."""

    name: str                          # short id, also the test id
    input: str                         # the input, as the documentation table names it
    build: Callable[[Path], Path]      # writes the input into a folder and returns its path
    error: tuple[str, ...] = ()        # words of the one-line error when fitting; empty when handled
    handling: str = ""                 # what remnant does instead of failing (for the documentation)
    note: tuple[str, ...] = ()         # words one note of a handled input must contain, when it gives one
    rows: int | None = None            # rows the chain keeps (handled inputs)
    features: int | None = None        # features the chain uses (handled inputs)
    predict_error: tuple[str, ...] = ()  # words of the error `remnant predict` gives; empty: it predicts
    data_rows: int = ROWS              # data rows in the file (the predictions `remnant predict` writes)
    target: str = TARGET
    needs_permissions: bool = False    # meaningful only where permissions hold (not as root)
    pending: str = ""                  # why the documented fit handling is not met yet (tests xfail strictly)
    predict_pending: str = ""          # the same for `remnant predict`

    @property
    def is_error(self) -> bool:
        """Return True when fitting on this input must fail with a clear message."""
        return bool(self.error)


def good_frame(rows: int = ROWS) -> pd.DataFrame:
    """Return the good table: two numeric features, a three-level category and a numeric target."""
    rng = np.random.RandomState(7)
    frame = pd.DataFrame({"x1": rng.normal(size=rows).round(4), "x2": rng.uniform(0, 10, rows).round(3),
                          "colour": rng.choice(["red", "green", "blue"], rows)})
    frame[TARGET] = (2 * frame.x1 + frame.x2 + (frame.colour == "red") + rng.normal(scale=0.3, size=rows)).round(4)
    return frame


# ----------------------------------------------------------------------------- builders
def _csv(name: str, change: Callable[[pd.DataFrame], pd.DataFrame] = lambda f: f, **options) -> Callable[[Path], Path]:
    def build(folder: Path) -> Path:
        path = folder / name
        change(good_frame()).to_csv(path, index=False, **options)
        return path
    return build


def _text(name: str, text: Callable[[], str | bytes]) -> Callable[[Path], Path]:
    def build(folder: Path) -> Path:
        path = folder / name
        content = text()
        path.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
        return path
    return build


def _good_lines() -> list[str]:
    return good_frame().to_csv(index=False).splitlines()


def _set(column: str, rows: slice | list[int], value: object) -> Callable[[pd.DataFrame], pd.DataFrame]:
    def change(frame: pd.DataFrame) -> pd.DataFrame:
        frame = frame.astype({column: object})
        frame.loc[rows, column] = value
        return frame
    return change


def _with(column: str, values: Callable[[int], list]) -> Callable[[pd.DataFrame], pd.DataFrame]:
    def change(frame: pd.DataFrame) -> pd.DataFrame:
        frame.insert(3, column, values(len(frame)))
        return frame
    return change


def _wide(folder: Path) -> Path:
    """Write the good table plus 9,996 numeric columns: 10,000 columns in all."""
    frame = good_frame(30)
    noise = np.random.RandomState(1).normal(size=(30, 9_996)).round(3)
    extra = pd.DataFrame(noise, columns=[f"c{i:04d}" for i in range(9_996)])
    path = folder / "wide.csv"
    pd.concat([frame, extra], axis=1).to_csv(path, index=False)
    return path


def _many_levels(folder: Path) -> Path:
    """Write 120,000 rows whose ``shop`` column has 100,000 distinct levels (some repeated)."""
    rows = 120_000
    rng = np.random.RandomState(3)
    frame = pd.DataFrame({"x1": rng.normal(size=rows).round(3), "x2": rng.uniform(0, 10, rows).round(2),
                          "colour": rng.choice(["red", "green", "blue"], rows)})
    frame["shop"] = [f"S{i % 100_000:06d}" for i in range(rows)]
    frame[TARGET] = (frame.x1 + frame.x2 + rng.normal(scale=0.3, size=rows)).round(3)
    path = folder / "levels.csv"
    frame.to_csv(path, index=False)
    return path


def _nested_parquet(folder: Path) -> Path:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pandas(good_frame(), preserve_index=False)
    table = table.append_column("tags", pa.array([[i, i + 1] for i in range(ROWS)]))
    path = folder / "nested.parquet"
    pq.write_table(table, path)
    return path


def _missing(folder: Path) -> Path:
    return folder / "absent.csv"


def _folder(folder: Path) -> Path:
    path = folder / "folder.csv"
    path.mkdir(exist_ok=True)
    return path


def _unreadable(folder: Path) -> Path:
    path = _csv("locked.csv")(folder)
    os.chmod(path, 0)
    return path


def _mixed_endings() -> str:
    endings = ("\r\n", "\n", "\r")
    return "".join(line + endings[i % 3] for i, line in enumerate(_good_lines()))


def _quoted_newlines(frame: pd.DataFrame) -> pd.DataFrame:
    frame.insert(3, "remark", ["late\nagain" if i % 4 == 0 else "on time" for i in range(len(frame))])
    return frame


def _three_classes(frame: pd.DataFrame) -> pd.DataFrame:
    frame[TARGET] = ["small", "medium", "large"] * (len(frame) // 3)
    return frame


def _rare_class(frame: pd.DataFrame) -> pd.DataFrame:
    """Give the target six classes, one of them ("aa", first in class order) on one row only.

    Class sizes 1, 11, 11, 11, 11 and 15: the stratified holdout of 12 rows gives each class its
    whole share and the one left over to the first class whose share had the largest remainder,
    "aa": its only row goes to validation, none is left to fit on.
    """
    labels = ["aa"] + ["b"] * 11 + ["c"] * 11 + ["d"] * 11 + ["e"] * 11 + ["f"] * 15
    frame[TARGET] = np.random.RandomState(5).permutation(labels)
    return frame


def _many_classes(folder: Path) -> Path:
    """Write 202 rows whose target has 101 classes, two rows each."""
    frame = good_frame(202)
    frame[TARGET] = [f"k{i:03d}" for i in range(101)] * 2
    path = folder / "classes101.csv"
    frame.to_csv(path, index=False)
    return path


def _dates(n: int) -> list[str]:
    return list(pd.date_range("2025-01-01", periods=n, freq="D").strftime("%Y-%m-%d"))


def _latin1() -> bytes:
    return ("\n".join(_good_lines()[:20]).replace("red", "rouge caf\xe9", 1) + "\n").encode("latin-1")


def _ragged() -> str:
    lines = _good_lines()
    lines[3] = lines[3] + ",extra"
    return "\n".join(lines) + "\n"


# ----------------------------------------------------------------------------- the entries
_ENTRIES = (
    Entry("empty", "an empty file", _text("empty.csv", lambda: b""), error=("empty.csv", "the file is empty"),
          predict_error=("the file is empty",)),
    Entry("header_only", "a header and no rows", _text("header.csv", lambda: "x1,x2,colour,y\n"),
          error=("header.csv", "has a header but no rows"), predict_error=("has a header but no rows",)),
    Entry("single_row", "a single row", _text("one.csv", lambda: "\n".join(_good_lines()[:2]) + "\n"),
          error=("one.csv", "only 1 row has a value for target 'y'"), data_rows=1),
    Entry("semicolons", "semicolons as the delimiter", _csv("semicolons.csv", sep=";"),
          handling="the delimiter is detected (comma, semicolon, tab or bar) and the file reads as usual", rows=ROWS, features=3),
    Entry("tabs", "tabs as the delimiter", _csv("tabs.csv", sep="\t"),
          handling="the delimiter is detected and the file reads as usual", rows=ROWS, features=3),
    Entry("colons", "an undetected delimiter (colons)", _csv("colons.csv", sep=":"),
          error=("target 'y' is not a column",), predict_error=("column 'x1' is missing",)),
    Entry("bom", "a byte-order mark", _text("bom.csv", lambda: "\ufeff" + "\n".join(_good_lines()) + "\n"),
          handling="the mark is removed: the first column keeps its name", rows=ROWS, features=3),
    Entry("mixed_endings", "mixed line endings (CRLF, LF and CR)", _text("endings.csv", _mixed_endings),
          handling="every line ending is read as one: all rows are kept", rows=ROWS, features=3),
    Entry("cr_only", "old Mac line endings (CR only)", _text("cr.csv", lambda: "\r".join(_good_lines()) + "\r"),
          handling="every line ending is read as one: all rows are kept", rows=ROWS, features=3),
    Entry("quoted_newlines", "quoted newlines inside a field", _csv("quoted.csv", _quoted_newlines),
          handling="a quoted field keeps its newline and stays one value: rows are counted right",
          rows=ROWS, features=4),
    Entry("long_header", "a header field longer than 131,072 characters",
          _text("long_header.csv", lambda: "\n".join(["x1,x2,colour," + "y" * 140_000, *_good_lines()[1:]]) + "\n"),
          error=("long_header.csv", "longer than 131,072 characters"), predict_error=("longer than 131,072",)),
    Entry("duplicate_names", "duplicate column names",
          _text("duplicates.csv", lambda: "\n".join(["x1,x1,colour,y", *_good_lines()[1:]]) + "\n"),
          error=("duplicates.csv", "column 'x1' appears twice in the header"),
          predict_error=("column 'x1' appears twice",)),
    Entry("constant_target", "a target that is constant", _csv("constant.csv", _set(TARGET, slice(None), 3.5)),
          error=("constant.csv", "target 'y' is constant")),
    Entry("nan_target", "a target that is all missing (NaN)", _csv("nan_target.csv", _set(TARGET, slice(None), np.nan)),
          error=("nan_target.csv", "only 0 rows have a value for target 'y'")),
    Entry("partly_nan_target", "a target that is partly missing", _csv("partly_nan.csv", _set(TARGET, slice(0, 9), np.nan)),
          handling="rows with a missing target are dropped, with a note", note=("dropped 10 rows whose target 'y' is missing",),
          rows=ROWS - 10, features=3),
    Entry("infinite_target", "an infinite target", _csv("inf_target.csv", _set(TARGET, [4], np.inf)),
          error=("inf_target.csv", "target 'y' is infinite in 1 row")),
    Entry("infinite_feature", "an infinite value in a feature", _csv("inf_feature.csv", _set("x1", [4], -np.inf)),
          handling="the infinite value is treated as missing, with a note naming the column",
          note=("column 'x1'", "-inf"), rows=ROWS, features=3),
    Entry("huge_feature", "a feature value beyond float32 (1e300)", _csv("huge_feature.csv", _set("x1", [4], 1e300)),
          handling="the value is treated as missing, like an infinity, with a note naming the column",
          note=("column 'x1'", "1e+300"), rows=ROWS, features=3),
    Entry("text_in_target", "text in the numeric target", _csv("text_target.csv", _set(TARGET, [7], "unknown")),
          error=("text_target.csv", "target 'y' is not numeric (row 8: 'unknown')")),
    Entry("text_in_feature", "text in a numeric feature column", _csv("text_feature.csv", _set("x1", [7], "abc")),
          handling="the column stays numeric; the stray text is treated as missing, with a note naming it",
          note=("'x1'", "'abc'"), rows=ROWS, features=3),
    Entry("three_classes", "a target with three classes", _csv("classes.csv", _three_classes),
          handling="a multiclass chain (multinomial log loss), with a note listing the classes in their stored order",
          note=("classes of 'y', in their stored order: 'large', 'medium', 'small'",), rows=ROWS, features=3),
    Entry("many_classes", "a target with 101 classes", _many_classes,
          error=("classes101.csv", "target 'y' has 101 classes; a multiclass target may have at most 100",
                 "group rare levels"), data_rows=202),
    Entry("class_only_in_validation", "a class whose only row falls in the validation part",
          _csv("rare_class.csv", _rare_class),
          error=("rare_class.csv", "class 'aa' of target 'y' has no row among the train rows",
                 "its 1 row is in the validation or test part")),
    Entry("no_features", "no usable feature (every other column constant)",
          _csv("no_features.csv", lambda f: f.assign(x1=1.0, x2=2.0, colour="red")),
          error=("no_features.csv", "no usable feature columns")),
    Entry("wide", "10,000 columns", _wide,
          handling="every column is a feature (one float64 matrix column each)", rows=30, features=9_999, data_rows=30),
    Entry("id_column", "a column of unique strings (an ID)",
          _csv("ids.csv", _with("order_id", lambda n: [f"ORD-{i:05d}" for i in range(n)])),
          handling="the id column is not a feature, with a note", note=("column 'order_id' is an id (a distinct value on every row), not a feature",),
          rows=ROWS, features=3),
    Entry("dates_as_text", "dates as text", _csv("dates.csv", _with("ordered", _dates)),
          handling="the date column is not a feature (it can order rows for time validation), with a note",
          note=("column 'ordered' is not a feature: it holds dates",), rows=ROWS, features=3),
    Entry("many_levels", "a category with 100,000 levels", _many_levels,
          handling="the column is excluded (more than 1,000 levels), with a note",
          note=("column 'shop' excluded: 100,000 distinct values (more than 1,000)",),
          rows=120_000, features=3, data_rows=120_000),
    Entry("nested_parquet", "a Parquet file with nested types (lists)", _nested_parquet,
          error=("nested.parquet", "column 'tags' holds nested values")),
    Entry("not_utf8", "text that is not UTF-8 (Latin-1)", _text("latin1.csv", _latin1),
          error=("latin1.csv", "not UTF-8", "byte 0xe9"), predict_error=("not UTF-8",)),
    Entry("ragged_rows", "a row with more fields than the header", _text("ragged.csv", _ragged),
          error=("ragged.csv", "line 4 has 5 fields, but the header has 4"),
          predict_error=("ragged.csv", "has 5 fields, but the header has 4")),
    Entry("missing_file", "a file that does not exist", _missing, error=("absent.csv", "no such file"),
          predict_error=("absent.csv", "no such file")),
    Entry("folder", "a folder instead of a file", _folder, error=("folder.csv", "is a folder"),
          predict_error=("folder.csv", "is a folder")),
    Entry("unreadable", "a file without read permission", _unreadable, error=("locked.csv", "permission denied"),
          predict_error=("locked.csv", "permission denied"), needs_permissions=True),
)


# ----------------------------------------------------------------------------- weights, exposure, count targets
@dataclass(frozen=True)
class RowSettingEntry:
    """A bad weight, exposure or count target: the good table with a ``months`` exposure, an
    ``alarms`` count and a ``w`` weight column, broken in one way, fitted with ``settings``."""

    name: str
    input: str
    build: Callable[[Path], Path]
    settings: dict
    error: tuple[str, ...]


def count_frame(rows: int = ROWS) -> pd.DataFrame:
    """Return the good table with a positive ``months`` exposure, a count ``alarms`` and a weight ``w``."""
    frame = good_frame(rows).drop(columns=TARGET)
    rng = np.random.RandomState(11)
    frame["months"] = rng.uniform(1, 12, rows).round(2)
    frame["alarms"] = rng.poisson(frame["months"] * 0.3)
    frame["w"] = rng.uniform(0.5, 2.0, rows).round(3)
    return frame


def _counts_csv(name: str, change: Callable[[pd.DataFrame], pd.DataFrame]) -> Callable[[Path], Path]:
    def build(folder: Path) -> Path:
        path = folder / name
        frame = count_frame()
        change(frame).to_csv(path, index=False)
        return path
    return build


def _count_set(column: str, rows: list[int], value: object) -> Callable[[pd.DataFrame], pd.DataFrame]:
    def change(frame: pd.DataFrame) -> pd.DataFrame:
        frame = frame.astype({column: object})
        frame.loc[rows, column] = value
        return frame
    return change


_POISSON = {"loss": "poisson", "target": "alarms"}
_ROW_SETTING_ENTRIES = (
    RowSettingEntry("negative_weight", "a negative weight", _counts_csv("neg_weight.csv", _count_set("w", [4], -1.5)),
                    {**_POISSON, "weight": "w"}, ("neg_weight.csv", "weight column 'w' is negative in row 5 (-1.5)")),
    RowSettingEntry("missing_weight", "a missing weight", _counts_csv("nan_weight.csv", _count_set("w", [2, 9], None)),
                    {**_POISSON, "weight": "w"},
                    ("nan_weight.csv", "weight column 'w' is missing or not a finite number in 2 rows (first: row 3)")),
    RowSettingEntry("zero_weights", "weights that are all zero", _counts_csv("zero_weights.csv",
                                                                             _count_set("w", list(range(ROWS)), 0.0)),
                    {**_POISSON, "weight": "w"}, ("zero_weights.csv", "weight column 'w' is zero in every row")),
    RowSettingEntry("zero_exposure", "an exposure of zero", _counts_csv("zero_exposure.csv", _count_set("months", [7], 0.0)),
                    {**_POISSON, "exposure": "months"},
                    ("zero_exposure.csv", "exposure column 'months' must be a positive number; 1 row is not (first: row 8, 0)")),
    RowSettingEntry("missing_exposure", "a missing exposure", _counts_csv("nan_exposure.csv",
                                                                          _count_set("months", [0], None)),
                    {**_POISSON, "exposure": "months"},
                    ("nan_exposure.csv", "exposure column 'months' must be a positive number; 1 row is not (first: row 1, missing)")),
    RowSettingEntry("negative_count", "a negative count (poisson or tweedie)",
                    _counts_csv("neg_count.csv", _count_set("alarms", [3, 4, 5], -1)), dict(_POISSON),
                    ("neg_count.csv", "target 'alarms': 3 rows are negative; loss 'poisson' needs counts or amounts of zero or more")),
    RowSettingEntry("zero_amount", "a zero amount (gamma)", _counts_csv("zero_amount.csv", lambda f: f), {"loss": "gamma", "target": "alarms"},
                    ("zero_amount.csv", "rows are zero or negative; loss 'gamma' needs positive amounts")),
)


def row_setting_entries() -> list[RowSettingEntry]:
    """Return the bad weights, exposures and count targets, in the order the documentation lists them."""
    return list(_ROW_SETTING_ENTRIES)


def corpus_entries() -> list[Entry]:
    """Return every entry of the corpus, in the order the documentation lists them."""
    return list(_ENTRIES)


def build_corpus(folder: str | os.PathLike) -> dict[str, Path]:
    """Write every entry (and ``good.csv``, the table they are broken from) into ``folder``; return
    each entry's path by name."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    good_frame().to_csv(folder / GOOD_NAME, index=False)
    return {entry.name: entry.build(folder) for entry in _ENTRIES}


def permissions_hold() -> bool:
    """Return True when file permissions stop this process (not so for root)."""
    return not (hasattr(os, "geteuid") and os.geteuid() == 0)


def pytest_params(path: str = "fit") -> list:
    """Return the entries as pytest parameters for ``path`` ("fit" or "predict"): pending ones xfail
    strictly, permission ones skip as root."""
    import pytest

    params = []
    for entry in _ENTRIES:
        marks = []
        pending = entry.pending if path == "fit" else entry.predict_pending
        if pending:
            marks.append(pytest.mark.xfail(strict=True, reason=pending))
        if entry.needs_permissions and not permissions_hold():
            marks.append(pytest.mark.skip(reason="root ignores file permissions"))
        params.append(pytest.param(entry, id=entry.name, marks=marks))
    return params
