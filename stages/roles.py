"""Column roles: what each column of a table is to a chain, read from its values.

Column roles (``infer_role``), first rule that applies wins
    1. every value missing -> excluded ("every value is missing");
    2. a single distinct value -> excluded ("constant"), whatever the dtype;
    3. bool dtype, or text whose values are exactly two of true/false/yes/no (any case,
       one of each side) -> BOOLEAN; numeric 0/1 columns stay NUMERIC;
    4. numeric dtype -> NUMERIC;
    5. datetime dtype, or text where at least 95% of a sample of up to 500 values parses
       as a date (pure numbers never count as dates) -> DATETIME: not a feature, but
       usable to order rows by time;
    6. other text: every non-missing value unique with more than 20 of them -> ID; more
       than 1,000 distinct levels -> excluded; otherwise CATEGORICAL.
    An integer column with more than 20 rows, no missing value and values that strictly rise
    (or fall) down the file is an ID too: a row number, not a measurement.
    ID columns are not features; the first one names the rows (``Schema.id_column``) in
    views of single rows and in ``remnant predict --id``.
    Durations and cells holding lists or other unhashable objects are excluded.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from pandas.api import types as pdt

from .schema import BOOLEAN, CATEGORICAL, DATETIME, NUMERIC

EXCLUDED = "excluded"
ID = "id"
ID_NOTE = "a distinct value on every row: an id, not a feature"
MAX_LEVELS = 1_000
ID_MIN_ROWS = 20
DATE_SAMPLE = 500
DATE_SHARE = 0.95

_TRUE_WORDS = {"true", "yes"}
_FALSE_WORDS = {"false", "no"}


@dataclass(frozen=True)
class ColumnReport:
    """What ``describe_columns`` says about one column."""

    name: str
    role: str
    dtype: str
    n_missing: int
    n_unique: int
    examples: tuple[str, ...]
    note: str


def infer_role(values: pd.Series) -> tuple[str, str]:
    """Return the column's role (a schema role or ``"excluded"``) and a note saying why."""
    if plain_numeric(values.dtype):
        return _numeric_role(values.to_numpy())
    try:
        non_missing, uniques = _distinct(values)
    except TypeError:
        return EXCLUDED, _NOT_PLAIN
    return _role(values.dtype, non_missing, uniques, len(values))


def describe_columns(frame: pd.DataFrame) -> list[ColumnReport]:
    """Return one ColumnReport per column of ``frame``, in column order."""
    reports = []
    for j, name in enumerate(frame.columns):
        values = frame.iloc[:, j]
        text = _plain_numeric_report(values) or _arrow_text_report(values)
        if text is not None:
            reports.append(ColumnReport(str(name), text[0], str(values.dtype), *text[2:], text[1]))
            continue
        try:
            non_missing, uniques = _distinct(values)
            role, note = _role(values.dtype, non_missing, uniques, len(values))
        except TypeError:
            non_missing = uniques = values.dropna().to_numpy()
            role, note = EXCLUDED, _NOT_PLAIN
        examples = tuple(str(v) for v in uniques[:3])
        n_missing = len(values) - len(non_missing)
        reports.append(ColumnReport(str(name), role, str(values.dtype), n_missing, len(uniques), examples, note))
    return reports


def _plain_numeric_report(values: pd.Series) -> tuple[str, str, int, int, tuple[str, ...]] | None:
    """Return (role, note, missing, distinct, examples) of a plain numeric column, or None for any
    other: the rules above, with the distinct values counted by sorting (numpy lets go of the
    interpreter while it sorts; a hash of ten million numbers would hold it)."""
    if not plain_numeric(values.dtype):
        return None
    array = values.to_numpy()
    non_missing = array[~np.isnan(array)] if array.dtype.kind == "f" else array
    n, missing = len(non_missing), len(array) - len(non_missing)
    if n == 0:
        return EXCLUDED, "every value is missing", missing, 0, ()
    n_unique = len(np.unique(non_missing))
    first = pd.unique(non_missing[:10_000])
    if len(first) < min(3, n_unique):
        first = pd.unique(non_missing)
    examples = tuple(str(v) for v in first[:3])
    if n_unique == 1:
        return EXCLUDED, f"constant (every value is {first[0]!s})", missing, 1, examples
    role, note = _numbers_role(non_missing, len(array))
    return role, note, missing, n_unique, examples


def _arrow_text_report(values: pd.Series) -> tuple[str, str, int, int, tuple[str, ...]] | None:
    """Return (role, note, missing, distinct, examples) of a text column Arrow holds, or None for
    any other column: the same answer as the rules above, computed by Arrow's kernels, which let
    go of the interpreter while they work (a screen stays live while ten million texts are
    counted). Only the few values the rules look at become Python objects."""
    dtype = values.dtype
    if not (isinstance(dtype, pd.StringDtype) and dtype.storage == "pyarrow"):
        return None
    import pyarrow as pa
    import pyarrow.compute as pc

    present = pc.drop_null(pa.chunked_array(pa.array(values)))
    n, missing = len(present), len(values) - len(present)
    uniques = pc.unique(present)
    n_unique = len(uniques)
    examples = tuple(str(v) for v in uniques.slice(0, 3).to_pylist())
    if n == 0:
        return EXCLUDED, "every value is missing", missing, 0, ()
    if n_unique == 1:
        return EXCLUDED, f"constant (every value is {examples[0]!s})", missing, 1, examples
    if n_unique <= 8:
        words = {str(v).strip().lower() for v in uniques.to_pylist()}
        if len(words) == 2 and words & _TRUE_WORDS and words & _FALSE_WORDS:
            return BOOLEAN, "", missing, n_unique, examples
    step = max(1, n // DATE_SAMPLE)
    sample = present.take(pa.array(np.arange(0, n, step)[:DATE_SAMPLE])).to_numpy(zero_copy_only=False)
    if _looks_like_dates(sample):
        return DATETIME, "dates: usable to order rows by time", missing, n_unique, examples
    if _mostly_numbers(present.slice(0, 2000).to_numpy(zero_copy_only=False)):
        role, note = _text_role(present.to_numpy(zero_copy_only=False), uniques.to_numpy(zero_copy_only=False))
        return role, note, missing, n_unique, examples
    if n_unique == n and n > ID_MIN_ROWS:
        return ID, ID_NOTE, missing, n_unique, examples
    if n_unique > MAX_LEVELS:
        return EXCLUDED, f"{n_unique:,} distinct values (more than {MAX_LEVELS:,})", missing, n_unique, examples
    return CATEGORICAL, "", missing, n_unique, examples


_NOT_PLAIN = "holds lists or other values that are not plain"


def plain_numeric(dtype: object) -> bool:
    """Return True for numpy integer and float dtypes (not bool, not nullable or other extension types)."""
    return isinstance(dtype, np.dtype) and dtype.kind in "iuf"


def _numeric_role(array: np.ndarray) -> tuple[str, str]:
    """Return the role of a plain numeric column: the rules of ``_role`` without counting distinct
    values, which only matters for "constant" (a hash of every value costs seconds at 10 million rows)."""
    non_missing = array[~np.isnan(array)] if array.dtype.kind == "f" else array
    if len(non_missing) == 0:
        return EXCLUDED, "every value is missing"
    if np.all(non_missing == non_missing[0]):
        return EXCLUDED, f"constant (every value is {pd.unique(non_missing[:1])[0]!s})"
    if len(non_missing) == len(array) and _counts_rows(array):
        return ID, ID_NOTE
    return NUMERIC, ""


def _counts_rows(array: np.ndarray) -> bool:
    """Return True for more than ID_MIN_ROWS integers that strictly rise or fall: row numbers.
    Floats never count: whole numbers stored as floats are more often measurements."""
    if len(array) <= ID_MIN_ROWS or array.dtype.kind not in "iu":
        return False
    steps = np.diff(array)
    return bool(np.all(steps > 0) or np.all(steps < 0))


def _distinct(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Return the non-missing values of a column and its distinct values, in order seen."""
    array = values.to_numpy()
    non_missing = array[~pd.isna(array)]
    return non_missing, pd.unique(non_missing)


def _numbers_role(non_missing: np.ndarray, n_rows: int | None) -> tuple[str, str]:
    """Return ID for row numbers (no value missing), else NUMERIC."""
    if n_rows is not None and len(non_missing) == n_rows:
        numbers = pd.Series(non_missing).infer_objects().to_numpy()
        if numbers.dtype.kind in "iu" and _counts_rows(numbers):
            return ID, ID_NOTE
    return NUMERIC, ""


def _role(dtype: object, non_missing: np.ndarray, uniques: np.ndarray, n_rows: int | None = None) -> tuple[str, str]:
    if len(non_missing) == 0:
        return EXCLUDED, "every value is missing"
    if len(uniques) == 1:
        return EXCLUDED, f"constant (every value is {uniques[0]!s})"
    if pdt.is_bool_dtype(dtype):
        return BOOLEAN, ""
    if pdt.is_object_dtype(dtype):
        inferred = pd.Series(non_missing).infer_objects().dtype
        if pdt.is_numeric_dtype(inferred) and not pdt.is_bool_dtype(inferred):
            return _numbers_role(non_missing, n_rows)
    if pdt.is_numeric_dtype(dtype):
        return _numbers_role(non_missing, n_rows)
    if pdt.is_datetime64_any_dtype(dtype):
        return DATETIME, "dates: usable to order rows by time"
    if pdt.is_timedelta64_dtype(dtype):
        return EXCLUDED, "durations are not supported (convert them to numbers)"
    return _text_role(non_missing, uniques)


def _mostly_numbers(values: np.ndarray) -> bool:
    """Return True when at least 95% of ``values`` (text) read as numbers, but not all."""
    if len(values) == 0:
        return False
    stray = pd.to_numeric(pd.Series(values), errors="coerce").isna().to_numpy()
    return bool(stray.any() and stray.mean() <= 0.05)


def _text_role(non_missing: np.ndarray, uniques: np.ndarray) -> tuple[str, str]:
    if len(uniques) <= 8:
        words = set(pd.Series(uniques).astype("string").str.strip().str.lower())
        if len(words) == 2 and words & _TRUE_WORDS and words & _FALSE_WORDS:
            return BOOLEAN, ""
    if _looks_like_dates(non_missing):
        return DATETIME, "dates: usable to order rows by time"
    if _mostly_numbers(non_missing[:2000]) and _mostly_numbers(non_missing):
        stray = pd.to_numeric(pd.Series(non_missing), errors="coerce").isna().to_numpy()
        example = non_missing[np.flatnonzero(stray)[0]]
        return NUMERIC, f"numbers with {int(stray.sum()):,} text values such as {example!r} (treated as missing)"
    if len(uniques) == len(non_missing) and len(non_missing) > ID_MIN_ROWS:
        return ID, ID_NOTE
    if len(uniques) > MAX_LEVELS:
        return EXCLUDED, f"{len(uniques):,} distinct values (more than {MAX_LEVELS:,})"
    return CATEGORICAL, ""


def _looks_like_dates(non_missing: np.ndarray) -> bool:
    """Return True when at least 95% of an even sample of the values parses as a date."""
    step = max(1, len(non_missing) // DATE_SAMPLE)
    sample = pd.Series(non_missing[::step][:DATE_SAMPLE]).astype("string")
    if sample.str.contains(r"\d", regex=True).mean() < DATE_SHARE:
        return False
    is_number = pd.to_numeric(sample, errors="coerce").notna().to_numpy()
    if is_number.mean() > 1 - DATE_SHARE:
        return False
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            parsed = pd.to_datetime(sample, errors="coerce", format="mixed", utc=True)
    except (ValueError, TypeError, OverflowError):
        return False
    is_date = parsed.notna().to_numpy() & ~is_number
    return bool(is_date.mean() >= DATE_SHARE)
