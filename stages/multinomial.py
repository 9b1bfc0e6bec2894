"""The multinomial log loss of a multiclass chain: K raw scores per row, softmax, Newton leaves.

A row's K raw scores F_1 .. F_K give the class probabilities p_k = exp(F_k) / sum_j exp(F_j)
(softmax). The loss is -log p_y, y the row's class (codes 0 .. K - 1 in the chain's stored
class order); its negative gradient for class k is 1[y = k] - p_k. This is scikit-learn's
``HalfMultinomialLoss`` as its gradient boosting uses it (Friedman 2001, algorithm 6):

- the start is the log of each class's prior on the fitting rows, centred on their geometric
  mean (the symmetric multinomial logit), the priors kept within [eps, 1 - eps];
- a tree of class k sets each leaf to (K - 1) / K * sum(r_k) / sum(p_k (1 - p_k)) over its rows,
  one Newton step on the diagonal of the Hessian with the factor of Friedman's algorithm 6;
- the residual is computed as scikit-learn's compiled loss computes it: exp(F_k - max_j F_j)
  with the C library's exp, summed over classes in class order, so long chains of tree stages
  take the same splits as ``GradientBoostingClassifier``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from scipy.special import logsumexp
from scipy.stats import gmean

from . import metrics
from .losses import LogLoss, Loss, Weights, libm_exp, newton_step, step_scale
from .losses import bracketed_step as _bracketed_step


def softmax(raw: np.ndarray) -> np.ndarray:
    """Return the class probabilities of (n, K) raw scores: exp(F_k - max F) / sum_j exp(F_j - max F)."""
    shifted = np.exp(raw - raw.max(axis=1, keepdims=True))
    return shifted / shifted.sum(axis=1, keepdims=True)


def stable_probabilities(raw: np.ndarray) -> np.ndarray:
    """Return softmax(raw) as scikit-learn's compiled multinomial loss computes it: the C library's
    exp of F_k - max F, divided by their sum taken class after class."""
    exps = libm_exp(raw - raw.max(axis=1, keepdims=True))
    total = exps[:, 0].copy()
    for k in range(1, raw.shape[1]):
        total += exps[:, k]
    return exps / total[:, None]


def _compiled_loss(n_classes: int) -> Any:
    """Return scikit-learn's compiled multinomial loss of ``n_classes`` classes, or None where this
    scikit-learn has none (its module is private: any change there falls back to our own path)."""
    try:
        from sklearn._loss.loss import HalfMultinomialLoss
    except ImportError:
        return None
    return HalfMultinomialLoss(n_classes=n_classes)


@dataclass(frozen=True)
class MultinomialLoss(Loss):
    """Multinomial log loss on K raw scores per row (softmax); residuals 1[y = k] - p_k."""

    name: ClassVar[str] = "logloss"
    task: ClassVar[str] = "multiclass"
    primary: ClassVar[str] = "logloss"
    lightgbm_objective: ClassVar[str] = "multiclass"
    leaf_rule: ClassVar[str] = "Newton leaves (multinomial, (K - 1) / K)"
    n_classes: int = 3

    @property
    def outputs(self) -> int:
        """Return K, the number of classes: one raw score per class."""
        return self.n_classes

    def for_output(self, k: int) -> Loss:
        """Return the loss a learner of class ``k`` alone sees: its rows' y is 1 for class k, else 0."""
        return ClassLoss(n_classes=self.n_classes, k=k)

    def _check(self, raw: np.ndarray) -> np.ndarray:
        raw = np.asarray(raw)
        if raw.ndim != 2 or raw.shape[1] != self.n_classes:
            raise ValueError(f"a {self.n_classes}-class loss got raw scores of shape {raw.shape}")
        return raw

    def start(self, y: np.ndarray, weight: Weights = None, offset: np.ndarray | None = None) -> np.ndarray:
        """Return log(prior_k / geometric mean of the priors) for each class, the priors being each
        class's (weighted) share of ``y``, clipped to [eps, 1 - eps], as GradientBoostingClassifier
        starts. Raise ValueError for an offset (offsets are for one-output losses)."""
        if offset is not None:
            raise ValueError("a multiclass chain takes no offset")
        codes = np.asarray(y, dtype=np.intp)
        counts = np.bincount(codes, weights=weight, minlength=self.n_classes).astype(np.float64)
        eps = np.finfo(np.float64).eps
        priors = np.clip(counts / counts.sum(), eps, 1 - eps)
        return np.log(priors / gmean(priors))

    def residual(self, y: np.ndarray, raw: np.ndarray, weight: Weights = None) -> np.ndarray:
        """Return the (n, K) negative gradient 1[y = k] - p_k (row weights do not change it).

        Computed by scikit-learn's compiled multinomial loss where it is there (the same C
        library exp, the same sums and divisions, row by row: the same bits as the path below,
        about seven times faster), else from ``stable_probabilities``."""
        raw = self._check(raw)
        compiled = _compiled_loss(self.n_classes)
        if compiled is not None:
            gradient = compiled.gradient(y_true=np.asarray(y, dtype=np.float64),
                                         raw_prediction=np.ascontiguousarray(raw, dtype=np.float64), n_threads=1)
            return np.subtract(0.0, gradient, out=gradient)  # 0 - g: no negative zeros
        return metrics.one_hot(y, self.n_classes) - stable_probabilities(raw)

    def value(self, y: np.ndarray, raw: np.ndarray, weight: Weights = None) -> float:
        """Return the mean log loss of the softmax probabilities, clipped as scikit-learn clips them."""
        return metrics.log_loss(y, softmax(self._check(raw)), weight)

    def best_constant(self, y, raw, residual, context, weight=None) -> np.ndarray:
        """Return the K constants to add to ``raw``: exactly start(y) - raw where every row has the same
        raw scores (0 right after the start), else each class's Newton leaf value over all rows."""
        raw = self._check(raw)
        if len(raw) and bool(np.all(raw == raw[0])):
            return self.start(y, weight) - raw[0]
        onehot = metrics.one_hot(y, self.n_classes)
        return np.array([self.for_output(k).leaf_value(onehot[:, k], raw[:, k], residual[:, k], context, weight)
                         for k in range(self.n_classes)])

    def step_objective(self, y, raw, output, weight=None) -> Callable[[float], float]:
        """Return the mean log loss along ``output`` (both (n, K)), from raw scores without clipping."""
        raw, output = self._check(raw), self._check(output)
        rows, codes = np.arange(len(raw)), np.asarray(y, dtype=np.intp)

        def objective(step: float) -> float:
            moved = raw + step * output
            return metrics.average(logsumexp(moved, axis=1) - moved[rows, codes], weight)

        return objective

    def line_search(self, y, raw, output, weight=None) -> float:
        """Return the one step (at least 0) shared by the K outputs that minimises the mean log loss."""
        return _bracketed_step(self.step_objective(y, raw, output, weight),
                               step_scale(self.display_residual(y, raw), output))

    def link(self, raw: np.ndarray) -> np.ndarray:
        """Return the (n, K) class probabilities (softmax)."""
        return softmax(self._check(raw))

    def display_residual(self, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
        """Return the (n, K) pseudo-residuals users look at: 1[y = k] - p_k."""
        return metrics.one_hot(y, self.n_classes) - self.link(raw)

    def scores(self, y, raw, threshold=0.5, weight=None, spread=None) -> dict[str, float]:
        """Return log loss, accuracy, macro one-vs-rest ROC AUC and the Brier score (multiclass form;
        no R²: ``spread`` is not used)."""
        out = metrics.multiclass_scores(y, self.link(raw), weight)
        out["loss"] = out["logloss"]
        return out


@dataclass(frozen=True)
class ClassLoss(LogLoss):
    """The multinomial loss as the learner of one class sees it: y is 1 for that class, else 0."""

    n_classes: int = 3
    k: int = 0

    def leaf_value(self, y, raw, residual, context, weight=None) -> float:
        """Return (K - 1) / K * mean(r) / mean(p (1 - p)) with p = y - r, zero where the curvature vanishes
        (scikit-learn's multinomial leaf update, factor included)."""
        prob = y - residual
        numerator = metrics.average(residual, weight)
        numerator *= (self.n_classes - 1) / self.n_classes
        return newton_step(numerator, metrics.average(prob * (1 - prob), weight))
