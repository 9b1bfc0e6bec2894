"""Metrics reported for every part of the data, computed with numpy and scipy (checked against sklearn.metrics)."""

from __future__ import annotations

import numpy as np
from scipy.special import xlogy

#: probabilities (and their complements) are clipped this far from 0 and 1 where a log is taken:
#: float64's machine epsilon, as sklearn.metrics.log_loss clips them
PROB_EPS = float(np.finfo(np.float64).eps)

#: metric name -> True when higher is better
HIGHER_IS_BETTER = {"rmse": False, "mae": False, "r2": True, "loss": False, "logloss": False,
                    "auc": True, "accuracy": True, "accuracy_at": True, "brier": False}


def regression_scores(y: np.ndarray, prediction: np.ndarray) -> dict[str, float]:
    """Return RMSE, MAE and R² of ``prediction`` against ``y`` (R² is NaN for a constant ``y``)."""
    if len(y) == 0:
        return {"rmse": float("nan"), "mae": float("nan"), "r2": float("nan")}
    error = y - prediction
    mse = float(np.mean(error**2))
    spread = float(np.sum((y - np.mean(y)) ** 2))
    r2 = 1.0 - float(np.sum(error**2)) / spread if spread > 0 else float("nan")
    return {"rmse": float(np.sqrt(mse)), "mae": float(np.mean(np.abs(error))), "r2": r2}


def roc_auc(y: np.ndarray, score: np.ndarray) -> float:
    """Return the area under the ROC curve (ties count one half); NaN when only one class is present."""
    positives = int(np.sum(y == 1))
    negatives = len(y) - positives
    if positives == 0 or negatives == 0:
        return float("nan")
    order = np.argsort(score, kind="mergesort")
    sorted_score = score[order]
    ranks = np.empty(len(score), dtype=np.float64)
    # average ranks over ties (Mann-Whitney U statistic)
    boundaries = np.flatnonzero(np.diff(sorted_score)) + 1
    starts = np.concatenate(([0], boundaries))
    ends = np.concatenate((boundaries, [len(score)]))
    average = (starts + ends + 1) / 2.0
    ranks[order] = np.repeat(average, ends - starts)
    rank_sum = float(np.sum(ranks[y == 1]))
    return (rank_sum - positives * (positives + 1) / 2.0) / (positives * negatives)


def log_loss(y: np.ndarray, probability: np.ndarray) -> float:
    """Return the mean log loss of ``probability`` (of the positive class) against 0/1 ``y``.

    As sklearn.metrics.log_loss computes it: p and 1 - p are each clipped to [eps, 1 - eps],
    eps float64's machine epsilon, so a saturated wrong prediction costs -log(eps) = 36.04.
    """
    p = np.clip(probability, PROB_EPS, 1 - PROB_EPS)
    q = np.clip(1 - probability, PROB_EPS, 1 - PROB_EPS)
    return float(-np.mean(xlogy(y, p) + xlogy(1 - y, q)))


def binary_scores(y: np.ndarray, probability: np.ndarray, threshold: float = 0.5) -> dict[str, float]:
    """Return log loss, ROC AUC, accuracy at 0.5 and at ``threshold``, and the Brier score."""
    if len(y) == 0:
        return {k: float("nan") for k in ("logloss", "auc", "accuracy", "accuracy_at", "brier")}
    return {
        "logloss": log_loss(y, probability),
        "auc": roc_auc(y, probability),
        "accuracy": float(np.mean((probability >= 0.5) == (y == 1))),
        "accuracy_at": float(np.mean((probability >= threshold) == (y == 1))),
        "brier": float(np.mean((probability - y) ** 2)),
    }
