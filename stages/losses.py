"""Losses of a residual chain: start value, residual (negative gradient), leaf values, step size.

Every loss works on the chain's raw output F: the prediction itself for regression, the
log-odds for binary chains. Stage k is fit to ``residual(y, F)``; a tree stage's leaves then
take ``leaf_value`` (Friedman 2001, Greedy function approximation, Annals of Statistics
29:1189-1232, algorithms 3-5); other stages are scaled by ``line_search``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import expit, logit

from . import metrics
from .errors import StageSpecError

# probabilities are kept this far from 0 and 1 wherever a log is taken
_EPS = np.finfo(np.float64).eps


@dataclass(frozen=True)
class Loss:
    """Base class: a regression loss on the raw output, which is the prediction itself."""

    name: ClassVar[str] = ""
    task: ClassVar[str] = "regression"
    primary: ClassVar[str] = "rmse"
    lightgbm_objective: ClassVar[str] = "regression"

    def start(self, y: np.ndarray) -> float:
        """Return the loss's optimal constant on ``y``: the chain's start value."""
        raise NotImplementedError

    def residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return the negative gradient of the loss at ``raw``: what the next stage is fit to."""
        raise NotImplementedError

    def value(self, y: np.ndarray, raw: np.ndarray) -> float:
        """Return the mean loss of ``raw`` against ``y``."""
        raise NotImplementedError

    def refinement_context(self, y: np.ndarray, raw: np.ndarray) -> dict[str, float]:
        """Return what ``leaf_value`` needs that depends on all fitting rows (Huber's delta)."""
        return {}

    def leaf_value(self, y: np.ndarray, raw: np.ndarray, residual: np.ndarray, context: dict[str, float]) -> float | None:
        """Return the loss-optimal value of one tree leaf, or None to keep the fitted mean."""
        return None

    def line_search(self, y: np.ndarray, raw: np.ndarray, output: np.ndarray) -> float:
        """Return the step that minimises the loss along a stage's output; 1.0 where least squares already is optimal."""
        return 1.0

    def link(self, raw: np.ndarray) -> np.ndarray:
        """Return predictions on the target's scale from raw outputs."""
        return raw

    def display_residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return the residual users look at: target minus prediction (y - p for binary)."""
        return y - self.link(raw)

    def scores(self, y: np.ndarray, raw: np.ndarray, threshold: float = 0.5) -> dict[str, float]:
        """Return every metric of this task for ``raw`` against ``y``, and the loss itself."""
        out = metrics.regression_scores(y, raw)
        out["loss"] = self.value(y, raw)
        return out


def libm_exp(values: np.ndarray) -> np.ndarray:
    """Return exp of each value as the C library computes it (about 80 ms per million values).

    numpy's vectorised exp may differ from the C library's by one ulp on some processors; a
    long chain amplifies such a difference into a different tie-break between two splits, so
    residuals use the same exp as scikit-learn's compiled losses.
    """
    return np.fromiter(map(math.exp, values.tolist()), dtype=np.float64, count=len(values))


def lower_median(values: np.ndarray) -> float:
    """Return the inverted-CDF median: the lower of the two middle values when their count is even.

    Any value between the two middle ones minimises absolute error; this one is the choice
    scikit-learn's gradient boosting makes (its weighted percentile with unit weights).
    """
    return float(np.quantile(values, 0.5, method="inverted_cdf"))


def _bounded_step(objective, upper: float = 10.0) -> float:
    found = minimize_scalar(objective, bounds=(0.0, upper), method="bounded", options={"xatol": 1e-8})
    step = float(found.x)
    return step if np.isfinite(step) else 1.0


@dataclass(frozen=True)
class SquaredLoss(Loss):
    """Half squared error; its residual is y - F and its optimal constant the mean."""

    name: ClassVar[str] = "squared"

    def start(self, y: np.ndarray) -> float:
        """Return the mean of ``y``."""
        return float(np.mean(y))

    def residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return y - F."""
        return y - raw

    def value(self, y: np.ndarray, raw: np.ndarray) -> float:
        """Return the mean squared error (the loss reported is MSE, not half of it)."""
        return float(np.mean((y - raw) ** 2))


@dataclass(frozen=True)
class AbsoluteLoss(Loss):
    """Absolute error: residual sign(y - F), leaf values the median residual in the leaf."""

    name: ClassVar[str] = "absolute"
    primary: ClassVar[str] = "mae"
    lightgbm_objective: ClassVar[str] = "l1"

    def start(self, y: np.ndarray) -> float:
        """Return the median of ``y``."""
        return float(np.median(y))

    def residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return sign(y - F)."""
        return np.sign(y - raw)

    def value(self, y: np.ndarray, raw: np.ndarray) -> float:
        """Return the mean absolute error."""
        return float(np.mean(np.abs(y - raw)))

    def leaf_value(self, y, raw, residual, context) -> float:
        """Return the median of y - F in the leaf (the lower middle value on ties, as gradient boosting takes it)."""
        return lower_median(y - raw)

    def line_search(self, y, raw, output) -> float:
        """Return the step minimising mean |y - F - step * output| over [0, 10]."""
        return _bounded_step(lambda s: float(np.mean(np.abs(y - raw - s * output))))


@dataclass(frozen=True)
class HuberLoss(Loss):
    """Huber loss whose delta is the ``alpha`` quantile of |y - F| at each stage (Friedman 2001, algorithm 4)."""

    name: ClassVar[str] = "huber"
    lightgbm_objective: ClassVar[str] = "huber"
    alpha: float = 0.9

    def start(self, y: np.ndarray) -> float:
        """Return the median of ``y``."""
        return float(np.median(y))

    def delta(self, y: np.ndarray, raw: np.ndarray) -> float:
        """Return the current delta: the alpha quantile of the absolute residuals."""
        return float(np.quantile(np.abs(y - raw), self.alpha, method="inverted_cdf"))

    def residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return the residual clipped at plus or minus delta."""
        diff = y - raw
        delta = self.delta(y, raw)
        return np.where(np.abs(diff) <= delta, diff, delta * np.sign(diff))

    def value(self, y: np.ndarray, raw: np.ndarray) -> float:
        """Return the mean Huber loss at the current delta."""
        diff = np.abs(y - raw)
        delta = self.delta(y, raw)
        return float(np.mean(np.where(diff <= delta, 0.5 * diff**2, delta * (diff - 0.5 * delta))))

    def refinement_context(self, y, raw) -> dict[str, float]:
        """Return the delta computed on all fitting rows."""
        return {"delta": self.delta(y, raw)}

    def leaf_value(self, y, raw, residual, context) -> float:
        """Return the leaf's median residual plus the mean clipped deviation from it."""
        diff = y - raw
        median = lower_median(diff)
        spread = diff - median
        return median + float(np.mean(np.sign(spread) * np.minimum(np.abs(spread), context["delta"])))

    def line_search(self, y, raw, output) -> float:
        """Return the step minimising the Huber loss at the current delta over [0, 10]."""
        delta = self.delta(y, raw)

        def objective(step: float) -> float:
            diff = np.abs(y - raw - step * output)
            return float(np.mean(np.where(diff <= delta, 0.5 * diff**2, delta * (diff - 0.5 * delta))))

        return _bounded_step(objective)


@dataclass(frozen=True)
class LogLoss(Loss):
    """Binomial log loss on log-odds F; residual y - p; Newton leaf values (Friedman, Hastie & Tibshirani 2000)."""

    name: ClassVar[str] = "logloss"
    task: ClassVar[str] = "binary"
    primary: ClassVar[str] = "logloss"
    lightgbm_objective: ClassVar[str] = "binary"

    def start(self, y: np.ndarray) -> float:
        """Return the log-odds of the base rate, with the rate kept away from 0 and 1."""
        rate = np.clip(np.mean(y), np.finfo(np.float32).eps, 1 - np.finfo(np.float32).eps)
        return float(logit(rate))

    def residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return y - p, computed with the numerically stable form of the binomial gradient."""
        gradient = np.empty_like(raw, dtype=np.float64)
        safe = raw > -37
        exp_neg = libm_exp(-raw[safe])
        gradient[safe] = ((1 - y[safe]) - y[safe] * exp_neg) / (1 + exp_neg)
        gradient[~safe] = libm_exp(raw[~safe]) - y[~safe]
        return -gradient

    def value(self, y: np.ndarray, raw: np.ndarray) -> float:
        """Return the mean log loss, computed stably from log-odds."""
        return float(np.mean(np.logaddexp(0.0, raw) - y * raw))

    def leaf_value(self, y, raw, residual, context) -> float:
        """Return one Newton step: mean(y - p) / mean(p (1 - p)), zero where the curvature vanishes."""
        prob = y - residual
        numerator = float(np.mean(residual))
        denominator = float(np.mean(prob * (1 - prob)))
        if abs(denominator) < 1e-150:
            return 0.0
        return numerator / denominator

    def line_search(self, y, raw, output) -> float:
        """Return the step minimising the mean log loss along ``output`` over [0, 10]."""
        return _bounded_step(lambda s: float(np.mean(np.logaddexp(0.0, raw + s * output) - y * (raw + s * output))))

    def link(self, raw: np.ndarray) -> np.ndarray:
        """Return probabilities of the positive class."""
        return expit(raw)

    def scores(self, y: np.ndarray, raw: np.ndarray, threshold: float = 0.5) -> dict[str, float]:
        """Return log loss, ROC AUC, accuracy at 0.5 and at ``threshold``, and Brier score."""
        out = metrics.binary_scores(y, expit(raw), threshold=threshold)
        out["loss"] = self.value(y, raw)
        return out


LOSSES: dict[str, type[Loss]] = {cls.name: cls for cls in (SquaredLoss, AbsoluteLoss, HuberLoss, LogLoss)}


def get_loss(name: str, task: str) -> Loss:
    """Return the loss called ``name``; raise StageSpecError when it is unknown or does not fit ``task``."""
    if name not in LOSSES:
        raise StageSpecError(f"unknown loss {name!r} (choose one of: {', '.join(LOSSES)})")
    loss = LOSSES[name]()
    if loss.task != task:
        fitting = [n for n, cls in LOSSES.items() if cls.task == task]
        raise StageSpecError(f"loss {name!r} is for {loss.task} targets; this target is {task} (use {' or '.join(fitting)})")
    return loss


def default_loss(task: str) -> str:
    """Return the default loss name for ``task``."""
    return "logloss" if task == "binary" else "squared"
