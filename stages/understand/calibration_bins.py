"""Calibration of a binary chain: predicted probability in bins against the rate observed there.

Bins as scikit-learn's ``calibration_curve`` makes them: ``uniform`` splits [0, 1] into equal
widths, ``quantile`` puts equal shares of the rows in each bin; a probability on an inner edge
belongs to the bin below it. Every bin is returned, an empty one with 0 rows and NaN rates.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..errors import StageSpecError
from ..validation import Part
from .cache import remembered
from .rows import check_part, check_upto, encode_target, part_raw

if TYPE_CHECKING:
    from ..chain import Chain
    from ..predictor import FittedChain


def calibration(chain: Chain, part: Part = "valid", bins: int = 10, *, upto: int | None = None,
                strategy: str = "uniform") -> pd.DataFrame:
    """Return one row per bin of predicted probability on ``part`` after row ``upto`` (default the
    last stage): ``low``, ``high``, ``rows``, ``predicted`` (mean probability) and ``observed``
    (share of positives)."""
    if chain.task != "binary":
        raise StageSpecError(f"calibration is for binary chains; this chain is {_task(chain.task)}")
    row = check_upto(len(chain.stages), upto)
    check_part(chain, part)

    def compute() -> pd.DataFrame:
        probability = chain.loss.link(part_raw(chain, part, row))[:, 0]
        table = calibration_table(chain.part_targets(part), probability, bins, strategy)
        table.attrs.update(part=part, upto=row)
        return table

    return remembered(chain, list(chain.stages[:row]), ("calibration", part, bins, strategy), compute)


def fitted_calibration(fitted: FittedChain, frame: pd.DataFrame, bins: int = 10, *, upto: int | None = None,
                       strategy: str = "uniform") -> pd.DataFrame:
    """Return the calibration table of a loaded binary chain on the rows of ``frame`` (which holds the target)."""
    if fitted.task != "binary":
        raise StageSpecError(f"calibration is for binary chains; this chain is {_task(fitted.task)}")
    row = check_upto(len(fitted.stages), upto)
    if fitted.schema.target not in frame.columns:
        raise StageSpecError(f"the frame has no target column {fitted.schema.target!r}")
    y = encode_target(fitted.schema, frame[fitted.schema.target], "frame")
    probability = fitted.loss.link(fitted.raw_from_matrix(fitted.encode(frame, source="frame"), row))[:, 0]
    known = ~np.isnan(y)
    return calibration_table(y[known], probability[known], bins, strategy)


def _task(task: str) -> str:
    return "a regression" if task == "regression" else task


def calibration_table(y: np.ndarray, probability: np.ndarray, bins: int = 10, strategy: str = "uniform") -> pd.DataFrame:
    """Return the calibration table of 0/1 outcomes ``y`` against predicted ``probability``."""
    if isinstance(bins, bool) or not isinstance(bins, int | np.integer) or bins < 1:
        raise StageSpecError(f"bins must be a whole number of at least 1, not {bins!r}")
    if strategy == "uniform":
        edges = np.linspace(0.0, 1.0, int(bins) + 1)
    elif strategy == "quantile":
        edges = np.percentile(probability, np.linspace(0, 100, int(bins) + 1)) if len(probability) else \
            np.linspace(0.0, 1.0, int(bins) + 1)
    else:
        raise StageSpecError(f"unknown strategy {strategy!r} (uniform or quantile)")
    codes = np.searchsorted(edges[1:-1], probability)
    n = len(edges) - 1
    rows = np.bincount(codes, minlength=n)
    predicted = np.bincount(codes, weights=probability, minlength=n)
    observed = np.bincount(codes, weights=y, minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return pd.DataFrame({
            "low": edges[:-1], "high": edges[1:], "rows": rows,
            "predicted": np.where(rows > 0, predicted / rows, np.nan),
            "observed": np.where(rows > 0, observed / rows, np.nan),
        })
