"""Losses for counts and positive amounts on the log link: poisson, gamma and tweedie.

The raw output F is the log of the mean, mu = exp(F); an exposure enters as log(exposure) in F
(the chain's offset), so mu is the expected total of a row and exp(F - log(exposure)) its rate
per unit of exposure. Each loss is scikit-learn's half deviance of the Tweedie family with
power p (``sklearn._loss.loss``: HalfPoissonLoss is p = 1, HalfGammaLoss p = 2,
HalfTweedieLoss 1 < p < 2), written in F:

    loss     = exp((2 - p) F) / (2 - p) - y exp((1 - p) F) / (1 - p)   (p = 1: exp(F) - y F;
                                                                        p = 2: F + y exp(-F))
    gradient = exp((2 - p) F) - y exp((1 - p) F)
    hessian  = (2 - p) exp((2 - p) F) - (1 - p) y exp((1 - p) F)

A stage is fit to the residual -gradient; a tree leaf takes one Newton step,
sum(w r) / sum(w hessian) over its rows (as LightGBM and scikit-learn's histogram boosting set
leaves). The start value is the loss's optimal constant: log of the (weighted) mean of y, kept
above 10 float64 epsilons as scikit-learn's ``fit_intercept_only`` keeps it; with an offset o,
the constant c with sum w (exp((2 - p)(o + c)) - y exp((1 - p)(o + c))) = 0, which has the
closed form c = log(sum w y e^{(1 - p) o} / sum w e^{(2 - p) o}).

The metric is the mean deviance (``sklearn.metrics.mean_poisson_deviance``,
``mean_gamma_deviance``, ``mean_tweedie_deviance``), with RMSE, MAE and R² of the mean mu beside
it. The residual users look at is the deviance residual, sign(y - mu) sqrt(deviance of the row).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import ClassVar

import numpy as np
from scipy.special import xlogy

from . import metrics
from .errors import DataError, StageSpecError
from .losses import Loss, Weights, _flat, _shaped, bracketed_step, newton_step, step_scale

#: the smallest mean a start value takes (log of it), as scikit-learn keeps y_pred inside (0, inf)
MEAN_FLOOR = 10 * float(np.finfo(np.float64).eps)
#: the raw score is kept below this where exp is taken (exp(700) is near float64's largest)
RAW_CEILING = 700.0


def _exp(values: np.ndarray) -> np.ndarray:
    return np.exp(np.minimum(values, RAW_CEILING))


def unit_deviance(y: np.ndarray, mu: np.ndarray, power: float) -> np.ndarray:
    """Return each row's Tweedie deviance of mean ``mu`` against ``y`` (power 1: Poisson, 2: gamma),
    as sklearn.metrics.mean_tweedie_deviance computes it before averaging."""
    if power == 1:
        return 2 * (xlogy(y, y / mu) - y + mu)
    if power == 2:
        return 2 * (np.log(mu / y) + y / mu - 1)
    one, two = 1 - power, 2 - power
    return 2 * (np.power(np.maximum(y, 0), two) / (one * two) - y * np.power(mu, one) / one + np.power(mu, two) / two)


def mean_deviance(y: np.ndarray, mu: np.ndarray, power: float, weight: Weights = None) -> float:
    """Return the (weighted) mean Tweedie deviance of ``mu`` against ``y``; NaN for no rows."""
    if len(y) == 0:
        return float("nan")
    return metrics.average(unit_deviance(y, mu, power), weight)


@dataclass(frozen=True)
class LogLinkLoss(Loss):
    """The half Tweedie deviance of power ``power`` on the log link (base of poisson, gamma, tweedie)."""

    primary: ClassVar[str] = "deviance"
    leaf_rule: ClassVar[str] = "Newton leaves"
    #: what the chain's residual views show for this loss
    residual_name: ClassVar[str] = "deviance residual"
    power: float = 1.0

    # ----- the target ---------------------------------------------------------------------
    def bad_targets(self, y: np.ndarray) -> int:
        """Return how many values of ``y`` the loss cannot take (negative; for gamma, also zero)."""
        return int(np.count_nonzero(~(y > 0) if self.power >= 2 else ~(y >= 0)))

    def check_target(self, y: np.ndarray, target: str, source: str) -> None:
        """Raise DataError naming ``target`` and the count of its rows the loss cannot take."""
        bad = self.bad_targets(y)
        if bad:
            what = "zero or negative" if self.power >= 2 else "negative"
            needs = "positive amounts" if self.power >= 2 else "counts or amounts of zero or more"
            rows = "row is" if bad == 1 else "rows are"
            raise DataError(f"{source}: target {target!r}: {bad:,} {rows} {what}; loss {self.name!r} needs {needs}")

    # ----- the loss on vectors -------------------------------------------------------------
    def gradient(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return d loss / d F of each row."""
        p = self.power
        if p == 1:
            return _exp(raw) - y
        if p == 2:
            return 1 - y * _exp(-raw)
        return _exp((2 - p) * raw) - y * _exp((1 - p) * raw)

    def hessian(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return d² loss / d F² of each row (not negative where y >= 0)."""
        p = self.power
        if p == 1:
            return _exp(raw)
        if p == 2:
            return y * _exp(-raw)
        return (2 - p) * _exp((2 - p) * raw) - (1 - p) * y * _exp((1 - p) * raw)

    def _start(self, y, weight, offset) -> float:
        """log of the (weighted) mean of y; with an offset, the closed-form optimal constant."""
        w = np.ones_like(y) if weight is None else weight
        if offset is None:
            return float(np.log(max(metrics.average(y, weight), MEAN_FLOOR)))
        p = self.power
        top = float(np.sum(w * y * _exp((1 - p) * offset)))
        bottom = float(np.sum(w * _exp((2 - p) * offset)))
        return float(np.log(max(top / bottom, MEAN_FLOOR))) if bottom > 0 else 0.0

    def _residual(self, y, raw, weight) -> np.ndarray:
        return -self.gradient(y, raw)

    def _value(self, y, raw, weight) -> float:
        """The mean deviance of mu = exp(F)."""
        return mean_deviance(y, _exp(raw), self.power, weight)

    def _link(self, raw: np.ndarray) -> np.ndarray:
        """The mean: exp of the raw score."""
        return _exp(raw)

    # ----- leaves and steps ---------------------------------------------------------------
    def leaf_value(self, y, raw, residual, context, weight=None) -> float:
        """Return one Newton step: mean(w r) / mean(w hessian) over the leaf's rows, 0 where the curvature vanishes."""
        return newton_step(metrics.average(residual, weight), metrics.average(self.hessian(y, raw), weight))

    def step_objective(self, y, raw, output, weight=None) -> Callable[[float], float]:
        """Return the mean deviance along ``output`` as a function of the step."""
        raw, output = _flat(raw), _flat(output)
        return lambda step: self._value(y, raw + step * output, weight)

    def line_search(self, y, raw, output, weight=None) -> float:
        """Return the step (at least 0) minimising the mean deviance along ``output``.

        The bracket's unit is the spread of the Newton step of each row (residual over curvature,
        on the raw scale) over the spread of the output.
        """
        raw, output = _flat(raw), _flat(output)
        curvature = self.hessian(y, raw)
        working = np.divide(self._residual(y, raw, weight), curvature, out=np.zeros_like(raw), where=curvature > 0)
        return bracketed_step(self.step_objective(y, raw, output, weight), step_scale(working, output))

    # ----- what users read ----------------------------------------------------------------
    def display_residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return the deviance residuals sign(y - mu) sqrt(deviance of the row), in ``raw``'s shape."""
        flat = _flat(raw)
        mu = _exp(flat)
        deviance = np.maximum(unit_deviance(y, mu, self.power), 0.0)
        return _shaped(np.sign(y - mu) * np.sqrt(deviance), raw)

    def scan_residuals(self, y: np.ndarray, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return y - mu twice: the residual scan works on the response scale (for poisson it is also
        the negative gradient)."""
        response = y - self._link(_flat(raw))
        return _shaped(response, raw), _shaped(response, raw)

    def scores(self, y, raw, threshold=0.5, weight=None, spread=None) -> dict[str, float]:
        """Return the mean deviance, and RMSE, MAE and R² of the mean against ``y`` (``spread`` as
        ``Loss.scores`` takes it)."""
        mu = _exp(_flat(raw))
        out = metrics.regression_scores(y, mu, weight, spread)
        out["deviance"] = mean_deviance(y, mu, self.power, weight)
        out["loss"] = out["deviance"]
        return out

    def lightgbm_params(self) -> dict[str, float]:
        """Return the parameters LightGBM's objective of this loss takes besides its name."""
        return {}


@dataclass(frozen=True)
class PoissonLoss(LogLinkLoss):
    """Half Poisson deviance on the log link, for counts (scikit-learn's HalfPoissonLoss)."""

    name: ClassVar[str] = "poisson"
    lightgbm_objective: ClassVar[str] = "poisson"
    power: float = 1.0


@dataclass(frozen=True)
class GammaLoss(LogLinkLoss):
    """Half gamma deviance on the log link, for positive amounts (scikit-learn's HalfGammaLoss)."""

    name: ClassVar[str] = "gamma"
    lightgbm_objective: ClassVar[str] = "gamma"
    power: float = 2.0


@dataclass(frozen=True)
class TweedieLoss(LogLinkLoss):
    """Half Tweedie deviance of power 1 < p < 2 on the log link, for amounts with exact zeros
    (scikit-learn's HalfTweedieLoss)."""

    name: ClassVar[str] = "tweedie"
    lightgbm_objective: ClassVar[str] = "tweedie"
    power: float = 1.5

    def lightgbm_params(self) -> dict[str, float]:
        """Return LightGBM's tweedie_variance_power: the loss's power."""
        return {"tweedie_variance_power": float(self.power)}


LOG_LINK_LOSSES: dict[str, type[LogLinkLoss]] = {cls.name: cls for cls in (PoissonLoss, GammaLoss, TweedieLoss)}
#: the power a tweedie loss takes when none is given
DEFAULT_POWER = 1.5


def check_power(value: object) -> float:
    """Return a tweedie power as a float; raise StageSpecError unless it lies strictly between 1 and 2."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not 1.0 < float(value) < 2.0:
        raise StageSpecError(f"power must be a number strictly between 1 and 2 (tweedie), not {value!r}")
    return float(value)


def log_link_loss(name: str, power: float | None = None) -> LogLinkLoss:
    """Return the log-link loss called ``name``; ``power`` is for tweedie only (default 1.5)."""
    if name != "tweedie":
        if power is not None:
            raise StageSpecError(f"power is for the tweedie loss only, not {name!r}")
        return LOG_LINK_LOSSES[name]()
    return TweedieLoss(power=DEFAULT_POWER if power is None else check_power(power))


def is_log_link(loss: object) -> bool:
    """Return True when ``loss`` is on the log link (an exposure may enter its raw score)."""
    return isinstance(loss, LogLinkLoss)
