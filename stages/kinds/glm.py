"""The ``glm`` kind: a generalised linear model with the chain's loss and link, on top of the chain so far.

The stage fits the loss itself with the chain's raw output as a fixed offset (for a first stage
that is the start value plus log(exposure)), on the design ``linear`` uses (imputed,
standardised, one-hot). It minimises

    (1 / sum w) * sum_i w_i * l(y_i, raw_i + z_i),   z = design @ b + b0,
    plus alpha / 2 * ||b||^2 (the intercept b0 unpenalised),

l being the loss per row: half the squared error, the binomial log loss, or half the Tweedie
deviance (poisson, gamma, tweedie). This is scikit-learn's objective for PoissonRegressor,
GammaRegressor and TweedieRegressor(link="log") (its ``alpha`` on the standardised design here),
and with alpha = 0 the maximum-likelihood GLM statsmodels fits with an offset. With squared loss
the fit is least squares (``linear``), with log loss an unpenalised ``logistic``.

The fit is Newton's method with a backtracking line search (Armijo's rule), from b = 0.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, ClassVar

import numpy as np
from scipy.special import expit

from ..errors import StageSpecError
from . import register
from .base import FitRequest, check_has_features
from .design import LinearDesign
from .linear import LinearModel, StoredAsLinearModel, checked_coefficients

#: halvings of a Newton step before the search gives up (the objective no longer falls in float64)
MAX_HALVINGS = 40
#: Armijo's sufficient decrease: a step must gain this share of what the slope promises
ARMIJO = 1e-4
GLM_LOSSES = ("squared", "logloss", "poisson", "gamma", "tweedie")


def per_row(loss: Any, y: np.ndarray, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return each row's loss l, its slope and its curvature in the raw score (for the losses a glm takes)."""
    if loss.name == "squared":
        return 0.5 * (y - raw) ** 2, raw - y, np.ones_like(raw)
    if loss.name == "logloss":
        p = expit(raw)
        return np.logaddexp(0.0, raw) - y * raw, p - y, p * (1 - p)
    from ..loglink import unit_deviance

    mu = loss.link(raw)
    return 0.5 * unit_deviance(y, mu, loss.power), loss.gradient(y, raw), loss.hessian(y, raw)


def fit_glm(matrix: np.ndarray, y: np.ndarray, offset: np.ndarray, loss: Any, weight: np.ndarray | None,
            alpha: float, max_iter: int, tol: float) -> tuple[np.ndarray, float]:
    """Return (b, b0) minimising the glm objective above by Newton steps.

    Stops when a step moves no coefficient by more than ``tol`` (relative to its size) or when no
    step lowers the objective any more.
    """
    n, width = matrix.shape
    w = np.full(n, 1.0 / n) if weight is None else weight / float(np.sum(weight))
    design = np.c_[matrix, np.ones(n)]
    penalty = np.r_[np.full(width, float(alpha)), 0.0]

    def objective(theta: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
        value, slope, curvature = per_row(loss, y, offset + design @ theta)
        return float(w @ value) + 0.5 * float(penalty @ theta**2), slope, curvature

    def derivatives(theta: np.ndarray, state: tuple[np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        slope, curvature = state
        gradient = design.T @ (w * slope) + penalty * theta
        hessian = (design * (w * curvature)[:, None]).T @ design
        hessian[np.diag_indices_from(hessian)] += penalty
        return gradient, hessian

    def evaluate(theta: np.ndarray) -> tuple[float, tuple[np.ndarray, np.ndarray]]:
        value, slope, curvature = objective(theta)
        return value, (slope, curvature)

    theta = newton_minimise(evaluate, derivatives, np.zeros(width + 1), max_iter, tol)
    return theta[:width], float(theta[width])


def newton_minimise(evaluate: Callable[[np.ndarray], tuple[float, Any]],
                    derivatives: Callable[[np.ndarray, Any], tuple[np.ndarray, np.ndarray]],
                    theta: np.ndarray, max_iter: int, tol: float) -> np.ndarray:
    """Return the minimiser of an objective by damped Newton steps, from ``theta``.

    ``evaluate(theta)`` returns the objective's value and a state, ``derivatives(theta, state)`` the
    gradient and Hessian there (asked only at the points a step moves to, so a costly Hessian is
    never computed for a rejected trial). A step is halved until the value falls by the Armijo
    share of what the step promised; the search stops when a step moves no coefficient by more
    than ``tol`` (relative to its size), or when no step lowers the value any more. The glm kind
    runs it in memory, and a chain on a cluster over reductions, so both take the same steps.
    """
    value, state = evaluate(theta)
    for _ in range(max_iter):
        gradient, hessian = derivatives(theta, state)
        step = np.linalg.lstsq(hessian, gradient, rcond=1e-12)[0]
        promised = float(gradient @ step)
        t, moved = 1.0, False
        for _ in range(MAX_HALVINGS):
            trial = theta - t * step
            trial_value, trial_state = evaluate(trial)
            if np.isfinite(trial_value) and trial_value <= value - ARMIJO * t * promised:
                moved = True
                break
            t /= 2
        if not moved:
            break
        theta, value, state = trial, trial_value, trial_state
        if np.max(np.abs(t * step)) <= tol * max(1.0, float(np.max(np.abs(theta)))):
            break
    return theta


def glm_settings(params: dict[str, Any]) -> tuple[float, int, float]:
    """Return a glm stage's ``alpha``, ``max_iter`` and ``tol``; raise StageSpecError for a value out of range."""
    alpha, max_iter, tol = params["alpha"], params["max_iter"], params["tol"]
    if isinstance(alpha, bool) or not isinstance(alpha, int | float) or not 0 <= alpha < float("inf"):
        raise StageSpecError(f"kind 'glm': alpha must be a number of zero or more, not {alpha!r}")
    if isinstance(max_iter, bool) or not isinstance(max_iter, int) or not 1 <= max_iter <= 10_000:
        raise StageSpecError(f"kind 'glm': max_iter must be a whole number from 1 to 10000, not {max_iter!r}")
    if isinstance(tol, bool) or not isinstance(tol, int | float) or not 0 <= tol < 1:
        raise StageSpecError(f"kind 'glm': tol must be a number from 0 to 1, not {tol!r}")
    return float(alpha), int(max_iter), float(tol)


class GlmKind(StoredAsLinearModel):
    """A GLM with the chain's loss and link (unpenalised, or ridge with ``alpha``), offset by the chain so far."""

    name: ClassVar[str] = "glm"
    summary: ClassVar[str] = "a GLM with the chain's loss and link on all features (imputed, standardised, one-hot)"
    defaults: ClassVar[dict[str, Any]] = {"alpha": 0.0, "max_iter": 100, "tol": 1e-12}
    main_params: ClassVar[tuple[str, ...]] = ("alpha",)
    fits_loss: ClassVar[bool] = True

    def fit(self, request: FitRequest, params: dict[str, Any]) -> LinearModel:
        """Return the GLM fit from the chain's raw output; raise StageSpecError for a loss it does not take."""
        loss = request.loss
        if loss.name not in GLM_LOSSES or request.outputs > 1:
            raise StageSpecError(f"kind {self.name!r} takes the losses {', '.join(GLM_LOSSES)}; this chain's is "
                                 f"{'the multinomial log loss (use logistic)' if request.outputs > 1 else repr(loss.name)}")
        alpha, max_iter, tol = glm_settings(params)
        check_has_features(request.X, self.name)
        design = LinearDesign.fit(request.X, request.columns)
        matrix = design.transform(request.X)
        y = np.asarray(request.y, dtype=np.float64)
        b, b0 = fit_glm(matrix, y, np.asarray(request.raw, dtype=np.float64), loss, request.weight,
                        alpha, max_iter, tol)
        coef, intercept = checked_coefficients(b, b0, self.name)
        return LinearModel(design, coef, intercept)


GLM = register(GlmKind())
