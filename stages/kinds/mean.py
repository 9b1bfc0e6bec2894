"""The ``mean`` kind: a constant shift, the loss's optimal constant for the current residuals."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from ..errors import ChainFileError
from . import register
from .base import Artifact, FitRequest, StageKind


@dataclass
class Constant:
    """A learner that predicts one value for every row."""

    value: float

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return ``value`` for every row of ``X``."""
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
        """Return the mean of the residuals as a constant learner."""
        return Constant(float(np.mean(request.residual)))

    def refine(self, learner: Constant, request: FitRequest) -> None:
        """Replace the mean with the loss's optimal constant where it has one (exactly 0 right after the start)."""
        context = request.loss.refinement_context(request.y, request.raw)
        value = request.loss.best_constant(request.y, request.raw, request.residual, context)
        if value is not None:
            learner.value = float(value)

    def save(self, learner: Constant) -> Artifact:
        """Return the constant as JSON."""
        return Artifact("json", json.dumps({"value": learner.value}, allow_nan=False).encode())

    def load(self, artifact: Artifact) -> Constant:
        """Return the constant stored in ``artifact``."""
        try:
            value = json.loads(artifact.payload)["value"]
            if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
                raise ValueError("the value is not a finite number")
            return Constant(float(value))
        except (ValueError, KeyError, TypeError, RecursionError) as exc:
            raise ChainFileError(f"mean stage artifact is not valid ({' '.join(str(exc).split())[:200]})") from None


register(MeanKind())
