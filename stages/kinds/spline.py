"""The ``spline`` kind: an additive model of B-splines, one smooth curve per numeric feature, fit by ridge.

Each numeric column (NaN imputed by the fitting rows' median) becomes a B-spline basis of
``degree`` over ``n_knots`` knots placed at quantiles (or evenly) of its fitting values. The
knot vector is extended beyond the boundary knots by ``degree`` knots on each side, evenly
spaced at the distance of the first and last pair of base knots, exactly as scikit-learn's
SplineTransformer does; outside the fitted range the basis is held at its boundary value
(constant extrapolation). Boolean columns enter as one 0/1 column, categorical ones one-hot
over the levels seen; then Ridge(alpha) fits the residuals. Knots are stored, so the
artifact is JSON.
"""

from __future__ import annotations

import math
from typing import Any, ClassVar

import numpy as np
from scipy.interpolate import BSpline

from ..errors import ChainFileError, StageSpecError
from ..limits import MAX_COLUMNS
from ..schema import BOOLEAN, CATEGORICAL, NUMERIC, ColumnInfo
from . import register
from .base import Artifact, FitRequest, StageKind, check_has_features
from .design import ColumnStep, impute_median, one_hot
from .linear import (
    LinearModel,
    checked_coefficients,
    constant_model,
    dump_linear,
    fit_estimator,
    linear_importance,
    read_linear,
)

#: the largest degree and number of base knots a spline stage takes (and a chain file may hold)
MAX_DEGREE = 10
MAX_BASE_KNOTS = 10_000
MAX_KNOTS = MAX_BASE_KNOTS + 2 * MAX_DEGREE


def base_knots(values: np.ndarray, n_knots: int, placement: str) -> np.ndarray:
    """Return ``n_knots`` base knots of one column: its quantiles, or evenly spaced from min to max."""
    if placement == "quantile":
        return np.nanpercentile(values, 100 * np.linspace(0, 1, num=n_knots, dtype=np.float64))
    return np.linspace(np.nanmin(values), np.nanmax(values), num=n_knots, endpoint=True, dtype=np.float64)


def full_knot_vector(base: np.ndarray, degree: int) -> np.ndarray:
    """Return ``base`` extended by ``degree`` knots each side, spaced as its first and last pair."""
    low, high = base[1] - base[0], base[-1] - base[-2]
    return np.r_[
        np.linspace(base[0] - degree * low, base[0] - low, num=degree),
        base,
        np.linspace(base[-1] + high, base[-1] + degree * high, num=degree),
    ]


def spline_basis(values: np.ndarray, knots: np.ndarray, degree: int) -> np.ndarray:
    """Return the B-spline basis of ``values`` on ``knots``, x clipped to the boundary knots first."""
    if values.size == 0:
        return np.zeros((0, len(knots) - degree - 1))
    inside = np.clip(values, knots[degree], knots[-degree - 1])
    return BSpline.design_matrix(inside, knots, degree).toarray()


class SplineDesign:
    """Per-column preprocessing of the spline kind: knots and medians, 0/1 columns, one-hot codes."""

    def __init__(self, steps: list[dict[str, Any]], degree: int) -> None:
        self.steps = steps
        self.degree = degree

    @classmethod
    def fit(cls, X: np.ndarray, columns: tuple[ColumnInfo, ...], n_knots: int, degree: int, placement: str) -> SplineDesign:
        """Return the design learnt from the fitting rows ``X``."""
        steps: list[dict[str, Any]] = []
        for j, col in enumerate(columns):
            values = X[:, j]
            if col.role == CATEGORICAL:
                seen = np.unique(values[~np.isnan(values)]).astype(np.int64)
                steps.append({"role": CATEGORICAL, "codes": [int(c) for c in seen]})
                continue
            imputed, median = impute_median(values)
            step: dict[str, Any] = {"role": col.role, "median": median}
            if col.role != BOOLEAN:
                knots = full_knot_vector(base_knots(imputed, n_knots, placement), degree)
                step["knots"] = [float(k) for k in knots]
            steps.append(step)
        return cls(steps, degree)

    def widths(self) -> list[int]:
        """Return the number of design columns of each input column."""
        out = []
        for step in self.steps:
            if step["role"] == CATEGORICAL:
                out.append(len(step["codes"]))
            elif "knots" in step:
                out.append(len(step["knots"]) - self.degree - 1)
            else:
                out.append(1)
        return out

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Return the design matrix of the rows ``X``: spline bases, 0/1 columns, one-hot blocks."""
        X = np.asarray(X, dtype=np.float64)
        blocks = [np.empty((X.shape[0], 0))]
        for j, step in enumerate(self.steps):
            values = X[:, j]
            if step["role"] == CATEGORICAL:
                blocks.append(one_hot(values, tuple(step["codes"])))
                continue
            filled = np.where(np.isnan(values), step["median"], values)
            if "knots" in step:
                blocks.append(spline_basis(filled, np.asarray(step["knots"]), self.degree))
            else:
                blocks.append(filled[:, None])
        return np.hstack(blocks)

    def feature_groups(self) -> list[int]:
        """Return, for each design column, the index of the input column it came from."""
        return [j for j, width in enumerate(self.widths()) for _ in range(width)]

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict of the design."""
        return {"degree": self.degree, "steps": self.steps}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> SplineDesign:
        """Return the design described by ``data``; raise ChainFileError when it is malformed or out of
        range (a degree SciPy cannot use, knots that are not finite and sorted, unknown roles)."""
        try:
            degree = data["degree"]
            if isinstance(degree, bool) or not isinstance(degree, int) or not 0 <= degree <= MAX_DEGREE:
                raise ValueError(f"degree must be a whole number from 0 to {MAX_DEGREE}")
            steps = [_checked_step(dict(step), degree) for step in data["steps"]]
            if not 0 < len(steps) <= MAX_COLUMNS:
                raise ValueError("a spline design needs one step per input column")
            design = cls(steps, degree)
        except (KeyError, TypeError, ValueError) as exc:
            raise ChainFileError(f"spline stage design is not valid ({exc!r})") from None
        return design


def _checked_step(step: dict[str, Any], degree: int) -> dict[str, Any]:
    """Return one stored spline step, checked; raise ValueError for a value out of place."""
    role = step.get("role")
    if role == CATEGORICAL:
        ColumnStep.from_dict(step)  # the same codes check as the linear design's
        return {"role": role, "codes": list(step["codes"])}
    if role not in (NUMERIC, BOOLEAN) or not _finite(step.get("median")):
        raise ValueError("a spline step needs a known role and a finite median")
    checked = {"role": role, "median": float(step["median"])}
    if "knots" in step:
        knots = step["knots"]
        if not isinstance(knots, list) or not 2 * degree + 2 <= len(knots) <= MAX_KNOTS or not all(map(_finite, knots)):
            raise ValueError(f"knots must be {2 * degree + 2} to {MAX_KNOTS} finite numbers")
        if any(b < a for a, b in zip(knots, knots[1:], strict=False)):
            raise ValueError("knots must be in non-decreasing order")
        checked["knots"] = [float(k) for k in knots]
    return checked


def _finite(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def check_spline_params(params: dict[str, Any], kind: str) -> None:
    """Raise StageSpecError when n_knots, degree or knots cannot build a spline basis."""
    n_knots, degree = params["n_knots"], params["degree"]
    if isinstance(n_knots, bool) or not isinstance(n_knots, int) or not 2 <= n_knots <= MAX_BASE_KNOTS:
        raise StageSpecError(f"kind {kind!r}: n_knots must be a whole number from 2 to {MAX_BASE_KNOTS:,}, not {n_knots!r}")
    if isinstance(degree, bool) or not isinstance(degree, int) or not 0 <= degree <= MAX_DEGREE:
        raise StageSpecError(f"kind {kind!r}: degree must be a whole number from 0 to {MAX_DEGREE}, not {degree!r}")
    if params["knots"] not in ("quantile", "uniform"):
        raise StageSpecError(f"kind {kind!r}: knots must be 'quantile' or 'uniform', not {params['knots']!r}")


class SplineKind(StageKind):
    """Additive cubic splines with a ridge penalty, fit to the residuals."""

    name: ClassVar[str] = "spline"
    summary: ClassVar[str] = "a smooth curve per numeric feature (B-splines, ridge fit)"
    defaults: ClassVar[dict[str, Any]] = {"n_knots": 6, "degree": 3, "knots": "quantile", "alpha": 1.0}
    main_params: ClassVar[tuple[str, ...]] = ("n_knots", "alpha")

    def fit(self, request: FitRequest, params: dict[str, Any]) -> LinearModel:
        """Return the ridge fit of the residuals on the spline design."""
        from sklearn.linear_model import Ridge

        check_has_features(request.X, self.name)
        check_spline_params(params, self.name)
        design = SplineDesign.fit(request.X, request.columns, params["n_knots"], params["degree"], params["knots"])
        matrix = design.transform(request.X)
        target = np.asarray(request.residual, dtype=np.float64)
        if matrix.shape[1] == 0:
            return constant_model(design, target, True)
        ridge = fit_estimator(Ridge(alpha=params["alpha"]), matrix, target, self.name, sample_weight=request.weight)
        coef = ridge.coef_.T if target.ndim == 2 else ridge.coef_
        coef, intercept = checked_coefficients(coef, ridge.intercept_, self.name, request.outputs)
        return LinearModel(design, coef, intercept)

    def save(self, learner: LinearModel) -> Artifact:
        """Return the model as JSON (knots, medians, one-hot codes, coefficients, intercept)."""
        return dump_linear(learner, self.name)

    def load(self, artifact: Artifact) -> LinearModel:
        """Return the model stored in ``artifact``."""
        design_dict, coef, intercept = read_linear(artifact, self.name)
        design = SplineDesign.from_dict(design_dict)
        if len(coef) != sum(design.widths()):
            raise ChainFileError(f"spline stage artifact has {len(coef)} coefficients for its design")
        return LinearModel(design, coef, intercept)

    def importance(self, learner: LinearModel, columns) -> np.ndarray:
        """Return |coef| of each basis column, summed per input column."""
        return linear_importance(learner, len(columns))


SPLINE = register(SplineKind())
