"""The data layer: read files, infer column roles and the task, and build the feature matrix.

Reading
    ``read_table`` reads CSV (``.csv``, ``.tsv``, ``.txt``, ``.csv.gz`` and any unknown
    extension) and Parquet (``.parquet``, ``.pq``). The CSV delimiter is sniffed among
    ``, ; TAB |``; text must be UTF-8 (a byte-order mark is removed). Every problem a user
    can fix is a ``DataError`` whose one-line message names the file, the column and the value.

Column roles (``infer_role``)
    See ``stages/roles.py``: excluded, id, dates, boolean, numeric or categorical, from the values.

Task (``infer_task``)
    bool dtype, numeric values exactly {0, 1}, or exactly two distinct strings -> binary;
    other numbers (or text that is mostly numbers) -> regression; text (or a pandas Categorical)
    with 3 to MAX_CLASSES (100) classes -> multiclass; more classes -> DataError suggesting to
    group levels. A numeric target with a few values is a regression unless ``task="multiclass"``.

Classes (``class_order``)
    A binary target's classes are its negative then its positive class. A multiclass target's
    classes are stored in a fixed order, the order of a categorical column's levels
    (``schema.py``): an ordered pandas Categorical's own order; classes that all read as numbers
    sorted by value (so "10" follows "2"); others sorted as text. Whole numbers are written
    without ".0". The class codes 0 .. K - 1 of ``y`` and the columns of ``predict_proba`` follow it.
"""

from __future__ import annotations

import difflib
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import get_args

import numpy as np
import pandas as pd
from pandas.api import types as pdt

from .dates import DATE_PARTS, derived_name
from .errors import DataError, SchemaError
from .limits import MAX_CLASSES
from .reading import check_duplicates, load_frame, read_table, source_name
from .roles import EXCLUDED, ID, infer_role, plain_numeric
from .schema import (
    BOOLEAN,
    CATEGORICAL,
    DATETIME,
    NUMERIC,
    ColumnInfo,
    Schema,
    Task,
    beyond_float32,
)

TASKS: tuple[Task, ...] = get_args(Task)
_POSITIVE_WORDS = ("1", "true", "yes", "y", "positive")

# ----------------------------------------------------------------------------- task


def infer_task(values: pd.Series, *, source: str = "data", target: str = "") -> Task:
    """Return ``"regression"``, ``"binary"`` or ``"multiclass"`` for a target column; DataError for a
    target with more than MAX_CLASSES classes, a single value, or dates."""
    non_missing = values.dropna()
    label = f"target {target!r}" if target else "the target"
    if len(non_missing) == 0:
        raise DataError(f"{source}: {label} has no values (every row is missing)")
    if pdt.is_bool_dtype(values.dtype):
        return "binary"
    if pdt.is_datetime64_any_dtype(values.dtype) or pdt.is_timedelta64_dtype(values.dtype):
        raise DataError(f"{source}: {label} holds dates or durations; a target must be numbers or classes")
    if isinstance(values.dtype, pd.CategoricalDtype):
        return _class_task(non_missing.astype("string").nunique(), non_missing, source, label)
    if plain_numeric(values.dtype):
        array = non_missing.to_numpy()
        zero, one = array == 0, array == 1
        return "binary" if bool(np.all(zero | one)) and zero.any() and one.any() else "regression"
    numbers = pd.to_numeric(non_missing, errors="coerce")
    if numbers.notna().all():
        return "binary" if set(pd.unique(numbers.to_numpy())) == {0, 1} else "regression"
    n_classes = non_missing.astype("string").nunique()
    if n_classes == 2:
        return "binary"
    if numbers.notna().mean() > 0.5:
        return "regression"
    return _class_task(n_classes, non_missing, source, label)


def _class_task(n_classes: int, non_missing: pd.Series, source: str, label: str) -> Task:
    if n_classes < 2:
        raise DataError(f"{source}: {label} has a single value ({non_missing.iloc[0]!r}); nothing to predict")
    if n_classes == 2:
        return "binary"
    if n_classes > MAX_CLASSES:
        raise _too_many_classes(source, label, n_classes)
    return "multiclass"


def _too_many_classes(source: str, label: str, n_classes: int) -> DataError:
    return DataError(f"{source}: {label} has {n_classes:,} classes; a multiclass target may have at most "
                     f"{MAX_CLASSES} (group rare levels into fewer classes, or predict it as a number)")


# ----------------------------------------------------------------------------- prepare


@dataclass
class Prepared:
    """A frame ready for a chain: its schema, feature matrix, target and the rows kept.

    ``frame`` is the rows kept, renumbered from 0; when no row was dropped it shares the given
    frame's memory instead of copying it. ``features_inferred`` is True when the features are
    the ones inference picks (so a recipe need not list them).
    """

    schema: Schema
    matrix: np.ndarray | None
    y: np.ndarray
    rows: np.ndarray
    frame: pd.DataFrame
    notes: tuple[str, ...]
    features_inferred: bool = True
    source: str = "frame"

    def encode(self, order: np.ndarray | None = None) -> np.ndarray:
        """Return the feature matrix of the kept rows (in ``order``, positions among them, when
        given), noting values treated as missing; DataError for a column that cannot be encoded."""
        try:
            matrix, unusable = self.schema.encode(self.frame, source=self.source, rows=order)
        except SchemaError as err:
            raise DataError(str(err)) from None
        self.notes = self.notes + tuple(_unusable_note(self.frame[name], name, count)
                                        for name, count in unusable.items())
        return matrix


def prepare(
    frame: pd.DataFrame,
    target: str,
    *,
    ignore: Sequence[str] = (),
    features: Sequence[str] | None = None,
    task: str | None = None,
    positive: str | None = None,
    source: str = "frame",
    encode: bool = True,
    dates: Mapping[str, Sequence[str]] | None = None,
) -> Prepared:
    """Return the Prepared data for fitting a chain on ``frame`` to predict ``target``.

    Rows with a missing target are dropped; features default to every usable column
    other than the target and ``ignore``. Raises DataError for anything unusable. With
    ``encode=False`` the matrix is left for ``Prepared.encode`` (which can gather the rows in
    another order as it fills the matrix). ``dates`` maps date columns to the parts of them
    that become features (``dates.DATE_PARTS``), after the other features.
    """
    frame = _string_columns(frame, source)
    _require_columns([target], frame, source, what="target")
    notes = [f"ignored column {name!r} is not in the data" for name in ignore if name not in frame.columns]
    rows = _rows_with_target(frame[target], target, source, notes)
    kept = _kept_rows(frame, rows)
    values = kept[target]
    if task is None:
        task = infer_task(values, source=source, target=target)
    if task not in TASKS:
        raise DataError(f"{source}: unknown task {task!r} (use 'regression', 'binary' or 'multiclass')")
    classes: tuple[str, ...] = ()
    if task == "regression":
        y = _regression_target(values, rows, target, source)
    elif task == "multiclass":
        y, classes = _multiclass_target(values, target, source, notes)
    else:
        y, classes = _binary_target(values, target, positive, source, notes)
    derived = _date_features(kept, dates or {}, target, source, notes)
    if features is not None:
        features = [name for name in features if name not in {c.name for c in derived}]
    columns = _feature_columns(kept, target, set(ignore), features, source, notes, bool(derived)) + derived
    schema = Schema(tuple(columns), target, task, classes, tuple(notes),
                    id_column=_id_column(kept, target, [c.name for c in columns]))
    inferred = features is None or _inferred_names(kept, target, set(ignore)) == [
        c.name for c in columns if not c.date_column]
    prepared = Prepared(schema, None, y, rows, kept, tuple(notes), inferred, source)
    if encode:
        prepared.matrix = prepared.encode()
    return prepared


def _kept_rows(frame: pd.DataFrame, rows: np.ndarray) -> pd.DataFrame:
    """Return the rows of ``frame`` at ``rows``, numbered from 0; without copying when every row is kept."""
    if len(rows) < len(frame):
        return frame.iloc[rows].reset_index(drop=True)
    if isinstance(frame.index, pd.RangeIndex) and frame.index.start == 0 and frame.index.step == 1:
        return frame
    renumbered = frame.copy(deep=False)  # shares the columns' memory; only the index is new
    renumbered.index = pd.RangeIndex(len(frame))
    return renumbered


def _inferred_names(kept: pd.DataFrame, target: str, ignore: set[str]) -> list[str]:
    """Return the names of the columns inference would pick as features."""
    return [name for name in kept.columns if name != target and name not in ignore
            and infer_role(kept[name])[0] not in (EXCLUDED, DATETIME, ID)]


def _unusable_note(values: pd.Series, name: str, count: int) -> str:
    """Return the note for a numeric column whose text, infinite or too large values were treated as missing."""
    numbers = pd.to_numeric(values, errors="coerce")
    odd = (numbers.isna() & values.notna()).to_numpy() | beyond_float32(numbers.to_numpy(dtype=np.float64,
                                                                                           na_value=np.nan))
    first = int(np.flatnonzero(odd)[0]) if odd.any() else 0
    what = "value that is not a number" if count == 1 else "values that are not numbers"
    example = values.iloc[first]
    shown = repr(float(example)) if isinstance(example, float | np.floating) else repr(example)
    return (f"column {name!r}: {count:,} {what} the chain can use (such as {shown} in row {first + 1}; "
            f"text, infinity or beyond ±3.4e38) treated as missing")


def _string_columns(frame: pd.DataFrame, source: str) -> pd.DataFrame:
    """Return ``frame`` with text column names; DataError for a duplicated name."""
    if not isinstance(frame, pd.DataFrame):
        raise DataError(f"{source}: expected a pandas DataFrame, got {type(frame).__name__}")
    names = [str(c) for c in frame.columns]
    check_duplicates(names, source)
    if any(not isinstance(c, str) for c in frame.columns):
        frame = frame.set_axis(names, axis=1)
    return frame


def _require_columns(names: Sequence[str], frame: pd.DataFrame, source: str, *, what: str) -> None:
    existing = list(frame.columns)
    for name in names:
        if name in frame.columns:
            continue
        close = difflib.get_close_matches(str(name), existing, n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        shown = ", ".join(repr(c) for c in existing[:5])
        more = f" and {len(existing) - 5:,} more" if len(existing) > 5 else ""
        raise DataError(f"{source}: {what} {name!r} is not a column{hint}; the columns are {shown}{more}")


def _rows_with_target(values: pd.Series, target: str, source: str, notes: list[str]) -> np.ndarray:
    missing = values.isna().to_numpy()
    if pdt.is_string_dtype(values.dtype) or pdt.is_object_dtype(values.dtype):
        blank = values.astype("string").str.strip().eq("").to_numpy(dtype=bool, na_value=False)
        missing = missing | blank
    rows = np.flatnonzero(~missing).astype(np.int64)
    dropped = len(values) - len(rows)
    if dropped:
        notes.append(f"dropped {dropped:,} {_rows(dropped)} whose target {target!r} is missing")
    if len(rows) < 2:
        verb = "row has" if len(rows) == 1 else "rows have"
        raise DataError(f"{source}: only {len(rows)} {verb} a value for target {target!r} (at least 2 are needed)")
    return rows


def _rows(count: int) -> str:
    return "row" if count == 1 else "rows"


def _regression_target(values: pd.Series, rows: np.ndarray, target: str, source: str) -> np.ndarray:
    if pdt.is_datetime64_any_dtype(values.dtype) or pdt.is_timedelta64_dtype(values.dtype):
        raise DataError(f"{source}: target {target!r} holds dates or durations, not numbers")
    numbers = pd.to_numeric(values, errors="coerce")
    bad = numbers.isna().to_numpy()
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise DataError(f"{source}: target {target!r} is not numeric (row {rows[first] + 1}: {values.iloc[first]!r})")
    y = numbers.to_numpy(dtype=np.float64)
    infinite = int(np.isinf(y).sum())
    if infinite:
        raise DataError(f"{source}: target {target!r} is infinite in {infinite:,} {_rows(infinite)}")
    if np.all(y == y[0]):
        raise DataError(f"{source}: target {target!r} is constant (every row is {y[0]:g}); nothing to predict")
    return y


def _binary_target(values: pd.Series, target: str, positive: str | None, source: str,
                   notes: list[str]) -> tuple[np.ndarray, tuple[str, str]]:
    """Return y (1.0 for the positive class) and the classes, negative then positive."""
    uniques = list(pd.unique(values.to_numpy()))
    labels = {_class_label(u): u for u in uniques}
    if len(labels) > 2:
        raise DataError(f"{source}: target {target!r} has {len(labels):,} classes; a binary target has two "
                        "(use task 'multiclass')")
    if len(labels) < 2:
        raise DataError(f"{source}: target {target!r} has one class ({uniques[0]!s}); a binary target needs two")
    try:
        ordered = [_class_label(u) for u in sorted(uniques)]
    except TypeError:
        ordered = sorted(labels)
    chosen = _positive_label(ordered, positive, target, source)
    negative = ordered[0] if ordered[1] == chosen else ordered[1]
    notes.append(f"positive class of {target!r} is {chosen!r} (negative: {negative!r})")
    y = (values == labels[chosen]).to_numpy(dtype=np.float64)
    return y, (negative, chosen)


def _multiclass_target(values: pd.Series, target: str, source: str,
                       notes: list[str]) -> tuple[np.ndarray, tuple[str, ...]]:
    """Return y (each row's class code, as float64) and the classes in their stored order (``class_order``)."""
    labels = values.map(_class_label)
    classes = class_order(values)
    if len(classes) < 3:
        raise DataError(f"{source}: target {target!r} has {len(classes)} class{'' if len(classes) == 1 else 'es'}; "
                        "a multiclass target has 3 or more (use task 'binary' for two)")
    if len(classes) > MAX_CLASSES:
        raise _too_many_classes(source, f"target {target!r}", len(classes))
    codes = pd.Categorical(labels, categories=list(classes)).codes
    shown = ", ".join(repr(c) for c in classes[:10]) + (f" and {len(classes) - 10:,} more" if len(classes) > 10 else "")
    notes.append(f"classes of {target!r}, in their stored order: {shown}")
    return codes.astype(np.float64), classes


def class_order(values: pd.Series) -> tuple[str, ...]:
    """Return the classes of a target column in their stored order: an ordered Categorical's own order,
    numbers by value, else text (the order of category levels, ``category_levels``), whole numbers
    written without ".0"."""
    present = pd.Series(values.map(_class_label).dropna().unique(), dtype="string")
    dtype = values.dtype
    if isinstance(dtype, pd.CategoricalDtype) and dtype.ordered:
        declared = [_class_label(level) for level in dtype.categories]
        seen = set(present)
        return tuple(level for level in declared if level in seen)
    levels, _ = category_levels(present)
    return levels


def _class_label(value: object) -> str:
    """Return a class as text: whole floats lose their ``.0`` so 0/1 read as "0"/"1"."""
    if isinstance(value, float | np.floating) and float(value).is_integer():
        return str(int(value))
    return str(value)


def _positive_label(ordered: list[str], positive: str | None, target: str, source: str) -> str:
    if positive is not None:
        wanted = str(positive)
        matches = [c for c in ordered if c == wanted] or [c for c in ordered if c.lower() == wanted.lower()]
        if len(matches) != 1:
            raise DataError(f"{source}: positive class {wanted!r} is not one of target {target!r}'s "
                            f"classes {ordered[0]!r} and {ordered[1]!r}")
        return matches[0]
    for word in _POSITIVE_WORDS:
        for label in ordered:
            if label.strip().lower() == word:
                return label
    return ordered[1]


def _feature_columns(kept: pd.DataFrame, target: str, ignore: set[str], features: Sequence[str] | None,
                     source: str, notes: list[str], derived: bool = False) -> list[ColumnInfo]:
    """Return the feature columns: the listed ones, or every usable column (noting exclusions).
    With ``derived`` (date features follow), having none of them is not an error."""
    if features is not None:
        return _listed_features(kept, target, ignore, list(features), source, derived)
    columns = []
    for name in kept.columns:
        if name == target or name in ignore:
            continue
        values = kept[name]
        role, note = infer_role(values)
        if role == ID:
            notes.append(f"column {name!r} is an id (a distinct value on every row), not a feature")
        elif role == EXCLUDED:
            notes.append(f"column {name!r} excluded: {note}")
        elif role == DATETIME:
            notes.append(f"column {name!r} is not a feature: it holds dates (usable to order rows by time, "
                         "or to give date features)")
        else:
            columns.append(_column_info(name, role, values))
    if not columns and not derived:
        raise DataError(f"{source}: no usable feature columns (every column but target {target!r} is ignored or excluded)")
    return columns


def _listed_features(kept: pd.DataFrame, target: str, ignore: set[str], features: list[str],
                     source: str, derived: bool = False) -> list[ColumnInfo]:
    """Return the columns the user listed, keeping any infer_role would exclude (but not dates)."""
    _require_columns(features, kept, source, what="feature")
    repeated = [name for name, count in Counter(features).items() if count > 1]
    if repeated:
        raise DataError(f"{source}: feature {repeated[0]!r} is listed twice")
    if target in features:
        raise DataError(f"{source}: target {target!r} cannot also be a feature")
    columns = []
    for name in features:
        if name in ignore:
            continue
        values = kept[name]
        role, _ = infer_role(values)
        if role == DATETIME:
            raise DataError(f"{source}: feature {name!r} holds dates; dates are not features (use them to order rows)")
        if role in (EXCLUDED, ID):
            role = _role_of_dtype(values)
        columns.append(_column_info(name, role, values))
    if not columns and not derived:
        raise DataError(f"{source}: no usable feature columns (every listed feature is ignored)")
    return columns


def _date_features(kept: pd.DataFrame, dates: Mapping[str, Sequence[str]], target: str, source: str,
                   notes: list[str]) -> list[ColumnInfo]:
    """Return the features derived from date columns; DataError for a column that is not a date
    column, an unknown or repeated part, or a name the data already uses."""
    _require_columns(list(dates), kept, source, what="date column")
    columns = []
    for name, parts in dates.items():
        if name == target:
            raise DataError(f"{source}: target {name!r} cannot give date features")
        if infer_role(kept[name])[0] != DATETIME:
            raise DataError(f"{source}: column {name!r} does not hold dates, so it cannot give date features")
        parts = list(parts)
        unknown = [p for p in parts if p not in DATE_PARTS]
        if unknown or not parts or len(set(parts)) < len(parts):
            problem = f"unknown date part {unknown[0]!r}" if unknown else "each part once, at least one"
            raise DataError(f"{source}: date features of {name!r}: {problem} (parts: {', '.join(DATE_PARTS)})")
        for part in parts:
            feature = derived_name(name, part)
            if feature in kept.columns:
                raise DataError(f"{source}: date feature {feature!r} would shadow the column of that name")
            columns.append(ColumnInfo(feature, NUMERIC, "float64", date_column=name, date_part=part))
        notes.append(f"column {name!r} gives date features: {', '.join(derived_name(name, p) for p in parts)}")
    return columns


def _id_column(kept: pd.DataFrame, target: str, features: list[str]) -> str:
    """Return the first column that names the rows (role ID) and is neither the target nor a feature, or ""."""
    for name in kept.columns:
        if name != target and name not in features and infer_role(kept[name])[0] == ID:
            return str(name)
    return ""


def _role_of_dtype(values: pd.Series) -> str:
    """Return the role a column the user asked for keeps: its dtype's, else CATEGORICAL."""
    if pdt.is_bool_dtype(values.dtype):
        return BOOLEAN
    if pdt.is_numeric_dtype(values.dtype):
        return NUMERIC
    return CATEGORICAL


def _column_info(name: str, role: str, values: pd.Series) -> ColumnInfo:
    if role != CATEGORICAL:
        return ColumnInfo(name, role, str(values.dtype))
    levels, order = category_levels(values)
    return ColumnInfo(name, role, str(values.dtype), levels, order)


def category_levels(values: pd.Series) -> tuple[tuple[str, ...], str]:
    """Return the levels present in a categorical column, in code order, and the order's name.

    An ordered pandas Categorical keeps its own order ("ordered"); levels that all read as
    numbers are sorted by value, so "10" follows "2" ("numeric"); others sort as text ("text").
    """
    present = list(values.astype("string").dropna().unique())
    dtype = values.dtype
    if isinstance(dtype, pd.CategoricalDtype) and dtype.ordered:
        seen = set(present)
        declared = pd.Series(dtype.categories).astype("string")
        return tuple(level for level in declared if level in seen), "ordered"
    numbers = pd.to_numeric(pd.Series(present, dtype="string"), errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    if present and not np.isnan(numbers).any():
        ranked = sorted(zip(numbers.tolist(), present, strict=True))
        return tuple(level for _, level in ranked), "numeric"
    return tuple(sorted(present)), "text"


__all__ = ["Prepared", "infer_task", "prepare", "load_frame", "read_table", "source_name"]
