"""The ``mean`` kind: a constant shift, the loss's optimal constant for the current residuals."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from .. import metrics
from ..errors import ChainFileError
from . import register
from .base import Artifact, FitRequest, StageKind


@dataclass
class Constant:
    """A learner that predicts one value for every row (or K values, one per output, as an (n, K) array)."""

    value: float | np.ndarray

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return ``value`` for every row of ``X``."""
        if np.ndim(self.value):
            return np.tile(np.asarray(self.value, dtype=np.float64), (X.shape[0], 1))
        return np.full(X.shape[0], self.value, dtype=np.float64)


class MeanKind(StageKind):
    """A single-leaf stage: the mean residual, or the loss's own optimum (median, Newton step)."""

    name: ClassVar[str] = "mean"
    summary: ClassVar[str] = "a constant shift: the best single value for the residuals"
    refines_leaves: ClassVar[bool] = True

    def leaf_rule(self, loss: Any) -> str:
        """Return the rule the details show: the constant is the loss's own optimum, so no step."""
        return "none (best constant)"

    def fit(self, request: FitRequest, params: dict[str, Any]) -> Constant:
        """Return the mean of the residuals (of each output) as a constant learner."""
        if request.outputs > 1:
            return Constant(np.average(request.residual, axis=0, weights=request.weight))
        return Constant(metrics.average(request.residual, request.weight))

    def refine(self, learner: Constant, request: FitRequest) -> None:
        """Replace the mean with the loss's optimal constant where it has one (exactly 0 right after the start)."""
        context = request.loss.refinement_context(request.y, request.raw, request.weight)
        value = request.loss.best_constant(request.y, request.raw, request.residual, context, request.weight)
        if value is not None:
            learner.value = np.asarray(value, dtype=np.float64) if np.ndim(value) else float(value)

    def save(self, learner: Constant) -> Artifact:
        """Return the constant (a list of K values for K outputs) as JSON."""
        value = [float(v) for v in np.ravel(learner.value)] if np.ndim(learner.value) else learner.value
        return Artifact("json", json.dumps({"value": value}, allow_nan=False).encode())

    def load(self, artifact: Artifact) -> Constant:
        """Return the constant stored in ``artifact`` (one value, or one per output of a multiclass chain)."""
        try:
            value = json.loads(artifact.payload)["value"]
            values = value if isinstance(value, list) and artifact.n_outputs > 1 else [value]
            if len(values) != artifact.n_outputs:
                raise ValueError(f"it holds {len(values)} values for {artifact.n_outputs} outputs")
            if not all(not isinstance(v, bool) and isinstance(v, int | float) and math.isfinite(v) for v in values):
                raise ValueError("the value is not a finite number")
            if artifact.n_outputs > 1:
                return Constant(np.asarray(values, dtype=np.float64))
            return Constant(float(value))
        except (ValueError, KeyError, TypeError, RecursionError) as exc:
            raise ChainFileError(f"mean stage artifact is not valid ({' '.join(str(exc).split())[:200]})") from None


register(MeanKind())
