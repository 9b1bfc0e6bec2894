"""Partial dependence: the average prediction with one feature (or two) set to each value of a grid.

For a grid value g, every row of the part keeps its own values except the feature, which is set
to g; the chain predicts each row, and ``average`` is the mean of those predictions (Friedman
2001, section 8.2; the "brute" method of scikit-learn's ``partial_dependence``). With ``upto=k``
the prediction is the chain's after stage k (a probability for binary chains); with ``stage=k``
it is stage k's contribution alone, on the raw scale (log-odds for binary chains).

The spread across rows comes from individual conditional expectation curves (the same
predictions, one curve per row) on a bounded, seeded sample of the rows: ``ice_low`` and
``ice_high`` are their 10th and 90th percentiles at each grid value, ``ice_std`` their standard
deviation. ``rows`` and ``ice_rows`` say how many rows each used.

The grid: for a numeric feature its distinct values when there are at most ``points`` of them,
else its quantiles from 5 % to 95 % (``points`` of them, repeats removed); for a categorical
feature the levels that occur in the rows; for a boolean one false and true.

Only stages that use the feature change with the grid value; the others are predicted once per
row. A linear or spline stage is a sum of per-column parts, so only the feature's own part
changes: it is computed once per grid value. Rows are predicted a block at a time, so memory
stays at one block whatever the part's size.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import StageSpecError
from ..schema import BOOLEAN, CATEGORICAL, ColumnInfo
from ..validation import Part
from .cache import remembered
from .rows import (
    check_part,
    check_stage,
    check_upto,
    feature_index,
    frame_positions,
    one_output,
    part_positions,
    sample_rows,
)

if TYPE_CHECKING:
    from ..chain import Chain
    from ..predictor import FittedChain

#: rows predicted at once
BLOCK_ROWS = 65_536
#: rows whose individual curves give the spread columns
ICE_ROWS = 1_000
#: grid points of a numeric feature (per feature when there are two)
POINTS = {1: 20, 2: 10}
SPREAD_PERCENTILES = (10.0, 90.0)


@dataclass(frozen=True)
class Rows:
    """The rows a question is asked over: a matrix and, optionally, the positions of the rows in it.

    ``labels`` are the positions reported for the rows (rows of the frame the data came from).
    """

    matrix: np.ndarray
    positions: np.ndarray | None
    labels: np.ndarray

    def __len__(self) -> int:
        return len(self.labels)

    def block(self, start: int, stop: int) -> np.ndarray:
        """Return a writable copy of rows ``start`` to ``stop``."""
        if self.positions is None:
            return np.array(self.matrix[start:stop], dtype=np.float64, order="C")
        return np.ascontiguousarray(self.matrix[self.positions[start:stop]], dtype=np.float64)

    def column(self, j: int) -> np.ndarray:
        """Return feature ``j`` of every row."""
        if self.positions is None:
            return np.asarray(self.matrix[:, j], dtype=np.float64)
        return np.asarray(self.matrix[self.positions, j], dtype=np.float64)

    def subset(self, chosen: np.ndarray | None) -> Rows:
        """Return the rows at ``chosen`` (all of them for None)."""
        if chosen is None:
            return self
        positions = chosen if self.positions is None else self.positions[chosen]
        return Rows(self.matrix, positions, self.labels[chosen])


def partial_dependence(chain: Chain, feature: str | Sequence[str], upto: int | None = None,
                       stage: int | None = None, grid: Any = None, part: Part = "train",
                       sample: int | None = None, *, ice_rows: int = ICE_ROWS, seed: int | None = None) -> pd.DataFrame:
    """Return one row per grid value: ``feature`` (and ``feature_2`` for a pair), ``average``,
    ``ice_low``, ``ice_high``, ``ice_std``, ``rows`` and ``ice_rows``.

    ``feature`` is one feature name or two; ``grid`` the values to use (a list, or a pair of
    lists for two features; level names for a categorical feature). ``upto`` (default the last
    stage) or ``stage`` say what predicts. ``sample`` bounds the rows of ``part`` averaged over.
    """
    names = _names(feature)
    one_output(chain.task, "partial dependence")
    seed = chain.seed if seed is None else int(seed)
    check_part(chain, part)
    row, which = _which(len(chain.stages), upto, stage)
    grid_key = _grid_key(grid)
    question = ("dependence", names, which, grid_key, part, sample, ice_rows, seed)

    def compute() -> pd.DataFrame:
        rows = _chain_rows(chain, part, sample, seed)
        return dependence_table(chain.fitted(), rows, names, which, grid, ice_rows, seed)[0]

    return remembered(chain, list(chain.stages[:row]), question, compute)


def individual_curves(chain: Chain, feature: str | Sequence[str], upto: int | None = None,
                      stage: int | None = None, grid: Any = None, part: Part = "train", *, curves: int = 50,
                      seed: int | None = None) -> pd.DataFrame:
    """Return individual conditional expectation curves of at most ``curves`` rows of ``part``, long
    form: ``position`` (row of the frame the chain was built from), ``feature`` (and ``feature_2``)
    and ``prediction``."""
    names = _names(feature)
    seed = chain.seed if seed is None else int(seed)
    check_part(chain, part)
    _, which = _which(len(chain.stages), upto, stage)
    rows = _chain_rows(chain, part, None, seed)
    _, ice, labels, points = dependence_table(chain.fitted(), rows, names, which, grid, curves, seed)
    return _long_curves(ice, labels, points, names)


def fitted_partial_dependence(fitted: FittedChain, frame: pd.DataFrame, feature: str | Sequence[str],
                              upto: int | None = None, stage: int | None = None, grid: Any = None,
                              sample: int | None = None, *, ice_rows: int = ICE_ROWS, seed: int = 0) -> pd.DataFrame:
    """Return the partial dependence of a loaded chain over the rows of ``frame`` (as ``partial_dependence``)."""
    names = _names(feature)
    _, which = _which(len(fitted.stages), upto, stage)
    matrix = fitted.encode(frame, source="frame")
    rows = Rows(matrix, None, np.arange(len(frame))).subset(sample_rows(len(frame), sample, seed))
    return dependence_table(fitted, rows, names, which, grid, ice_rows, seed)[0]


# ----------------------------------------------------------------------------- the computation


def dependence_table(fitted: FittedChain, rows: Rows, names: tuple[str, ...], which: tuple[str, int],
                     grid: Any, ice_rows: int, seed: int) -> tuple[pd.DataFrame, np.ndarray, np.ndarray, list]:
    """Return the partial dependence table, the individual curves (ICE rows x grid points), the
    labels of the ICE rows and the grid points (tuples of matrix values)."""
    one_output(fitted.task, "partial dependence")
    if len(rows) == 0:
        raise StageSpecError("there are no rows to average over")
    js = [feature_index(fitted.schema, name) for name in names]
    columns = [fitted.schema.columns[j] for j in js]
    grids = _grids(columns, [rows.column(j) for j in js], grid)
    points = list(itertools.product(*grids))
    mode, k = which
    parts = [fitted.stages[k - 1]] if mode == "stage" else list(fitted.stages[:k])
    offset = 0.0 if mode == "stage" else float(fitted.start[0])
    link: Callable[[np.ndarray], np.ndarray] = (lambda raw: raw) if mode == "stage" else fitted.loss.link
    varying = [s for s in parts if any(j in s.feature_index for j in js)]
    fixed = [s for s in parts if s not in varying]
    additive = [s for s in varying if _is_additive(s.learner)]
    varying = [s for s in varying if s not in additive]
    n_all = len(fitted.schema.columns)
    ice_at = sample_rows(len(rows), _positive(ice_rows, "ice_rows"), seed + 1)
    ice_at = np.arange(len(rows)) if ice_at is None else ice_at
    totals = np.zeros(len(points))
    ice = np.empty((len(ice_at), len(points)))
    for start in range(0, len(rows), BLOCK_ROWS):
        X = rows.block(start, start + BLOCK_ROWS)
        base = offset + _contribution(fixed, X, n_all)
        shares = [AdditiveShare.of(stage, X, js, n_all) for stage in additive]
        base += sum((share.others for share in shares), np.zeros(len(X)))
        mine = ice_at[(ice_at >= start) & (ice_at < start + len(X))]
        where = np.searchsorted(ice_at, mine)
        for p, point in enumerate(points):
            X[:, js] = point
            held = sum(share.at(X[:1]) for share in shares)
            prediction = link(base + held + _contribution(varying, X, n_all))
            totals[p] += float(np.sum(prediction))
            ice[where, p] = prediction[mine - start]
    table = _table(names, columns, points, totals / len(rows), ice, len(rows))
    table.attrs.update(features=names, what=("stage" if mode == "stage" else "upto"), stage=k, rows=len(rows))
    return table, ice, rows.labels[ice_at], points


def _is_additive(learner: Any) -> bool:
    """Return True for a learner whose output is a sum of per-column parts: a design whose
    columns each come from one input column, times coefficients (linear kinds, splines)."""
    design = getattr(learner, "design", None)
    return design is not None and hasattr(design, "feature_groups") and hasattr(learner, "coef")


@dataclass(frozen=True)
class AdditiveShare:
    """An additive stage on one block of rows, split into what the grid features do and what the
    others do: with the grid features held at a value, the stage's output is ``others`` plus
    ``at(that value)``, the same for every row."""

    stage: Any
    columns: list[int]
    mine: np.ndarray
    others: np.ndarray

    @classmethod
    def of(cls, stage: Any, X: np.ndarray, js: list[int], n_all: int) -> AdditiveShare:
        """Return the stage's share of the block ``X`` (rows of the schema matrix) apart from ``js``."""
        cols = list(stage.feature_index)
        local = [cols.index(j) for j in js if j in cols]
        learner = stage.learner
        mine = np.isin(np.asarray(learner.design.feature_groups(), dtype=np.int64), local)
        design = learner.design.transform(X if cols == list(range(n_all)) else X[:, cols])
        coef = np.asarray(learner.coef, dtype=np.float64)
        others = stage.scale * (design[:, ~mine] @ coef[~mine] + learner.intercept)
        return cls(stage, cols, mine, others)

    def at(self, row: np.ndarray) -> float:
        """Return the stage's output from the grid features, given one row holding their values."""
        learner = self.stage.learner
        design = learner.design.transform(row[:, self.columns])
        return float(self.stage.scale * (design[0, self.mine] @ np.asarray(learner.coef)[self.mine]))


def _contribution(stages: list[Any], X: np.ndarray, n_all: int) -> np.ndarray:
    out = np.zeros(X.shape[0])
    for stage in stages:
        cols = stage.feature_index
        part = X if cols == tuple(range(n_all)) else X[:, list(cols)]
        out += stage.scale * np.asarray(stage.learner.predict(part), dtype=np.float64)
    return out


def _table(names: tuple[str, ...], columns: list[ColumnInfo], points: list[tuple], average: np.ndarray,
           ice: np.ndarray, n_rows: int) -> pd.DataFrame:
    data: dict[str, Any] = {}
    for i, column in enumerate(columns):
        data["feature" if i == 0 else "feature_2"] = [_shown(column, point[i]) for point in points]
    low, high = (np.percentile(ice, q, axis=0) for q in SPREAD_PERCENTILES)
    data.update(average=average, ice_low=low, ice_high=high, ice_std=np.std(ice, axis=0),
                rows=n_rows, ice_rows=ice.shape[0])
    return pd.DataFrame(data)


def _long_curves(ice: np.ndarray, labels: np.ndarray, points: list[tuple], names: tuple[str, ...]) -> pd.DataFrame:
    n_rows, n_points = ice.shape
    data: dict[str, Any] = {"position": np.repeat(labels, n_points)}
    for i in range(len(names)):
        data["feature" if i == 0 else "feature_2"] = np.tile([point[i] for point in points], n_rows)
    data["prediction"] = ice.ravel()
    return pd.DataFrame(data)


# ----------------------------------------------------------------------------- grids and arguments


def _grids(columns: list[ColumnInfo], values: list[np.ndarray], grid: Any) -> list[np.ndarray]:
    """Return the grid of each feature as matrix values (category codes for levels)."""
    given: list[Any] = [None] * len(columns)
    if grid is not None:
        given = [grid] if len(columns) == 1 else list(grid)
        if len(given) != len(columns):
            raise StageSpecError("for two features, grid must be a pair of lists (one per feature)")
    points = POINTS[len(columns)]
    return [_grid(column, column_values, chosen, points)
            for column, column_values, chosen in zip(columns, values, given, strict=True)]


def _grid(column: ColumnInfo, values: np.ndarray, given: Any, points: int) -> np.ndarray:
    if given is not None:
        return _given_grid(column, given)
    present = values[~np.isnan(values)]
    if column.role == BOOLEAN:
        return np.array([0.0, 1.0])
    if column.role == CATEGORICAL:
        return np.unique(present)
    distinct = np.unique(present)
    if len(distinct) <= points:
        return distinct
    return np.unique(np.quantile(present, np.linspace(0.05, 0.95, points)))


def _given_grid(column: ColumnInfo, given: Any) -> np.ndarray:
    items = list(given) if isinstance(given, list | tuple | np.ndarray | pd.Series | pd.Index) else [given]
    if not items:
        raise StageSpecError(f"the grid of {column.name!r} is empty")
    if column.role == CATEGORICAL:
        lookup = {level: code for code, level in enumerate(column.levels)}
        unknown = [item for item in items if str(item) not in lookup]
        if unknown:
            raise StageSpecError(f"{unknown[0]!r} is not a level of {column.name!r}")
        return np.array([lookup[str(item)] for item in items], dtype=np.float64)
    try:
        numbers = np.array([float(item) for item in items], dtype=np.float64)
    except (TypeError, ValueError):
        raise StageSpecError(f"the grid of {column.name!r} must hold numbers") from None
    if not np.all(np.isfinite(numbers)):
        raise StageSpecError(f"the grid of {column.name!r} must hold finite numbers")
    return numbers


def _shown(column: ColumnInfo, value: float) -> Any:
    if column.role == CATEGORICAL:
        return column.levels[int(value)]
    if column.role == BOOLEAN:
        return bool(value)
    return float(value)


def _names(feature: str | Sequence[str]) -> tuple[str, ...]:
    names = (feature,) if isinstance(feature, str) else tuple(feature)
    if len(names) not in (1, 2) or not all(isinstance(n, str) for n in names):
        raise StageSpecError("partial dependence takes one feature name or two")
    if len(names) == 2 and names[0] == names[1]:
        raise StageSpecError(f"the two features must differ (both are {names[0]!r})")
    return names


def _which(n_stages: int, upto: int | None, stage: int | None) -> tuple[int, tuple[str, int]]:
    """Return the chain row whose state the answer depends on, and ("upto" | "stage", k)."""
    if stage is not None:
        if upto is not None:
            raise StageSpecError("give upto (the chain up to a stage) or stage (one stage alone), not both")
        k = check_stage(n_stages, stage)
        return k, ("stage", k)
    k = check_upto(n_stages, upto)
    return k, ("upto", k)


def _grid_key(grid: Any) -> Any:
    if grid is None:
        return None
    if isinstance(grid, str):
        return (grid,)
    try:
        return tuple(_grid_key(g) if isinstance(g, list | tuple | np.ndarray | pd.Series) else g for g in grid)
    except TypeError:
        return (grid,)


def _positive(value: int, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 1:
        raise StageSpecError(f"{name} must be a whole number of at least 1, not {value!r}")
    return int(value)


def _chain_rows(chain: Chain, part: Part, sample: int | None, seed: int) -> Rows:
    positions = part_positions(chain, part)
    chosen = sample_rows(len(positions), sample, seed)
    if chosen is not None:  # the frame's row of the sampled rows only, not of every row of the part
        positions = positions[chosen]
    return Rows(chain.matrix, positions, frame_positions(chain, positions))
