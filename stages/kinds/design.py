"""The preprocessing the linear family shares: impute, standardise, flag missing values, one-hot encode.

``LinearDesign`` learns everything from a stage's fitting rows and turns any rows of the
schema's float64 matrix into a dense design matrix:

- numeric and boolean columns: NaN becomes the fitting rows' median (0 for a column with no
  value at all), then ``(x - mean) / std`` with the mean and the population standard
  deviation (ddof=0, as scikit-learn's StandardScaler) of the imputed column; a zero
  standard deviation becomes 1;
- a 0/1 missing-value indicator after each numeric column that had NaN in the fitting rows
  (common practice: the fit can then tell "missing" from "typical");
- categorical columns: one 0/1 column per code seen in the fitting rows; a missing or unseen
  code gives all zeros, so such a row falls back to the stage's base prediction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ChainFileError
from ..limits import MAX_COLUMNS, MAX_LEVELS
from ..schema import BOOLEAN, CATEGORICAL, NUMERIC, ColumnInfo


@dataclass(frozen=True)
class ColumnStep:
    """How one input column becomes design columns.

    For numeric and boolean columns ``median``, ``mean`` and ``std`` are set and
    ``indicator`` tells whether a missing-value column follows; for categorical columns
    ``codes`` lists the codes seen at fit, one design column each.
    """

    role: str
    median: float = 0.0
    mean: float = 0.0
    std: float = 1.0
    indicator: bool = False
    codes: tuple[int, ...] = ()

    @property
    def width(self) -> int:
        """Return the number of design columns this input column becomes."""
        if self.role == CATEGORICAL:
            return len(self.codes)
        return 1 + int(self.indicator)

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict of this step."""
        if self.role == CATEGORICAL:
            return {"role": self.role, "codes": list(self.codes)}
        return {
            "role": self.role, "median": self.median, "mean": self.mean, "std": self.std,
            "indicator": self.indicator,
        }

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> ColumnStep:
        """Return the step described by ``data`` (the output of ``to_dict``); raise ValueError when a
        value is of the wrong type or out of range (a file may come from a stranger)."""
        role = data["role"]
        if role == CATEGORICAL:
            codes = data["codes"]
            if not isinstance(codes, list) or len(codes) > MAX_LEVELS or not all(
                    isinstance(c, int) and not isinstance(c, bool) and 0 <= c < MAX_LEVELS for c in codes):
                raise ValueError("category codes must be a list of level numbers")
            return cls(CATEGORICAL, codes=tuple(codes))
        if role not in (NUMERIC, BOOLEAN):
            raise ValueError(f"unknown column role {str(role)[:40]!r}")
        numbers = [data["median"], data["mean"], data["std"]]
        if not all(isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v) for v in numbers) \
                or not data["std"] > 0 or not isinstance(data["indicator"], bool):
            raise ValueError("a numeric step needs a finite median and mean, a positive std and a true/false indicator")
        return cls(role, median=float(data["median"]), mean=float(data["mean"]), std=float(data["std"]),
                   indicator=data["indicator"])


def impute_median(values: np.ndarray, missing: np.ndarray | None = None) -> tuple[np.ndarray, float]:
    """Return ``values`` with NaN replaced by their median, and that median (0 when all are NaN).

    ``missing`` is ``np.isnan(values)`` when the caller has it already.
    """
    missing = np.isnan(values) if missing is None else missing
    if not missing.any():  # the common case: no copy of the column, no second pass
        return values, float(np.median(values)) if values.size else 0.0
    observed = values[~missing]
    median = float(np.median(observed)) if observed.size else 0.0
    return np.where(missing, median, values), median


def fit_numeric_step(values: np.ndarray, role: str) -> ColumnStep:
    """Return the imputation and scaling step learnt from one numeric or boolean column."""
    values = np.ascontiguousarray(values, dtype=np.float64)  # a column of the row-major matrix is strided
    missing = np.isnan(values)
    imputed, median = impute_median(values, missing)
    mean = float(np.mean(imputed)) if imputed.size else 0.0
    std = float(np.std(imputed)) if imputed.size else 1.0
    has_missing = bool(missing.any()) and role != BOOLEAN
    return ColumnStep(role, median=median, mean=mean, std=std if std > 0 else 1.0, indicator=has_missing)


def fit_categorical_step(values: np.ndarray) -> ColumnStep:
    """Return the one-hot step over the codes seen in one categorical column."""
    seen = np.unique(values[~np.isnan(values)]).astype(np.int64)
    return ColumnStep(CATEGORICAL, codes=tuple(int(c) for c in seen))


def one_hot(values: np.ndarray, codes: tuple[int, ...]) -> np.ndarray:
    """Return one 0/1 column per code in ``codes``; NaN and other codes give a row of zeros."""
    return (values[:, None] == np.asarray(codes, dtype=np.float64)[None, :]).astype(np.float64)


class LinearDesign:
    """Imputation, standardisation, missing indicators and one-hot encoding learnt from fitting rows."""

    def __init__(self, steps: list[ColumnStep]) -> None:
        self.steps = list(steps)

    @classmethod
    def fit(cls, X: np.ndarray, columns: tuple[ColumnInfo, ...] | list[ColumnInfo]) -> LinearDesign:
        """Return the design learnt from the fitting rows ``X`` (one column per entry of ``columns``)."""
        steps = []
        for j, col in enumerate(columns):
            values = np.asarray(X[:, j], dtype=np.float64)
            if col.role == CATEGORICAL:
                steps.append(fit_categorical_step(values))
            else:
                steps.append(fit_numeric_step(values, col.role))
        return cls(steps)

    @property
    def width(self) -> int:
        """Return the number of design columns."""
        return sum(step.width for step in self.steps)

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Return the float64 design matrix of ``X`` (rows of the schema matrix, this design's columns)."""
        X = np.asarray(X, dtype=np.float64)
        out = np.empty((X.shape[0], self.width), dtype=np.float64, order="F")  # filled column by column
        at = 0
        for j, step in enumerate(self.steps):
            values = X[:, j]
            if step.role == CATEGORICAL:
                out[:, at:at + step.width] = one_hot(values, step.codes)
            else:
                missing = np.isnan(values)
                out[:, at] = (np.where(missing, step.median, values) - step.mean) / step.std
                if step.indicator:
                    out[:, at + 1] = missing
            at += step.width
        return out

    def feature_groups(self) -> list[int]:
        """Return, for each design column, the index of the input column it came from."""
        return [j for j, step in enumerate(self.steps) for _ in range(step.width)]

    def unseen_levels(self, X: np.ndarray) -> int:
        """Return how many non-NaN category codes in ``X`` were not seen in the fitting rows."""
        count = 0
        for j, step in enumerate(self.steps):
            if step.role == CATEGORICAL:
                values = np.asarray(X[:, j], dtype=np.float64)
                known = np.isin(values, np.asarray(step.codes, dtype=np.float64))
                count += int((~np.isnan(values) & ~known).sum())
        return count

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict of the design (floats round-trip exactly through JSON)."""
        return {"steps": [step.to_dict() for step in self.steps]}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> LinearDesign:
        """Return the design described by ``data``; raise ChainFileError when it is malformed."""
        try:
            steps = data["steps"]
            if not isinstance(steps, list) or not 0 < len(steps) <= MAX_COLUMNS:
                raise ValueError("steps must be a list with one step per input column")
            return cls([ColumnStep.from_dict(step) for step in steps])
        except (KeyError, TypeError, ValueError) as exc:
            raise ChainFileError(f"stage design is not valid ({exc!r})") from None


def group_sum(values: np.ndarray, groups: list[int], n_columns: int) -> np.ndarray:
    """Return ``values`` (one per design column) summed per input column, ``n_columns`` long."""
    out = np.zeros(n_columns, dtype=np.float64)
    if len(groups):
        np.add.at(out, np.asarray(groups, dtype=np.int64), np.asarray(values, dtype=np.float64))
    return out
