"""The ``logistic`` kind: penalised logistic regression on top of the chain's log-odds (binary and multiclass chains).

The stage fits the log loss itself, with the chain's current output ``raw`` as a fixed
offset: it minimises

    C * sum_i [log(1 + exp(raw_i + z_i)) - y_i (raw_i + z_i)] + 0.5 * ||w||^2,
    z = design @ w + b,

with the intercept ``b`` unpenalised (``penalty=None`` drops the penalty, i.e. C = inf). This
is scikit-learn's LogisticRegression objective plus the offset. The stage's output is ``z``.

On a multiclass chain the stage is a multinomial logistic regression on the chain's K raw
scores: it minimises C * sum_i [logsumexp_k(raw_ik + z_ik) - (raw_iy + z_iy)] + 0.5 * ||W||^2
with z = design @ W + b, W one column per class, as scikit-learn's multinomial
LogisticRegression (one coefficient vector per class, the L2 penalty on all of them).

Without a penalty, classes that a hyperplane separates have no maximum-likelihood fit: the
coefficients grow until the fitted probabilities reach 0 or 1 in float64 (Albert & Anderson
1984, Biometrika 71:1-10). The stage says so in its notes and suggests a penalty.
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np
from scipy.optimize import minimize
from scipy.special import expit, logsumexp

from ..errors import StageSpecError
from ..metrics import PROB_EPS, one_hot
from . import register
from .base import FitRequest, check_has_features
from .design import LinearDesign
from .linear import LinearModel, StoredAsLinearModel, checked_coefficients


def inverse_penalty(params: dict[str, Any], kind: str) -> float:
    """Return C, the weight of the log loss against the L2 penalty (inf without a penalty).

    Raise StageSpecError for a penalty other than 'l2' or none, or a C that is not positive.
    """
    penalty = params["penalty"]
    if penalty is None or (isinstance(penalty, str) and penalty.lower() == "none"):
        return float("inf")
    if penalty != "l2":
        raise StageSpecError(f"kind {kind!r}: penalty must be 'l2' or 'none', not {penalty!r}")
    C = params["C"]
    if isinstance(C, bool) or not isinstance(C, int | float) or not C > 0:
        raise StageSpecError(f"kind {kind!r}: C must be a positive number, not {C!r}")
    return float(C)


def _row_weight(C: float, sample_weight: np.ndarray | None) -> tuple[Any, float]:
    """Return the weight of each row's log loss (C, or C times the row's weight) and the penalty's factor."""
    weight, ridge = (1.0, 0.0) if np.isinf(C) else (C, 1.0)
    return (weight if sample_weight is None else weight * sample_weight), ridge


def offset_logistic_fit(
    matrix: np.ndarray, y: np.ndarray, offset: np.ndarray, C: float, max_iter: int, tol: float,
    sample_weight: np.ndarray | None = None,
) -> tuple[np.ndarray, float]:
    """Return (w, b) minimising C * sum of (row-weighted) log losses at offset + matrix @ w + b, plus 0.5 * ||w||^2.

    With C = inf the penalty is dropped and the plain sum of log losses is minimised.
    """
    width = matrix.shape[1]
    weight, ridge = _row_weight(C, sample_weight)

    def objective(theta: np.ndarray) -> tuple[float, np.ndarray]:
        w, b = theta[:width], theta[width]
        logit = offset + matrix @ w + b
        losses = np.logaddexp(0.0, logit) - y * logit
        total = weight * np.sum(losses) if sample_weight is None else np.sum(weight * losses)
        value = total + 0.5 * ridge * (w @ w)
        slope = weight * (expit(logit) - y)
        gradient = np.empty(width + 1)
        gradient[:width] = matrix.T @ slope + ridge * w
        gradient[width] = slope.sum()
        return float(value), gradient

    # ftol=0: stop on the gradient (or when the loss can no longer decrease in float64);
    # the default relative-decrease test stops a few 1e-6 short on correlated features
    options = {"maxiter": max_iter, "gtol": tol, "ftol": 0.0, "maxls": 50}
    found = minimize(objective, np.zeros(width + 1), jac=True, method="L-BFGS-B", options=options)
    if width > NEWTON_WIDTH:
        return found.x[:width], float(found.x[width])
    return newton_polish(matrix, y, offset, C, found.x, sample_weight=sample_weight)


#: designs up to this many columns get Newton steps after the quasi-Newton search
NEWTON_WIDTH = 2_000
#: rows of the design weighted at once when the Hessian is built
_BLOCK_ROWS = 65_536


def newton_polish(matrix: np.ndarray, y: np.ndarray, offset: np.ndarray, C: float, theta: np.ndarray,
                  steps: int = 4, sample_weight: np.ndarray | None = None) -> tuple[np.ndarray, float]:
    """Return (w, b) after up to ``steps`` Newton steps from ``theta`` (w then b), each kept only when
    it lowers the gradient's norm.

    The quasi-Newton search stops where float64 can no longer see the sum of losses fall, about
    1e-7 from the optimum on a few thousand rows; Newton steps work on the gradient and reach the
    optimum to rounding. A direction the loss does not see (one-hot columns that sum to the
    intercept, when there is no penalty) gets no step: it is cut by the least-squares solve.
    """
    width = matrix.shape[1]
    weight, ridge = _row_weight(C, sample_weight)

    def gradient(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        p = expit(offset + matrix @ theta[:width] + theta[width])
        slope = weight * (p - y)
        return np.r_[matrix.T @ slope + ridge * theta[:width], slope.sum()], p

    g, p = gradient(theta)
    for _ in range(steps):
        curvature = weight * p * (1.0 - p)
        hessian = np.zeros((width + 1, width + 1))
        for start in range(0, len(y), _BLOCK_ROWS):
            block = np.c_[matrix[start:start + _BLOCK_ROWS], np.ones(len(y[start:start + _BLOCK_ROWS]))]
            hessian += (block * curvature[start:start + _BLOCK_ROWS, None]).T @ block
        hessian[np.arange(width), np.arange(width)] += ridge
        step = np.linalg.lstsq(hessian, g, rcond=1e-10)[0]
        trial = theta - step
        g_trial, p_trial = gradient(trial)
        if not np.linalg.norm(g_trial) < np.linalg.norm(g):
            break
        theta, g, p = trial, g_trial, p_trial
    return theta[:width], float(theta[width])


#: log-odds beyond which a probability is within float64's machine epsilon of 0 or 1
SATURATED_LOGIT = float(-np.log(PROB_EPS))


def separation_note(logit: np.ndarray) -> str | None:
    """Return the note for a fit whose log-odds saturate on some fitting rows (separation), else None."""
    saturated = int(np.count_nonzero(np.abs(logit) >= SATURATED_LOGIT))
    if not saturated:
        return None
    return (f"separation: {saturated:,} fitting rows get a probability of 0 or 1 (largest log-odds "
            f"{float(np.abs(logit).max()):.3g}); the classes are separable and the coefficients grow "
            "without bound; set penalty='l2' with a finite C")


def offset_multinomial_fit(
    matrix: np.ndarray, y: np.ndarray, offset: np.ndarray, C: float, max_iter: int, tol: float,
    sample_weight: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Return (W, b), W of shape (width, K), minimising C * sum of multinomial log losses at
    offset + matrix @ W + b, plus 0.5 * ||W||^2 (no penalty with C = inf)."""
    width, n_classes = matrix.shape[1], offset.shape[1]
    weight, ridge = _row_weight(C, sample_weight)
    if sample_weight is not None:
        weight = weight[:, None]  # one weight per row, over its K classes
    indicator = one_hot(y, n_classes)
    design = np.c_[matrix, np.ones(len(matrix))]

    def objective(theta: np.ndarray) -> tuple[float, np.ndarray]:
        coef = theta.reshape(width + 1, n_classes)
        logits = offset + design @ coef
        per_row = logsumexp(logits, axis=1) - np.sum(indicator * logits, axis=1)
        value = float(np.sum(weight[:, 0] * per_row)) if sample_weight is not None else weight * float(np.sum(per_row))
        value += 0.5 * ridge * float(np.sum(coef[:width] ** 2))
        slope = weight * (_softmax(logits) - indicator)
        gradient = design.T @ slope
        gradient[:width] += ridge * coef[:width]
        return value, gradient.ravel()

    options = {"maxiter": max_iter, "gtol": tol, "ftol": 0.0, "maxls": 50}
    found = minimize(objective, np.zeros((width + 1) * n_classes), jac=True, method="L-BFGS-B", options=options)
    theta = found.x
    if (width + 1) * n_classes <= NEWTON_WIDTH:
        theta = _multinomial_newton(design, indicator, offset, weight, ridge, theta, width)
    coef = theta.reshape(width + 1, n_classes)
    return coef[:width], coef[width]


def _softmax(logits: np.ndarray) -> np.ndarray:
    shifted = np.exp(logits - logits.max(axis=1, keepdims=True))
    return shifted / shifted.sum(axis=1, keepdims=True)


def _multinomial_newton(design: np.ndarray, indicator: np.ndarray, offset: np.ndarray, weight: Any, ridge: float,
                        theta: np.ndarray, width: int, steps: int = 4) -> np.ndarray:
    """Return ``theta`` after up to ``steps`` Newton steps, each kept only when it lowers the gradient's norm
    (as ``newton_polish`` does for two classes; the full Hessian of the K classes' coefficients)."""
    n_classes = indicator.shape[1]
    size = (width + 1) * n_classes
    row_weight = weight[:, 0] if np.ndim(weight) else weight  # weights arrive as an (n, 1) column
    penalised = np.zeros((width + 1, n_classes))
    penalised[:width] = ridge

    def gradient(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        coef = theta.reshape(width + 1, n_classes)
        p = _softmax(offset + design @ coef)
        return (design.T @ (weight * (p - indicator)) + penalised * coef).ravel(), p

    g, p = gradient(theta)
    for _ in range(steps):
        blocks = np.zeros((width + 1, n_classes, width + 1, n_classes))
        for a in range(n_classes):
            for c in range(a, n_classes):
                curvature = row_weight * p[:, a] * ((a == c) - p[:, c])
                block = np.zeros((width + 1, width + 1))
                for start in range(0, len(design), _BLOCK_ROWS):
                    rows = design[start:start + _BLOCK_ROWS]
                    block += (rows * curvature[start:start + _BLOCK_ROWS, None]).T @ rows
                blocks[:, a, :, c] = block
                blocks[:, c, :, a] = block.T
        hessian = blocks.reshape(size, size)
        hessian[np.arange(size), np.arange(size)] += penalised.ravel()
        trial = theta - np.linalg.lstsq(hessian, g, rcond=1e-10)[0]
        g_trial, p_trial = gradient(trial)
        if not np.linalg.norm(g_trial) < np.linalg.norm(g):
            break
        theta, g, p = trial, g_trial, p_trial
    return theta


def margin_note(logits: np.ndarray) -> str | None:
    """Return the separation note for a multinomial fit where some fitting rows' most probable class
    gets a probability of 1 in float64 (its score leads the next one by SATURATED_LOGIT), else None."""
    ordered = np.sort(logits, axis=1)
    return separation_note(ordered[:, -1] - ordered[:, -2])


class LogisticKind(StoredAsLinearModel):
    """Logistic regression with the chain's log-odds as offset; its output adds to the log-odds."""

    name: ClassVar[str] = "logistic"
    summary: ClassVar[str] = "logistic regression on the log-odds so far (binary and multiclass chains)"
    defaults: ClassVar[dict[str, Any]] = {"C": 1.0, "penalty": "l2", "max_iter": 1000, "tol": 1e-10}
    main_params: ClassVar[tuple[str, ...]] = ("C", "penalty")
    fits_loss: ClassVar[bool] = True

    def fit(self, request: FitRequest, params: dict[str, Any]) -> LinearModel:
        """Return the offset logistic model (multinomial on a multiclass chain); raise StageSpecError on a
        regression chain."""
        if request.task not in ("binary", "multiclass"):
            raise StageSpecError(
                f"kind {self.name!r} is for binary and multiclass chains; this chain is {request.task} "
                "(use 'linear', 'ridge' or 'lasso')"
            )
        check_has_features(request.X, self.name)
        design = LinearDesign.fit(request.X, request.columns)
        matrix = design.transform(request.X)
        y = np.asarray(request.y, dtype=np.float64)
        if request.outputs > 1:
            return self._multinomial(request, params, design, matrix, y)
        w, b = offset_logistic_fit(
            matrix, y, np.asarray(request.raw, dtype=np.float64), inverse_penalty(params, self.name),
            int(params["max_iter"]), float(params["tol"]), sample_weight=request.weight,
        )
        coef, intercept = checked_coefficients(w, b, self.name)
        if np.isinf(inverse_penalty(params, self.name)):
            note = separation_note(np.asarray(request.raw, dtype=np.float64) + matrix @ coef + intercept)
            if note:
                request.note(note)
        return LinearModel(design, coef, intercept)

    def _multinomial(self, request: FitRequest, params: dict[str, Any], design: LinearDesign, matrix: np.ndarray,
                     y: np.ndarray) -> LinearModel:
        offset = np.asarray(request.raw, dtype=np.float64)
        C = inverse_penalty(params, self.name)
        W, b = offset_multinomial_fit(matrix, y, offset, C, int(params["max_iter"]), float(params["tol"]),
                                      sample_weight=request.weight)
        coef, intercept = checked_coefficients(W, b, self.name, request.outputs)
        if np.isinf(C):
            note = margin_note(offset + matrix @ coef + intercept)
            if note:
                request.note(note)
        return LinearModel(design, coef, intercept)


LOGISTIC = register(LogisticKind())
