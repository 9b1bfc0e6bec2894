"""The probe rows: rows the export checks the model on, and writes beside it for the deployment side.

The rows are the chain file's own probe rows (fitting rows kept in the file), any rows the user
passes, their values shuffled between rows, and edge rows: each feature in turn made missing,
given a level never seen in training, pushed far below and above the values seen, or set to 0.
``expected`` is what the chain's own ``predict`` gives on them; ``compare`` runs the model in
onnxruntime and measures the difference.

Tolerance, per row: where the graph is float64 throughout, |onnx - predict| at most 1e-9 times the
larger of |predict| and the target's spread; where an operator forces float32, at most 1e-5
times the spread. The spread is the start value's RMSE on the fitting rows (the target's standard
deviation for squared loss) for regression, and sqrt(p (1 - p)) at the base rate p for binary
chains, whose probabilities are compared (a class label may differ only where the probability
is within the tolerance of the threshold). A multiclass chain's K probabilities are compared
each, the spread being sqrt(mean of p_k (1 - p_k)) at the classes' start probabilities, and a
class label may differ only where the two most probable classes are within the tolerance.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ...loglink import is_log_link
from ...predictor import FittedChain, UnseenLevelsWarning, UnseenMissingWarning, probability_columns
from ...schema import BOOLEAN, CATEGORICAL, Schema
from .columns import MISSING_TEXT

#: relative tolerance where the graph is float64 throughout, and where an operator forces float32
RTOL_FLOAT64 = 1e-9
RTOL_FLOAT32 = 1e-5
#: at most this many edge rows (each feature made missing, unseen, extreme or zero)
EDGE_ROWS = 256
#: the level the edge rows give a categorical feature (made unique against its levels)
UNSEEN_LEVEL = "(a level never seen)"
#: the exposures the probe rows of a chain fit with an exposure column get, in turn (small, whole, large)
EXPOSURES = (1.0, 0.25, 3.0, 12.0, 0.5, 100.0)


def exposure_input(fitted: FittedChain) -> str | None:
    """Return the exposure column a log-link chain's model takes as an input, or None."""
    return fitted.exposure_column if is_log_link(fitted.loss) else None


def with_exposure(fitted: FittedChain, rows: pd.DataFrame) -> pd.DataFrame:
    """Return ``rows`` with the made-up exposures as the exposure column when the model takes one."""
    name = exposure_input(fitted)
    if name is None:
        return rows
    return rows.assign(**{name: np.resize(np.asarray(EXPOSURES), len(rows))})


# ----------------------------------------------------------------------------- rows
def decode(schema: Schema, matrix: np.ndarray) -> pd.DataFrame:
    """Return rows of the schema's matrix as a frame of feature values (levels as text, None when missing)."""
    data: dict[str, Any] = {}
    for j, col in enumerate(schema.columns):
        values = np.asarray(matrix[:, j], dtype=np.float64)
        if col.role == CATEGORICAL:
            data[col.name] = pd.Series([None if math.isnan(v) else col.levels[int(v)] for v in values], dtype=object)
        else:
            data[col.name] = values
    return pd.DataFrame(data)


def probe_rows(schema: Schema, stored: np.ndarray | None, extra: pd.DataFrame | None = None) -> pd.DataFrame:
    """Return the probe rows: the stored ones, ``extra``, a shuffle of their values, and edge rows."""
    parts = []
    if stored is not None and len(stored):
        parts.append(decode(schema, stored))
    if extra is not None and len(extra):
        parts.append(_features_of(schema, extra))
    base = pd.concat(parts, ignore_index=True) if parts else _blank_row(schema)
    rng = np.random.default_rng(0)
    shuffled = pd.DataFrame({name: base[name].to_numpy()[rng.permutation(len(base))] for name in schema.names})
    missing_everywhere = _blank_row(schema)
    return pd.concat([base, shuffled, _edge_rows(schema, base), missing_everywhere], ignore_index=True)


def _features_of(schema: Schema, frame: pd.DataFrame) -> pd.DataFrame:
    out = {}
    for col in schema.columns:
        values = frame[col.name]
        if col.role == CATEGORICAL:
            out[col.name] = pd.Series([None if pd.isna(v) else str(v) for v in values], dtype=object)
        else:
            out[col.name] = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
    return pd.DataFrame(out)


def _blank_row(schema: Schema) -> pd.DataFrame:
    return pd.DataFrame({c.name: pd.Series([None], dtype=object) if c.role == CATEGORICAL else [np.nan]
                         for c in schema.columns})


def _edge_rows(schema: Schema, base: pd.DataFrame) -> pd.DataFrame:
    per_feature = max(1, EDGE_ROWS // (4 * len(schema.columns)))
    seed = base.iloc[:per_feature]
    rows = []
    for col in schema.columns:
        for value in _edge_values(col, base[col.name]):
            changed = seed.copy()
            changed[col.name] = pd.Series([value] * len(changed), index=changed.index,
                                          dtype=object if col.role == CATEGORICAL else np.float64)
            rows.append(changed)
    return pd.concat(rows, ignore_index=True)


def _edge_values(col: Any, values: pd.Series) -> list[Any]:
    if col.role == CATEGORICAL:
        unseen = UNSEEN_LEVEL
        while unseen in col.levels:
            unseen += "!"
        return [None, unseen]
    if col.role == BOOLEAN:
        return [np.nan, 0.0, 1.0]
    seen = values.to_numpy(dtype=np.float64)
    seen = seen[np.isfinite(seen)]
    low, high = (float(seen.min()), float(seen.max())) if len(seen) else (0.0, 1.0)
    reach = max(high - low, abs(high), abs(low), 1.0)
    return [np.nan, low - 10 * reach, high + 10 * reach, 0.0]


# ----------------------------------------------------------------------------- inputs and outputs
def feeds(schema: Schema, rows: pd.DataFrame, exposure: str | None = None) -> dict[str, np.ndarray]:
    """Return the model's inputs for ``rows``: [N] doubles per numeric and boolean feature, strings per
    categorical one (the empty string for a missing value), and the ``exposure`` column's doubles."""
    out: dict[str, np.ndarray] = {}
    if exposure is not None:
        out[exposure] = rows[exposure].to_numpy(dtype=np.float64)
    for col in schema.columns:
        values = rows[col.name]
        if col.role == CATEGORICAL:
            out[col.name] = np.asarray([MISSING_TEXT if v is None or (isinstance(v, float) and math.isnan(v))
                                        else str(v) for v in values], dtype=object)
        else:
            out[col.name] = values.to_numpy(dtype=np.float64, na_value=np.nan)
    return out


def expected(fitted: FittedChain, rows: pd.DataFrame) -> dict[str, np.ndarray]:
    """Return what ``predict`` (and ``predict_proba`` for binary chains) gives on ``rows``, by output name."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UnseenLevelsWarning)  # the edge rows hold unseen levels on purpose
        warnings.simplefilter("ignore", UnseenMissingWarning)  # and missing values in every column
        exposure = exposure_input(fitted)
        out = {"prediction": np.asarray(fitted.predict(rows, source="probe rows", exposure=exposure))}
        if fitted.task == "binary":
            out["probability"] = fitted.predict_proba(rows, source="probe rows")[:, 1]
        elif fitted.task == "multiclass":
            out["probability"] = fitted.predict_proba(rows, source="probe rows")
    return out


def spread(fitted: FittedChain) -> float:
    """Return the target's spread the tolerance is measured in (see the module's note)."""
    if fitted.task == "binary":
        p = 1.0 / (1.0 + math.exp(-float(fitted.start[0])))
        return math.sqrt(p * (1.0 - p)) or 1.0
    if fitted.task == "multiclass":
        start = np.asarray(fitted.start, dtype=np.float64)
        p = np.exp(start - start.max())
        p /= p.sum()
        return math.sqrt(float(np.mean(p * (1.0 - p)))) or 1.0
    rmse = (fitted.start_scores.get("train") or {}).get("rmse")
    return float(rmse) if isinstance(rmse, int | float) and math.isfinite(rmse) and rmse > 0 else 1.0


@dataclass(frozen=True)
class Comparison:
    """How far the model's outputs are from ``predict`` on the probe rows."""

    rows: int
    largest: float           # the largest |onnx - predict| of the compared output
    largest_share: float     # the largest difference as a share of its row's tolerance (<= 1 passes)
    worst_row: int
    labels_differ: int       # binary: rows whose class differs where the probability is not at the threshold

    @property
    def passed(self) -> bool:
        """Return True when every row is within its tolerance and no class label differs."""
        return self.largest_share <= 1.0 and self.labels_differ == 0


def compare(fitted: FittedChain, got: dict[str, np.ndarray], want: dict[str, np.ndarray],
            float32: bool = False) -> Comparison:
    """Return how the model's outputs ``got`` compare with ``predict``'s ``want``, at the float32
    tolerance when an operator of the graph forces float32, else at the float64 one."""
    name = "probability" if fitted.task in ("binary", "multiclass") else "prediction"
    scale = spread(fitted)
    ours, theirs = np.asarray(got[name], dtype=np.float64), np.asarray(want[name], dtype=np.float64)
    gap = np.abs(ours - theirs)
    gap[np.isnan(ours) != np.isnan(theirs)] = np.inf
    gap[np.isnan(ours) & np.isnan(theirs)] = 0.0
    allowed = RTOL_FLOAT32 * scale if float32 else RTOL_FLOAT64 * np.maximum(np.abs(theirs), scale)
    share = gap / allowed
    worst = int(np.unravel_index(np.argmax(share), share.shape)[0]) if share.size else 0
    differ = 0
    if fitted.task == "multiclass":
        labels_differ = np.asarray(got["prediction"]).astype(str) != np.asarray(want["prediction"]).astype(str)
        top = np.sort(theirs, axis=1)[:, -2:] if theirs.shape[1] > 1 else np.zeros((len(theirs), 2))
        near_tie = top[:, 1] - top[:, 0] <= 2 * RTOL_FLOAT64 * np.maximum(top[:, 1], scale) if not float32 \
            else top[:, 1] - top[:, 0] <= 2 * RTOL_FLOAT32 * scale
        differ = int((labels_differ & ~near_tie).sum())
    elif fitted.task == "binary":
        labels_differ = np.asarray(got["prediction"]).astype(str) != np.asarray(want["prediction"]).astype(str)
        at_threshold = np.abs(theirs - fitted.threshold) <= allowed
        differ = int((labels_differ & ~at_threshold).sum())
    return Comparison(len(gap), float(gap.max(initial=0.0)), float(share.max(initial=0.0)), worst, differ)


def probe_table(schema: Schema, rows: pd.DataFrame, want: dict[str, np.ndarray],
                exposure: str | None = None) -> pd.DataFrame:
    """Return the probe file's table: the model's inputs as the deployment side feeds them (the
    ``exposure`` input among them), then the expected outputs."""
    table = pd.DataFrame({name: values for name, values in feeds(schema, rows, exposure).items()})
    for name, values in want.items():
        if np.ndim(values) == 2:  # a multiclass chain's probabilities: one column per class, in class order
            for column, part in zip(probability_columns(schema.classes), np.asarray(values).T, strict=True):
                table[column] = part
        else:
            table[name] = values
    return table
