"""The feature schema: which columns a chain uses, their roles, and how a frame becomes a matrix.

Every stage kind reads one shared representation of the data: a float64 matrix with one
column per feature, in schema order. Numeric and boolean columns are their values (NaN for
missing); categorical columns are integer codes into the levels seen at fit time (NaN for a
missing value or a level never seen). Keeping one matrix keeps memory near the size of the
data whatever the number of stages.

Level order (``ColumnInfo.order``): the codes follow an ordered pandas Categorical's own order
("ordered"); levels that all read as numbers are sorted by value, so "10" comes after "2"
("numeric"); other levels are sorted as text ("text"). Tree kinds split on the codes, so the
order is what a split "below level x" means.

Missing values the fitting rows never had (``ColumnInfo.fill``): when a numeric or boolean
column had no missing value in the chain's fitting rows, no stage learnt what a missing value
means there; such a value then takes the fitting rows' lower median (a value the column really
holds: never outside its range, the majority value of a boolean), for every kind alike, and
``predict`` warns naming the column. Where the fitting rows had missing values each kind uses
what it learnt (see the kinds).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace
from typing import Any, Literal

import numpy as np
import pandas as pd

from .dates import DATE_PARTS, date_part, parse_dates
from .errors import SchemaError

#: what a chain learns: a number (regression) or one of two classes (binary)
Task = Literal["regression", "binary", "multiclass"]

NUMERIC = "numeric"
CATEGORICAL = "categorical"
BOOLEAN = "boolean"
DATETIME = "datetime"
ROLES = (NUMERIC, CATEGORICAL, BOOLEAN, DATETIME)
FEATURE_ROLES = (NUMERIC, CATEGORICAL, BOOLEAN)
#: the largest magnitude a feature value may have: tree learners compare in float32, where a larger
#: value becomes infinite, so beyond it a value is treated as missing, like an infinity
FLOAT32_MAX = float(np.finfo(np.float32).max)


def beyond_float32(values: np.ndarray) -> np.ndarray:
    """Return where float ``values`` are infinite or larger in magnitude than float32 can hold (NaN is not)."""
    with np.errstate(invalid="ignore"):
        return np.abs(values) > FLOAT32_MAX


#: how the codes of a categorical column are ordered (``ColumnInfo.order``)
LEVEL_ORDERS = ("ordered", "numeric", "text")


@dataclass(frozen=True)
class ColumnInfo:
    """One feature column: its name, role, the dtype it was read with and, for categories, its
    levels and their order; for numbers, the value a missing entry takes when the fitting rows
    had none (``fill``, None when they had some or it is not known).

    A feature derived from a date column names that column (``date_column``) and the part of the
    date it holds (``date_part``, one of ``dates.DATE_PARTS``); its values are computed from the
    date column whenever a frame is encoded.
    """

    name: str
    role: str
    dtype: str
    levels: tuple[str, ...] = ()
    order: str = ""
    fill: float | None = None
    date_column: str = ""
    date_part: str = ""

    @property
    def frame_column(self) -> str:
        """Return the column of a frame this feature is read from (the date column of a derived one)."""
        return self.date_column or self.name

    @property
    def is_categorical(self) -> bool:
        """Return True when the column holds category codes."""
        return self.role == CATEGORICAL

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict of this column (``order``, ``fill`` and the date keys only where they are set)."""
        out = asdict(self)
        out["levels"] = list(self.levels)
        for key in ("order", "fill", "date_column", "date_part"):
            if out[key] in ("", None):
                del out[key]
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ColumnInfo:
        """Return the column described by ``data`` (the output of ``to_dict``); raise ValueError
        for a derived feature whose date part is unknown or whose role is not numeric."""
        fill = data.get("fill")
        column = cls(data["name"], data["role"], data["dtype"], tuple(data.get("levels", ())),
                     str(data.get("order", "")), None if fill is None else float(fill),
                     date_column=str(data.get("date_column") or ""), date_part=str(data.get("date_part") or ""))
        if column.date_column and (column.date_part not in DATE_PARTS or column.role != NUMERIC):
            raise ValueError(f"column {column.name!r}: unknown date part {column.date_part!r}")
        return column


@dataclass(frozen=True)
class Schema:
    """The features of a chain, in matrix order, and its target.

    ``task`` is ``"regression"`` or ``"binary"``; for binary chains ``classes`` holds the
    negative then the positive class as strings, as they appeared in the data. ``id_column``
    is the column that names the rows (a distinct value on each, not a feature), or "".
    """

    columns: tuple[ColumnInfo, ...]
    target: str
    task: Task = "regression"
    classes: tuple[str, ...] = ()
    notes: tuple[str, ...] = field(default=(), compare=False)
    id_column: str = ""

    @property
    def names(self) -> list[str]:
        """Return the feature names in matrix order."""
        return [c.name for c in self.columns]

    @property
    def positive_class(self) -> str | None:
        """Return the positive class of a binary chain, else None."""
        return self.classes[1] if len(self.classes) == 2 else None

    @property
    def frame_columns(self) -> list[str]:
        """Return the columns of a frame the matrix is read from, each once, in schema order."""
        return list(dict.fromkeys(c.frame_column for c in self.columns))

    def dates(self) -> dict[str, tuple[str, ...]]:
        """Return the derived date features: date column -> its parts, in schema order."""
        out: dict[str, tuple[str, ...]] = {}
        for c in self.columns:
            if c.date_column:
                out[c.date_column] = (*out.get(c.date_column, ()), c.date_part)
        return out

    def index_of(self, names: list[str] | tuple[str, ...]) -> list[int]:
        """Return the matrix column indices of ``names``; raise SchemaError for an unknown one."""
        lookup = {c.name: i for i, c in enumerate(self.columns)}
        missing = [n for n in names if n not in lookup]
        if missing:
            raise SchemaError(f"feature {missing[0]!r} is not among the chain's features")
        return [lookup[n] for n in names]

    def subset(self, indices: list[int]) -> tuple[ColumnInfo, ...]:
        """Return the column infos at ``indices``."""
        return tuple(self.columns[i] for i in indices)

    def encode(self, frame: pd.DataFrame, *, source: str = "data", order: Literal["C", "F"] = "C",
               rows: np.ndarray | None = None) -> tuple[np.ndarray, dict[str, int]]:
        """Return the float64 feature matrix of ``frame`` and the count of unseen levels per column.

        With ``rows`` (C order only), row i of the matrix is the frame's row at position
        ``rows[i]``: the rows are gathered while the matrix is filled, with no second copy.

        ``order`` is the matrix's memory layout: "C" (row-major, what the chain gathers rows
        from) or "F" (column-major, as ``DataFrame.to_numpy`` gives; quicker to build, and for a
        frame of plain float64 features it may be a read-only view of the frame's own memory).
        Columns not in the schema are ignored. A missing column, or a column whose type
        no longer fits its role, raises SchemaError naming the column.
        """
        missing = [name for name in self.frame_columns if name not in frame.columns]
        if missing:
            raise SchemaError(f"{source}: column {missing[0]!r} is missing (the chain was fit with it)")
        if rows is not None and order != "C":
            raise ValueError("rows can only be gathered into a row-major (C) matrix")
        if order == "F":
            ready = self._plain_matrix(frame)
            if ready is not None:
                return ready, {}
        n_rows = len(frame) if rows is None else len(rows)
        matrix = np.empty((n_rows, len(self.columns)), dtype=np.float64, order=order)
        unseen: dict[str, int] = {}
        plain: list[tuple[int, np.ndarray]] = []
        times: dict[str, pd.Series] = {}
        for j, col in enumerate(self.columns):
            if col.date_column:
                if col.date_column not in times:
                    times[col.date_column] = parse_dates(frame[col.date_column])
                derived = date_part(times[col.date_column], col.date_part)
                matrix[:, j] = derived if rows is None else derived[rows]
                continue
            values = frame[col.name]
            ready = plain_numbers(values, col)
            if ready is not None and order == "C":
                plain.append((j, ready))
                continue
            if ready is not None:  # a column-major matrix takes whole columns quickly
                matrix[:, j] = ready
                continue
            encoded, count = encode_column(values, col, source=source)
            matrix[:, j] = encoded if rows is None else encoded[rows]
            if count:
                unseen[col.name] = count
        _fill_by_row_blocks(matrix, plain, rows)
        return matrix, unseen

    def _plain_matrix(self, frame: pd.DataFrame) -> np.ndarray | None:
        """Return the column-major float64 matrix of a frame whose features are all plain float64
        numbers (without copying when pandas holds them as one block), else None."""
        for col in self.columns:
            if col.date_column:
                return None
            values = frame[col.name]
            if values.dtype != np.float64 or plain_numbers(values, col) is None:
                return None
        matrix = frame[self.names].to_numpy(dtype=np.float64)
        return matrix if matrix.flags.f_contiguous else np.asfortranarray(matrix)

    def with_fills(self, fitting: np.ndarray) -> Schema:
        """Return the schema with each numeric and boolean column's ``fill`` set from the fitting rows
        ``fitting`` (schema matrix rows): their lower median where they had no missing value, else None."""
        columns = []
        for j, col in enumerate(self.columns):
            fill = None
            if col.role in (NUMERIC, BOOLEAN) and len(fitting):
                values = np.ascontiguousarray(fitting[:, j])
                if not np.isnan(values).any():
                    fill = float(np.quantile(values, 0.5, method="inverted_cdf"))
            columns.append(replace(col, fill=fill))
        return replace(self, columns=tuple(columns))

    def fill_missing(self, matrix: np.ndarray) -> tuple[np.ndarray, dict[str, int]]:
        """Return ``matrix`` with missing values of the columns that have a ``fill`` replaced by it,
        and how many were replaced per column. A matrix that does not own its memory (a view of
        the user's frame) is copied before anything is written."""
        counts: dict[str, int] = {}
        if not any(col.fill is not None for col in self.columns) or matrix.shape[0] == 0:
            return matrix, counts
        # one pass over every column finds those that may hold NaN (a sum is NaN then)
        with np.errstate(all="ignore"):
            maybe = np.isnan(matrix.sum(axis=0))
        for j, col in enumerate(self.columns):
            if col.fill is None or not maybe[j]:
                continue
            missing = np.isnan(matrix[:, j])
            if missing.any():  # (a sum can also be NaN from infinities of both signs)
                if not (matrix.flags.owndata and matrix.flags.writeable):
                    matrix = matrix.copy(order="K")
                matrix[missing, j] = col.fill
                counts[col.name] = int(missing.sum())
        return matrix, counts

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict of the schema."""
        out = {
            "target": self.target,
            "task": self.task,
            "classes": list(self.classes),
            "columns": [c.to_dict() for c in self.columns],
        }
        if self.id_column:
            out["id_column"] = self.id_column
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Schema:
        """Return the schema described by ``data`` (the output of ``to_dict``)."""
        return cls(
            columns=tuple(ColumnInfo.from_dict(c) for c in data["columns"]),
            target=data["target"],
            task=data.get("task", "regression"),
            classes=tuple(data.get("classes", ())),
            id_column=str(data.get("id_column") or ""),
        )


def plain_numbers(values: pd.Series, col: ColumnInfo) -> np.ndarray | None:
    """Return the column's values when they need no checking (numpy floats or integers in a
    numeric column), else None."""
    if col.role != NUMERIC or not isinstance(values.dtype, np.dtype) or values.dtype.kind not in "fiu":
        return None
    ready = values.to_numpy()
    if ready.dtype.kind == "f" and beyond_float32(ready).any():
        return None  # infinities and values beyond float32 are treated as missing and counted, by encode_column
    return ready


# rows per block when copying columns into the row-major matrix: a block of every column stays
# in the processor's cache, where writing whole columns one by one would stride through memory
_BLOCK_BYTES = 4 * 1024 * 1024


def _fill_by_row_blocks(matrix: np.ndarray, columns: list[tuple[int, np.ndarray]],
                        rows: np.ndarray | None = None) -> None:
    """Copy each (position, values) column into ``matrix``, one block of rows at a time
    (the values at ``rows``, in that order, when given)."""
    if not columns:
        return
    step = max(256, _BLOCK_BYTES // (8 * matrix.shape[1]))
    for start in range(0, matrix.shape[0], step):
        block = matrix[start:start + step]
        picked = slice(start, start + step) if rows is None else rows[start:start + step]
        for j, values in columns:
            block[:, j] = values[picked]


def encode_column(values: pd.Series, col: ColumnInfo, *, source: str = "data") -> tuple[np.ndarray, int]:
    """Return one column as float64 for the matrix, and how many of its values were unseen levels."""
    if col.role == CATEGORICAL:
        as_text = values.astype("string")
        known = as_text.isin(col.levels).to_numpy(dtype=bool, na_value=False)
        present = as_text.notna().to_numpy(dtype=bool)
        codes = pd.Categorical(as_text.where(known), categories=list(col.levels)).codes.astype(np.float64)
        codes[codes < 0] = np.nan
        return codes, int((present & ~known).sum())
    if col.role == BOOLEAN:
        return _encode_boolean(values, col, source), 0
    numeric = pd.to_numeric(values, errors="coerce")
    bad = (numeric.isna() & values.notna()).to_numpy(dtype=bool)
    present = int(values.notna().sum())
    if bad.any() and bad.sum() * 2 > present:  # mostly text: the column's type changed
        first = int(np.flatnonzero(bad)[0])
        raise SchemaError(
            f"{source}: column {col.name!r} was numeric when the chain was fit, "
            f"but row {first + 1} holds {values.iloc[first]!r}"
        )
    out = numeric.to_numpy(dtype=np.float64, na_value=np.nan, copy=True)
    infinite = beyond_float32(out)
    out[infinite] = np.nan
    # a few stray texts or infinities are treated as missing, and counted for a warning
    return out, int(bad.sum() + infinite.sum())


_TRUE = {"true", "1", "yes", "y", "t", "1.0"}
_FALSE = {"false", "0", "no", "n", "f", "0.0"}


def _encode_boolean(values: pd.Series, col: ColumnInfo, source: str) -> np.ndarray:
    if pd.api.types.is_bool_dtype(values) or pd.api.types.is_numeric_dtype(values):
        out = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        bad = ~np.isnan(out) & (out != 0) & (out != 1)
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            raise SchemaError(f"{source}: column {col.name!r} is boolean but row {first + 1} holds {out[first]!r}")
        return out
    text = values.astype("string").str.strip().str.lower()
    out = np.full(len(values), np.nan)
    is_true = text.isin(_TRUE).to_numpy(dtype=bool, na_value=False)
    is_false = text.isin(_FALSE).to_numpy(dtype=bool, na_value=False)
    out[is_true] = 1.0
    out[is_false] = 0.0
    bad = ~(is_true | is_false) & text.notna().to_numpy()
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise SchemaError(f"{source}: column {col.name!r} is boolean but row {first + 1} holds {values.iloc[first]!r}")
    return out
