"""Row weights and exposure: reading them from a column (or values given in Python) and refusing bad ones.

A weight says how much a row counts in every loss, start value, leaf, step, metric and
histogram: it must be a finite number of zero or more, and not zero on every row. An exposure
says how much of the unit a row covers (months in service, policy-years): it must be a finite
positive number, and it enters the raw score of a log-link loss as log(exposure). Errors name
the column and the first bad row (counted from 1, as the data file's rows are).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .errors import DataError, StageSpecError
from .loglink import is_log_link
from .losses import LOG_LINK_NAMES

#: how a weight or exposure given in Python (not a column) is named in messages and files
GIVEN = "(given in Python)"


def column_name(spec: Any) -> str | None:
    """Return the column a weight or exposure spec names, or None when it is values (or nothing)."""
    return spec if isinstance(spec, str) else None


def read_values(frame: pd.DataFrame, spec: Any, what: str, source: str) -> tuple[np.ndarray, str]:
    """Return ``spec``'s values over every row of ``frame`` as float64 (NaN where missing or not a
    number) and its name: the column it names, or GIVEN for values given in Python.

    Raise DataError when the column is absent, or the values are not one per row.
    """
    if isinstance(spec, str):
        if spec not in frame.columns:
            raise DataError(f"{source}: {what} column {spec!r} is not a column of the data")
        values = pd.to_numeric(frame[spec], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        return values, spec
    try:
        values = np.asarray(spec, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        raise DataError(f"{source}: {what} must be a column name or one number per row") from None
    if len(values) != len(frame):
        raise DataError(f"{source}: {what} has {len(values):,} values for {len(frame):,} rows")
    return values, GIVEN


def _first(mask: np.ndarray, rows: np.ndarray | None) -> int:
    at = int(np.flatnonzero(mask)[0])
    return int(rows[at]) + 1 if rows is not None else at + 1


def check_weights(values: np.ndarray, name: str, source: str, rows: np.ndarray | None = None) -> np.ndarray:
    """Return ``values`` when every weight is a finite number of zero or more and not all are zero.

    ``rows`` maps each value to its row of the data (for the row number an error names). Raise
    DataError naming the column and the first bad row otherwise.
    """
    label = f"weight column {name!r}" if name != GIVEN else "weight"
    missing = ~np.isfinite(values)
    if missing.any():
        count = int(missing.sum())
        raise DataError(f"{source}: {label} is missing or not a finite number in {count:,} row"
                        f"{'' if count == 1 else 's'} (first: row {_first(missing, rows)})")
    negative = values < 0
    if negative.any():
        first = int(np.flatnonzero(negative)[0])
        raise DataError(f"{source}: {label} is negative in row {_first(negative, rows)} ({values[first]:g}); "
                        "weights must be zero or more")
    if not (values > 0).any():
        raise DataError(f"{source}: {label} is zero in every row; at least one row must count")
    return values


def check_exposure(values: np.ndarray, name: str, source: str, rows: np.ndarray | None = None) -> np.ndarray:
    """Return ``values`` when every exposure is a finite positive number; raise DataError naming the
    column and the first bad row otherwise."""
    label = f"exposure column {name!r}" if name != GIVEN else "exposure"
    bad = ~(np.isfinite(values) & (values > 0))
    if bad.any():
        count, first = int(bad.sum()), int(np.flatnonzero(bad)[0])
        shown = "missing" if np.isnan(values[first]) else f"{values[first]:g}"
        raise DataError(f"{source}: {label} must be a positive number; {count:,} row{'' if count == 1 else 's'} "
                        f"{'is' if count == 1 else 'are'} not (first: row {_first(bad, rows)}, {shown})")
    return values


def exposure_offset(values: np.ndarray) -> np.ndarray:
    """Return the offset an exposure gives a log-link raw score: log(exposure)."""
    return np.log(values)


@dataclass(frozen=True)
class RowValues:
    """A chain's weights and offsets over the rows it kept (None when not given), and their column names."""

    weight_column: str | None = None
    exposure_column: str | None = None
    weight: np.ndarray | None = None
    offset: np.ndarray | None = None

    def in_order(self, order: np.ndarray) -> tuple[np.ndarray | None, np.ndarray | None]:
        """Return the weights and offsets gathered into ``order`` (the chain's order of its kept rows)."""
        return (None if self.weight is None else self.weight[order],
                None if self.offset is None else self.offset[order])


def read_row_values(frame: pd.DataFrame, rows: np.ndarray, weight: Any, exposure: Any, loss: Any,
                    source: str) -> RowValues:
    """Return the checked weights and log(exposure) offsets of the rows of ``frame`` at ``rows`` (the
    rows a chain keeps); raise DataError for a bad value, StageSpecError for an exposure with a loss
    off the log link."""
    weight_column = exposure_column = None
    kept_weight = kept_offset = None
    if weight is not None:
        values, weight_column = read_values(frame, weight, "weight", source)
        kept_weight = check_weights(values[rows], weight_column, source, rows)
    if exposure is not None:
        if not is_log_link(loss):
            raise StageSpecError(f"an exposure is for the log-link losses ({', '.join(LOG_LINK_NAMES)}); "
                                 f"loss {loss.name!r} takes none")
        values, exposure_column = read_values(frame, exposure, "exposure", source)
        kept_offset = exposure_offset(check_exposure(values[rows], exposure_column, source, rows))
    return RowValues(weight_column, exposure_column, kept_weight, kept_offset)
