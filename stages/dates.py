"""Features derived from a date or datetime column: its year, month, day of week, hour or day of year.

A date column is not a feature itself (it can order rows for time validation), but the parts
of it are numbers a stage can use: the rush hour is an ``hour``, a season a ``day_of_year``.
The parts chosen are columns of the schema (``ColumnInfo.date_column`` and ``date_part``), so
a chain file and a recipe record them and ``predict`` derives them the same way from the same
column.

Text is read as pandas reads mixed date formats (``format="mixed"``). Times that carry their
own UTC offset keep their local hour when every value has the same offset; values with
different offsets are read in UTC. A value that is not a date gives a missing part.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

#: the parts a date column can give, in the order the setup screen offers them
DATE_PARTS = ("year", "month", "day_of_week", "hour", "day_of_year")
#: what each part is, as the screens say it
PART_NAMES = {"year": "year", "month": "month (1-12)", "day_of_week": "day of week (0 = Monday)",
              "hour": "hour (0-23)", "day_of_year": "day of year (1-366)"}


def derived_name(column: str, part: str) -> str:
    """Return the feature name of ``part`` of date ``column``: ``placed_at_hour``."""
    return f"{column}_{part}"


def parse_dates(values: pd.Series) -> pd.Series:
    """Return ``values`` as datetimes (NaT where a value is missing or not a date)."""
    if pd.api.types.is_datetime64_any_dtype(values.dtype):
        return values
    text = values.astype("string")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return pd.to_datetime(text, errors="coerce", format="mixed")
        except (ValueError, TypeError, OverflowError):  # offsets that differ from value to value
            return pd.to_datetime(text, errors="coerce", format="mixed", utc=True)


def date_part(times: pd.Series, part: str) -> np.ndarray:
    """Return ``part`` of each datetime as float64 (NaN where the time is missing)."""
    if part not in DATE_PARTS:
        raise ValueError(f"unknown date part {part!r} (parts: {', '.join(DATE_PARTS)})")
    values = getattr(times.dt, _ACCESSOR[part])
    return pd.to_numeric(values).to_numpy(dtype=np.float64, na_value=np.nan)


_ACCESSOR = {"year": "year", "month": "month", "day_of_week": "day_of_week", "hour": "hour",
             "day_of_year": "day_of_year"}
