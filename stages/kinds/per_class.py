"""K learners of one output each, one per class: how a one-output kind fits a multiclass stage.

A kind whose learner predicts one value per row (a scikit-learn tree, most scikit-learn
regressors) fits a multiclass stage as K learners, learner k to class k's pseudo-residuals
through ``FitRequest.for_output(k)``, in class order and on the chain's one random stream (as
gradient boosting fits its K trees of a round). ``PerClass`` predicts their outputs side by side.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from .base import FitRequest


@dataclass
class PerClass:
    """One learner per class; ``predict`` returns their outputs as the columns of an (n, K) array.

    ``cast`` is the dtype every learner reads its rows in, when they all convert them to it
    first (scikit-learn's trees read float32): the rows are then converted once, not K times.
    """

    learners: tuple[Any, ...]
    cast: Any = None

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return each learner's output on the rows ``X``, one column per class."""
        out = np.empty((X.shape[0], len(self.learners)), dtype=np.float64)
        if self.cast is not None:
            X = np.asarray(X, dtype=self.cast)
        for k, learner in enumerate(self.learners):
            out[:, k] = np.asarray(learner.predict(X), dtype=np.float64).reshape(-1)
        return out


def fit_per_class(request: FitRequest, fit_one: Callable[[FitRequest], Any]) -> PerClass:
    """Return ``fit_one`` applied to each class's request in class order, checking for cancel between them."""
    learners = []
    for k in range(request.outputs):
        request.check_cancel()
        if request.progress is not None:
            request.progress(k / request.outputs, f"class {k + 1} of {request.outputs}")
        learners.append(fit_one(request.for_output(k)))
    return PerClass(tuple(learners))
