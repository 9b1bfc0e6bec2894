"""The fitted curves of a spline stage: what the stage adds along each of its features.

A spline stage is additive: its output is an intercept plus one curve per feature (a B-spline
basis for a numeric feature, a 0/1 column for a boolean one, one column per level for a
categorical one). Each curve is given on a grid, multiplied by the stage's scale, and relative
to one reference value, since only the curve's shape is identified apart from the intercept:
a numeric feature's median on the fitting rows, false for a boolean, and the first level seen
for a categorical feature. ``relative_to`` names it.

The grid of a numeric feature runs evenly between the outer knots (the fitting rows' smallest
and largest values for quantile knots); beyond them the stage holds its boundary value.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import StageSpecError
from ..kinds.spline import spline_basis
from ..schema import BOOLEAN, CATEGORICAL, ColumnInfo
from .rows import check_stage

if TYPE_CHECKING:
    from ..chain import Chain
    from ..predictor import FittedChain


def spline_curves(chain: Chain, stage: int, *, points: int = 50) -> pd.DataFrame:
    """Return the curves of spline stage ``stage``: one row per feature and grid value, with columns
    ``feature``, ``value``, ``contribution`` and ``relative_to``."""
    k = check_stage(len(chain.stages), stage)
    fitted_stage = chain.stages[k - 1]
    return _curves(fitted_stage.kind, k, fitted_stage.learners[0], fitted_stage.scale,
                   chain.schema.subset(list(fitted_stage.feature_index)), points)


def fitted_curves(fitted: FittedChain, stage: int, *, points: int = 50) -> pd.DataFrame:
    """Return the curves of spline stage ``stage`` of a loaded chain (as ``spline_curves``)."""
    k = check_stage(len(fitted.stages), stage)
    fitted_stage = fitted.stages[k - 1]
    return _curves(fitted_stage.kind, k, fitted_stage.learner, fitted_stage.scale,
                   fitted.schema.subset(list(fitted_stage.feature_index)), points)


def _curves(kind: str, k: int, learner: Any, scale: float, columns: tuple[ColumnInfo, ...], points: int) -> pd.DataFrame:
    if kind != "spline":
        raise StageSpecError(f"stage {k} is a {kind} stage; fitted curves are for spline stages")
    if isinstance(points, bool) or not isinstance(points, int) or points < 2:
        raise StageSpecError(f"points must be a whole number of at least 2, not {points!r}")
    design, coef = learner.design, np.asarray(learner.coef, dtype=np.float64)
    if coef.ndim != 1:
        raise StageSpecError(f"stage {k} fits one curve per class; fitted curves are for regression and binary chains")
    frames, at = [], 0
    for column, step, width in zip(columns, design.steps, design.widths(), strict=True):
        block = coef[at:at + width]
        at += width
        if step["role"] == CATEGORICAL:
            codes = step["codes"]
            if not codes:
                continue
            values: list[Any] = [column.levels[c] for c in codes]
            curve, relative = block - block[0], values[0]
        elif step["role"] == BOOLEAN or "knots" not in step:
            values, curve, relative = [False, True], np.array([0.0, float(block[0])]), False
        else:
            knots = np.asarray(step["knots"], dtype=np.float64)
            degree = design.degree
            grid = np.linspace(knots[degree], knots[-degree - 1], points)
            curve = spline_basis(grid, knots, degree) @ block
            curve = curve - float((spline_basis(np.array([step["median"]]), knots, degree) @ block)[0])
            values, relative = [float(v) for v in grid], float(step["median"])
        frames.append(pd.DataFrame({"feature": column.name, "value": pd.Series(values, dtype=object),
                                    "contribution": scale * np.asarray(curve, dtype=np.float64),
                                    "relative_to": pd.Series([relative] * len(values), dtype=object)}))
    if not frames:
        return pd.DataFrame(columns=["feature", "value", "contribution", "relative_to"])
    return pd.concat(frames, ignore_index=True)
