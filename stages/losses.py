"""Losses of a residual chain: start value, residual (negative gradient), leaf values, step size.

Every loss works on the chain's raw output F: the prediction itself for regression, the
log-odds for binary chains. Stage k is fit to ``residual(y, F)``; a tree stage's leaves then
take ``leaf_value`` (Friedman 2001, Greedy function approximation, Annals of Statistics
29:1189-1232, algorithms 3-5); other stages are scaled by ``line_search``, on the rows
``stages.steps`` picks (out of bag or out of fold where the learner could interpolate).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import expit, logit

from . import metrics
from .errors import StageSpecError

#: how many times the search bracket may double past the data's own step size
MAX_DOUBLINGS = 30


@dataclass(frozen=True)
class Loss:
    """Base class: a regression loss on the raw output, which is the prediction itself."""

    name: ClassVar[str] = ""
    task: ClassVar[str] = "regression"
    primary: ClassVar[str] = "rmse"
    lightgbm_objective: ClassVar[str] = "regression"
    #: how a tree stage's leaves take their values under this loss, as a stage's details say it
    leaf_rule: ClassVar[str] = "none (least squares)"
    #: True when ``start`` is the loss's exact optimal constant (not for Huber, whose start is the median)
    start_is_optimal: ClassVar[bool] = True

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

    def best_constant(self, y: np.ndarray, raw: np.ndarray, residual: np.ndarray, context: dict[str, float]) -> float | None:
        """Return the loss-optimal constant to add to ``raw``, or None to keep the mean residual.

        Where ``raw`` is one constant and the start is the loss's exact optimum, this is
        ``start(y) - raw``: exactly 0 right after the start. Otherwise it is ``leaf_value``.
        """
        if self.start_is_optimal and len(raw) and bool(np.all(raw == raw[0])):
            return self.start(y) - float(raw[0])
        return self.leaf_value(y, raw, residual, context)

    def step_objective(self, y: np.ndarray, raw: np.ndarray, output: np.ndarray) -> Callable[[float], float]:
        """Return the mean loss of ``raw + step * output`` as a function of ``step``."""
        return lambda step: self.value(y, raw + step * output)

    def line_search(self, y: np.ndarray, raw: np.ndarray, output: np.ndarray) -> float:
        """Return the step (at least 0) that minimises the loss along a stage's output ``output``.

        The search runs in units of the data's own step size (``step_scale``), so multiplying the
        target by c multiplies the step by c, to rounding, for every loss.
        """
        return bracketed_step(self.step_objective(y, raw, output), step_scale(self.display_residual(y, raw), output))

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


def _rms(values: np.ndarray) -> float:
    return float(np.sqrt(np.mean(np.square(values)))) if len(values) else 0.0


def step_scale(residual: np.ndarray, output: np.ndarray) -> float:
    """Return the data's own size of a step: the spread of the residuals over the spread of the output.

    Spreads are root mean squares. Return 0.0 when either is zero (no step can help).
    """
    spread_out, spread_res = _rms(output), _rms(residual)
    if not (spread_out > 0 and spread_res > 0 and np.isfinite(spread_out) and np.isfinite(spread_res)):
        return 0.0
    return spread_res / spread_out


def bracketed_step(objective: Callable[[float], float], scale: float) -> float:
    """Return the step >= 0 minimising a convex ``objective``, searched in units of ``scale``.

    The bracket starts at one ``scale`` and doubles while the objective still falls at its end
    (a convex function then has its minimum further out), at most MAX_DOUBLINGS times; then a
    bounded Brent search runs inside it. A step that does no better than 0 is 0.
    """
    if not (scale > 0 and np.isfinite(scale)):
        return 0.0

    def along(t: float) -> float:
        return objective(t * scale)

    high, at_high, inside = 1.0, along(1.0), along(0.5)
    for _ in range(MAX_DOUBLINGS):
        if not at_high < inside:
            break
        high, inside, at_high = 2 * high, at_high, along(2 * high)
    found = minimize_scalar(along, bounds=(0.0, high), method="bounded", options={"xatol": 1e-10 * high})
    t = float(found.x)
    if not np.isfinite(t) or not along(t) < along(0.0):
        return 0.0
    return t * scale


def weighted_lower_median(values: np.ndarray, weights: np.ndarray) -> float:
    """Return the first value (in sorted order) at which the cumulative weight reaches half the total."""
    order = np.argsort(values, kind="stable")
    cumulative = np.cumsum(weights[order])
    at = int(np.searchsorted(cumulative, 0.5 * cumulative[-1], side="left"))
    return float(values[order[min(at, len(order) - 1)]])


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

    def line_search(self, y: np.ndarray, raw: np.ndarray, output: np.ndarray) -> float:
        """Return the least-squares step along ``output``: max(0, <y - F, h> / <h, h>), 0 for a zero output."""
        size = float(np.dot(output, output))
        if not size > 0:
            return 0.0
        return max(0.0, float(np.dot(y - raw, output)) / size)


@dataclass(frozen=True)
class AbsoluteLoss(Loss):
    """Absolute error: residual sign(y - F), leaf values the median residual in the leaf."""

    name: ClassVar[str] = "absolute"
    primary: ClassVar[str] = "mae"
    lightgbm_objective: ClassVar[str] = "l1"
    leaf_rule: ClassVar[str] = "median leaves"

    def start(self, y: np.ndarray) -> float:
        """Return the median of ``y``."""
        return float(np.median(y))

    def residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return sign(y - F), with +1 where y == F.

        |y - F| has no derivative at a tie; like scikit-learn's absolute error (whose gradient is
        +1 where F > y and -1 otherwise) the tie counts as y above F.
        """
        return np.where(y < raw, -1.0, 1.0)

    def value(self, y: np.ndarray, raw: np.ndarray) -> float:
        """Return the mean absolute error."""
        return float(np.mean(np.abs(y - raw)))

    def leaf_value(self, y, raw, residual, context) -> float:
        """Return the median of y - F in the leaf (the lower middle value on ties, as gradient boosting takes it)."""
        return lower_median(y - raw)

    def line_search(self, y, raw, output) -> float:
        """Return the step >= 0 minimising mean |y - F - step * output|, exactly.

        The sum of |h_i| * |(y_i - F_i) / h_i - step| is least at the weighted (lower) median of
        the ratios, weights |h_i|; no bracket is needed, and the step scales with the target.
        """
        moving = output != 0
        if not moving.any():
            return 0.0
        ratios = (y[moving] - raw[moving]) / output[moving]
        return max(0.0, weighted_lower_median(ratios, np.abs(output[moving])))


@dataclass(frozen=True)
class HuberLoss(Loss):
    """Huber loss whose delta is the ``alpha`` quantile of |y - F| at each stage (Friedman 2001, algorithm 4)."""

    name: ClassVar[str] = "huber"
    lightgbm_objective: ClassVar[str] = "huber"
    leaf_rule: ClassVar[str] = "Huber leaves"
    start_is_optimal: ClassVar[bool] = False
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

    def step_objective(self, y, raw, output) -> Callable[[float], float]:
        """Return the mean Huber loss along ``output`` at the current delta (held fixed along the line)."""
        delta = self.delta(y, raw)

        def objective(step: float) -> float:
            diff = np.abs(y - raw - step * output)
            return float(np.mean(np.where(diff <= delta, 0.5 * diff**2, delta * (diff - 0.5 * delta))))

        return objective


@dataclass(frozen=True)
class LogLoss(Loss):
    """Binomial log loss on log-odds F; residual y - p; Newton leaf values (Friedman, Hastie & Tibshirani 2000)."""

    name: ClassVar[str] = "logloss"
    task: ClassVar[str] = "binary"
    primary: ClassVar[str] = "logloss"
    lightgbm_objective: ClassVar[str] = "binary"
    leaf_rule: ClassVar[str] = "Newton leaves"

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
        """Return the mean log loss of the probabilities, clipped as scikit-learn clips them (``metrics.log_loss``)."""
        return metrics.log_loss(y, expit(raw))

    def leaf_value(self, y, raw, residual, context) -> float:
        """Return one Newton step: mean(y - p) / mean(p (1 - p)), zero where the curvature vanishes."""
        prob = y - residual
        numerator = float(np.mean(residual))
        denominator = float(np.mean(prob * (1 - prob)))
        if abs(denominator) < 1e-150:
            return 0.0
        return numerator / denominator

    def step_objective(self, y, raw, output) -> Callable[[float], float]:
        """Return the mean log loss along ``output``, computed from log-odds without clipping.

        Clipping flattens the loss where a probability saturates, which would let a step run away;
        the search needs the smooth, convex loss.
        """
        def objective(step: float) -> float:
            moved = raw + step * output
            return float(np.mean(np.logaddexp(0.0, moved) - y * moved))

        return objective

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
