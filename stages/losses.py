"""Losses of a residual chain: start value, residual (negative gradient), leaf values, step size.

Every loss works on the chain's raw output F: the prediction itself for regression, the
log-odds for binary chains, K scores per row (softmax gives the probabilities) for multiclass
chains (``stages.multinomial``). Stage k is fit to ``residual(y, F)``; a tree stage's leaves then
take ``leaf_value`` (Friedman 2001, Greedy function approximation, Annals of Statistics
29:1189-1232, algorithms 3-5); other stages are scaled by ``line_search``, on the rows
``stages.steps`` picks (out of bag or out of fold where the learner could interpolate).

The interface every loss keeps:

- ``raw`` is an (n, K) array, K = ``outputs`` (1 here); a one-output loss also takes a vector of
  n values and answers in the shape it was given (``residual``, ``link``, ``display_residual``).
- every function takes optional row weights ``weight`` (None: every row counts once, computed
  exactly as without weights);
- ``start`` takes an optional ``offset`` on the raw scale (one value per row, e.g. log(exposure)
  for a log link): the start value is then the constant c that is best with raw = offset + c.
- ``leaf_value`` and ``refinement_context`` work on the rows of one output (vectors); a learner of
  several outputs sees each through ``for_output(k)``.
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
#: Newton steps of the log-odds start value when an offset is given, and their tolerance
OFFSET_NEWTON_STEPS = 100
OFFSET_NEWTON_TOL = 1e-12

Weights = np.ndarray | None


def _flat(raw: np.ndarray) -> np.ndarray:
    """Return a one-output raw array as a vector (an (n, 1) array's column, a view)."""
    raw = np.asarray(raw)
    if raw.ndim == 2:
        if raw.shape[1] != 1:
            raise ValueError(f"a one-output loss got raw scores of shape {raw.shape}")
        return raw[:, 0]
    return raw


def _shaped(values: np.ndarray, like: np.ndarray) -> np.ndarray:
    """Return ``values`` (a vector) in the shape of ``like`` (a vector, or an (n, 1) array)."""
    return values.reshape(np.shape(like))


@dataclass(frozen=True)
class Loss:
    """Base class: a regression loss on the raw output, which is the prediction itself (one output per row)."""

    name: ClassVar[str] = ""
    task: ClassVar[str] = "regression"
    primary: ClassVar[str] = "rmse"
    lightgbm_objective: ClassVar[str] = "regression"
    #: how a tree stage's leaves take their values under this loss, as a stage's details say it
    leaf_rule: ClassVar[str] = "none (least squares)"
    #: True when ``start`` is the loss's exact optimal constant (not for Huber, whose start is the median)
    start_is_optimal: ClassVar[bool] = True

    @property
    def outputs(self) -> int:
        """Return K, the raw scores per row: 1 for this loss."""
        return 1

    def for_output(self, k: int) -> Loss:
        """Return the loss a learner of output ``k`` alone sees (for one output, this loss)."""
        return self

    # ----- what subclasses define, on vectors ---------------------------------------------
    def _start(self, y: np.ndarray, weight: Weights, offset: np.ndarray | None) -> float:
        raise NotImplementedError

    def _residual(self, y: np.ndarray, raw: np.ndarray, weight: Weights) -> np.ndarray:
        raise NotImplementedError

    def _value(self, y: np.ndarray, raw: np.ndarray, weight: Weights) -> float:
        raise NotImplementedError

    def _link(self, raw: np.ndarray) -> np.ndarray:
        return raw

    # ----- the interface ------------------------------------------------------------------
    def start(self, y: np.ndarray, weight: Weights = None, offset: np.ndarray | None = None) -> np.ndarray:
        """Return the loss's optimal constant on ``y`` (with raw = offset + constant when ``offset`` is
        given) as an array of K values: the chain's start value."""
        off = None if offset is None else _flat(np.asarray(offset, dtype=np.float64))
        return np.array([self._start(y, weight, off)], dtype=np.float64)

    def residual(self, y: np.ndarray, raw: np.ndarray, weight: Weights = None) -> np.ndarray:
        """Return the negative gradient of the loss at ``raw`` (in its shape): what the next stage is fit to."""
        return _shaped(self._residual(y, _flat(raw), weight), raw)

    def value(self, y: np.ndarray, raw: np.ndarray, weight: Weights = None) -> float:
        """Return the mean loss of ``raw`` against ``y`` (weighted by ``weight`` when given)."""
        return self._value(y, _flat(raw), weight)

    def refinement_context(self, y: np.ndarray, raw: np.ndarray, weight: Weights = None) -> dict[str, float]:
        """Return what ``leaf_value`` needs that depends on all fitting rows (Huber's delta)."""
        return {}

    def leaf_value(self, y: np.ndarray, raw: np.ndarray, residual: np.ndarray, context: dict[str, float],
                   weight: Weights = None) -> float | None:
        """Return the loss-optimal value of one tree leaf (vectors of its rows), or None to keep the fitted mean."""
        return None

    def best_constant(self, y: np.ndarray, raw: np.ndarray, residual: np.ndarray, context: dict[str, float],
                      weight: Weights = None) -> float | np.ndarray | None:
        """Return the loss-optimal constant to add to ``raw`` (one value per output), or None to keep
        the mean residual.

        Where ``raw`` is one constant and the start is the loss's exact optimum, this is
        ``start(y) - raw``: exactly 0 right after the start. Otherwise it is ``leaf_value``.
        """
        raw = _flat(raw)
        if self.start_is_optimal and len(raw) and bool(np.all(raw == raw[0])):
            return float(self.start(y, weight)[0]) - float(raw[0])
        return self.leaf_value(y, raw, _flat(residual), context, weight)

    def step_objective(self, y: np.ndarray, raw: np.ndarray, output: np.ndarray,
                       weight: Weights = None) -> Callable[[float], float]:
        """Return the mean loss of ``raw + step * output`` as a function of ``step``."""
        raw, output = _flat(raw), _flat(output)
        return lambda step: self.value(y, raw + step * output, weight)

    def line_search(self, y: np.ndarray, raw: np.ndarray, output: np.ndarray, weight: Weights = None) -> float:
        """Return the step (at least 0) that minimises the loss along a stage's output ``output``.

        The search runs in units of the data's own step size (``step_scale``), so multiplying the
        target by c multiplies the step by c, to rounding, for every loss.
        """
        return bracketed_step(self.step_objective(y, raw, output, weight),
                              step_scale(self.display_residual(y, raw), output))

    def lightgbm_params(self) -> dict[str, float]:
        """Return the parameters LightGBM's objective of this loss takes besides its name (none here)."""
        return {}

    def link(self, raw: np.ndarray) -> np.ndarray:
        """Return predictions on the target's scale from raw outputs, value by value (in their shape)."""
        return self._link(np.asarray(raw))

    def scan_residuals(self, y: np.ndarray, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return the residual the residual scan scores (the negative gradient, what the next stage
        is fit to) and the one it shows per bin (``display_residual``)."""
        return self.residual(y, raw), self.display_residual(y, raw)

    def display_residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return the residual users look at: target minus prediction (y - p for binary), in ``raw``'s shape."""
        return _shaped(y - self._link(_flat(raw)), raw)

    def scores(self, y: np.ndarray, raw: np.ndarray, threshold: float = 0.5, weight: Weights = None,
               spread: float | None = None) -> dict[str, float]:
        """Return every metric of this task for ``raw`` against ``y``, and the loss itself; a regression
        loss takes ``spread``, ``metrics.target_spread(y, weight)``, when it is known."""
        out = metrics.regression_scores(y, _flat(raw), weight, spread)
        out["loss"] = self.value(y, raw, weight)
        return out


def libm_exp(values: np.ndarray) -> np.ndarray:
    """Return exp of each value as the C library computes it (about 80 ms per million values).

    numpy's vectorised exp may differ from the C library's by one ulp on some processors; a
    long chain amplifies such a difference into a different tie-break between two splits, so
    residuals use the same exp as scikit-learn's compiled losses.
    """
    flat = np.ravel(values)
    return np.fromiter(map(math.exp, flat.tolist()), dtype=np.float64, count=len(flat)).reshape(np.shape(values))


def lower_median(values: np.ndarray) -> float:
    """Return the inverted-CDF median: the lower of the two middle values when their count is even.

    Any value between the two middle ones minimises absolute error; this one is the choice
    scikit-learn's gradient boosting makes (its weighted percentile with unit weights).
    """
    return float(np.quantile(values, 0.5, method="inverted_cdf"))


def _rms(values: np.ndarray) -> float:
    return float(np.sqrt(np.mean(np.square(values)))) if np.size(values) else 0.0


def step_scale(residual: np.ndarray, output: np.ndarray) -> float:
    """Return the data's own size of a step: the spread of the residuals over the spread of the output.

    Spreads are root mean squares (over every row and output). Return 0.0 when either is zero (no step can help).
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


def weighted_lower_quantile(values: np.ndarray, weights: np.ndarray, q: float) -> float:
    """Return the first value (in sorted order) at which the cumulative weight reaches ``q`` of the total."""
    order = np.argsort(values, kind="stable")
    cumulative = np.cumsum(weights[order])
    at = int(np.searchsorted(cumulative, q * cumulative[-1], side="left"))
    return float(values[order[min(at, len(order) - 1)]])


def weighted_lower_median(values: np.ndarray, weights: np.ndarray) -> float:
    """Return the first value (in sorted order) at which the cumulative weight reaches half the total."""
    return weighted_lower_quantile(values, weights, 0.5)


def weighted_median(values: np.ndarray, weights: np.ndarray) -> float:
    """Return the weighted median: the first value at which the cumulative weight reaches half the
    total, or the mean of it and the next value where it is exactly half (so unit weights give
    ``np.median``)."""
    order = np.argsort(values, kind="stable")
    ordered, cumulative = values[order], np.cumsum(weights[order])
    half = 0.5 * cumulative[-1]
    at = min(int(np.searchsorted(cumulative, half, side="left")), len(order) - 1)
    if cumulative[at] == half and at + 1 < len(order):
        return float((ordered[at] + ordered[at + 1]) / 2)
    return float(ordered[at])


def _minus(y: np.ndarray, offset: np.ndarray | None) -> np.ndarray:
    return y if offset is None else y - offset


@dataclass(frozen=True)
class SquaredLoss(Loss):
    """Half squared error; its residual is y - F and its optimal constant the mean."""

    name: ClassVar[str] = "squared"

    def _start(self, y, weight, offset) -> float:
        """The (weighted) mean of y - offset."""
        return metrics.average(_minus(y, offset), weight)

    def _residual(self, y, raw, weight) -> np.ndarray:
        return y - raw

    def _value(self, y, raw, weight) -> float:
        """The mean squared error (the loss reported is MSE, not half of it)."""
        error = np.asarray(y - raw)
        return metrics.average(np.square(error, out=error), weight)

    def scores(self, y, raw, threshold=0.5, weight=None, spread=None) -> dict[str, float]:
        """Return RMSE, MAE, R² and the loss; unweighted, the loss is the mean squared error the
        metrics sum already (``value`` computes the same sum)."""
        if weight is not None:
            return super().scores(y, raw, threshold, weight, spread)
        out, mse = metrics.regression_scores_and_mse(y, _flat(raw), None, spread)
        out["loss"] = mse
        return out

    def line_search(self, y, raw, output, weight=None) -> float:
        """Return the least-squares step along ``output``: max(0, <y - F, h>_w / <h, h>_w), 0 for a zero output."""
        raw, output = _flat(raw), _flat(output)
        moved = output if weight is None else weight * output
        size = float(np.dot(moved, output))
        if not size > 0:
            return 0.0
        return max(0.0, float(np.dot(y - raw, moved)) / size)


@dataclass(frozen=True)
class AbsoluteLoss(Loss):
    """Absolute error: residual sign(y - F), leaf values the median residual in the leaf."""

    name: ClassVar[str] = "absolute"
    primary: ClassVar[str] = "mae"
    lightgbm_objective: ClassVar[str] = "l1"
    leaf_rule: ClassVar[str] = "median leaves"

    def _start(self, y, weight, offset) -> float:
        """The median of y - offset (the weighted median with weights)."""
        values = _minus(y, offset)
        return float(np.median(values)) if weight is None else weighted_median(values, weight)

    def _residual(self, y, raw, weight) -> np.ndarray:
        """sign(y - F), with +1 where y == F.

        |y - F| has no derivative at a tie; like scikit-learn's absolute error (whose gradient is
        +1 where F > y and -1 otherwise) the tie counts as y above F.
        """
        return np.where(y < raw, -1.0, 1.0)

    def _value(self, y, raw, weight) -> float:
        return metrics.average(np.abs(y - raw), weight)

    def leaf_value(self, y, raw, residual, context, weight=None) -> float:
        """Return the median of y - F in the leaf (the lower middle value on ties, as gradient boosting takes it)."""
        return lower_median(y - raw) if weight is None else weighted_lower_median(y - raw, weight)

    def line_search(self, y, raw, output, weight=None) -> float:
        """Return the step >= 0 minimising mean |y - F - step * output|, exactly.

        The sum of w_i |h_i| * |(y_i - F_i) / h_i - step| is least at the weighted (lower) median of
        the ratios, weights w_i |h_i|; no bracket is needed, and the step scales with the target.
        """
        raw, output = _flat(raw), _flat(output)
        moving = output != 0
        if not moving.any():
            return 0.0
        ratios = (y[moving] - raw[moving]) / output[moving]
        sizes = np.abs(output[moving]) if weight is None else np.abs(output[moving]) * weight[moving]
        return max(0.0, weighted_lower_median(ratios, sizes))


@dataclass(frozen=True)
class HuberLoss(Loss):
    """Huber loss whose delta is the ``alpha`` quantile of |y - F| at each stage (Friedman 2001, algorithm 4)."""

    name: ClassVar[str] = "huber"
    lightgbm_objective: ClassVar[str] = "huber"
    leaf_rule: ClassVar[str] = "Huber leaves"
    start_is_optimal: ClassVar[bool] = False
    alpha: float = 0.9

    def _start(self, y, weight, offset) -> float:
        """The median of y - offset (the weighted median with weights)."""
        values = _minus(y, offset)
        return float(np.median(values)) if weight is None else weighted_median(values, weight)

    def delta(self, y: np.ndarray, raw: np.ndarray, weight: Weights = None) -> float:
        """Return the current delta: the alpha quantile of the absolute residuals (weighted when given)."""
        spread = np.abs(y - _flat(raw))
        if weight is None:
            return float(np.quantile(spread, self.alpha, method="inverted_cdf"))
        return weighted_lower_quantile(spread, weight, self.alpha)

    def _residual(self, y, raw, weight) -> np.ndarray:
        """The residual clipped at plus or minus delta."""
        diff = y - raw
        delta = self.delta(y, raw, weight)
        return np.where(np.abs(diff) <= delta, diff, delta * np.sign(diff))

    def _value(self, y, raw, weight) -> float:
        """The mean Huber loss at the current delta."""
        return _huber(np.abs(y - raw), self.delta(y, raw, weight), weight)

    def refinement_context(self, y, raw, weight=None) -> dict[str, float]:
        """Return the delta computed on all fitting rows."""
        return {"delta": self.delta(y, raw, weight)}

    def leaf_value(self, y, raw, residual, context, weight=None) -> float:
        """Return the leaf's median residual plus the mean clipped deviation from it."""
        diff = y - raw
        median = lower_median(diff) if weight is None else weighted_lower_median(diff, weight)
        spread = diff - median
        return median + metrics.average(np.sign(spread) * np.minimum(np.abs(spread), context["delta"]), weight)

    def step_objective(self, y, raw, output, weight=None) -> Callable[[float], float]:
        """Return the mean Huber loss along ``output`` at the current delta (held fixed along the line)."""
        raw, output = _flat(raw), _flat(output)
        delta = self.delta(y, raw, weight)
        return lambda step: _huber(np.abs(y - raw - step * output), delta, weight)


def _huber(diff: np.ndarray, delta: float, weight: Weights) -> float:
    return metrics.average(np.where(diff <= delta, 0.5 * diff**2, delta * (diff - 0.5 * delta)), weight)


@dataclass(frozen=True)
class LogLoss(Loss):
    """Binomial log loss on log-odds F; residual y - p; Newton leaf values (Friedman, Hastie & Tibshirani 2000)."""

    name: ClassVar[str] = "logloss"
    task: ClassVar[str] = "binary"
    primary: ClassVar[str] = "logloss"
    lightgbm_objective: ClassVar[str] = "binary"
    leaf_rule: ClassVar[str] = "Newton leaves"

    def _start(self, y, weight, offset) -> float:
        """The log-odds of the (weighted) base rate, the rate kept away from 0 and 1; with an offset,
        the constant c solving sum w (y - expit(offset + c)) = 0 by Newton steps from there."""
        eps = np.finfo(np.float32).eps
        if weight is None:
            share = metrics.average(y, weight)
        else:  # each class's summed weight over their total, as scikit-learn's weighted class prior
            totals = np.bincount((y == 1).astype(np.intp), weights=weight, minlength=2)
            share = float(totals[1] / totals.sum())
        rate = np.clip(share, eps, 1 - eps)
        start = float(logit(rate))
        if offset is None:
            return start
        w = np.ones_like(y) if weight is None else weight
        for _ in range(OFFSET_NEWTON_STEPS):
            p = expit(offset + start)
            slope, curvature = float(np.sum(w * (y - p))), float(np.sum(w * p * (1 - p)))
            if not curvature > 0:
                break
            change = slope / curvature
            start += change
            if abs(change) < OFFSET_NEWTON_TOL * max(1.0, abs(start)):
                break
        return start

    def _residual(self, y, raw, weight) -> np.ndarray:
        """y - p, computed with the numerically stable form of the binomial gradient."""
        gradient = np.empty_like(raw, dtype=np.float64)
        safe = raw > -37
        exp_neg = libm_exp(-raw[safe])
        gradient[safe] = ((1 - y[safe]) - y[safe] * exp_neg) / (1 + exp_neg)
        gradient[~safe] = libm_exp(raw[~safe]) - y[~safe]
        return -gradient

    def _value(self, y, raw, weight) -> float:
        """The mean log loss of the probabilities, clipped as scikit-learn clips them (``metrics.log_loss``)."""
        return metrics.log_loss(y, expit(raw), weight)

    def leaf_value(self, y, raw, residual, context, weight=None) -> float:
        """Return one Newton step: mean(y - p) / mean(p (1 - p)), zero where the curvature vanishes."""
        prob = y - residual
        return newton_step(metrics.average(residual, weight), metrics.average(prob * (1 - prob), weight))

    def step_objective(self, y, raw, output, weight=None) -> Callable[[float], float]:
        """Return the mean log loss along ``output``, computed from log-odds without clipping.

        Clipping flattens the loss where a probability saturates, which would let a step run away;
        the search needs the smooth, convex loss.
        """
        raw, output = _flat(raw), _flat(output)

        def objective(step: float) -> float:
            moved = raw + step * output
            return metrics.average(np.logaddexp(0.0, moved) - y * moved, weight)

        return objective

    def _link(self, raw: np.ndarray) -> np.ndarray:
        """Probabilities of the positive class."""
        return expit(raw)

    def scores(self, y, raw, threshold=0.5, weight=None, spread=None) -> dict[str, float]:
        """Return log loss, ROC AUC, accuracy at 0.5 and at ``threshold``, and Brier score (no R²:
        ``spread`` is not used)."""
        out = metrics.binary_scores(y, expit(_flat(raw)), threshold=threshold, weight=weight)
        out["loss"] = self.value(y, raw, weight)
        return out


def newton_step(numerator: float, denominator: float) -> float:
    """Return numerator / denominator, or 0 where the curvature (the denominator) vanishes."""
    if abs(denominator) < 1e-150:
        return 0.0
    return float(numerator) / float(denominator)


LOSSES: dict[str, type[Loss]] = {cls.name: cls for cls in (SquaredLoss, AbsoluteLoss, HuberLoss, LogLoss)}
#: the losses on the log link (``stages.loglink``), for counts and positive amounts
LOG_LINK_NAMES = ("poisson", "gamma", "tweedie")
TASKS = ("regression", "binary", "multiclass")


def all_loss_names() -> list[str]:
    """Return the name of every loss."""
    return [*LOSSES, *LOG_LINK_NAMES]


def loss_names(task: str) -> list[str]:
    """Return the names of the losses that fit ``task``."""
    if task == "multiclass":
        return ["logloss"]
    names = [name for name, cls in LOSSES.items() if cls.task == task]
    return [*names, *LOG_LINK_NAMES] if task == "regression" else names


def get_loss(name: str, task: str, n_classes: int | None = None, power: float | None = None) -> Loss:
    """Return the loss called ``name`` for ``task`` (a multiclass loss over ``n_classes`` classes; a
    tweedie loss of ``power``); raise StageSpecError when it is unknown or does not fit ``task``."""
    if name in LOG_LINK_NAMES:
        if task != "regression":
            raise StageSpecError(f"loss {name!r} is for counts and amounts (regression targets); this target is {task}")
        from .loglink import log_link_loss

        return log_link_loss(name, power)
    if power is not None:
        raise StageSpecError(f"power is for the tweedie loss only, not {name!r}")
    if name not in LOSSES:
        raise StageSpecError(f"unknown loss {name!r} (choose one of: {', '.join(all_loss_names())})")
    if task == "multiclass":
        if name != "logloss":
            raise StageSpecError(f"loss {name!r} is for {LOSSES[name].task} targets; this target is "
                                 "multiclass (use logloss, the multinomial log loss)")
        from .multinomial import MultinomialLoss

        return MultinomialLoss(n_classes=int(n_classes or 3))
    loss = LOSSES[name]()
    if loss.task != task:
        fitting = loss_names(task)
        raise StageSpecError(f"loss {name!r} is for {loss.task} targets; this target is {task} (use {' or '.join(fitting)})")
    return loss


def default_loss(task: str) -> str:
    """Return the default loss name for ``task``."""
    return "logloss" if task in ("binary", "multiclass") else "squared"
