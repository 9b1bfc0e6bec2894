"""Metrics reported for every part of the data, computed with numpy and scipy (checked against sklearn.metrics).

Every metric takes optional row weights: None is the plain mean, computed exactly as without
weights; with weights each row counts in proportion to its weight, as sklearn.metrics computes
it with ``sample_weight``.
"""

from __future__ import annotations

import numpy as np
from scipy.special import xlogy

#: probabilities (and their complements) are clipped this far from 0 and 1 where a log is taken:
#: float64's machine epsilon, as sklearn.metrics.log_loss clips them
PROB_EPS = float(np.finfo(np.float64).eps)

#: metric name -> True when higher is better
HIGHER_IS_BETTER = {"rmse": False, "mae": False, "r2": True, "loss": False, "logloss": False,
                    "auc": True, "accuracy": True, "accuracy_at": True, "brier": False,
                    "deviance": False}


def average(values: np.ndarray, weight: np.ndarray | None = None) -> float:
    """Return the mean of ``values`` (the weighted mean when ``weight`` is given)."""
    if weight is None:
        return float(np.mean(values))
    return float(np.average(values, weights=weight))


def target_spread(y: np.ndarray, weight: np.ndarray | None = None) -> float:
    """Return the target's spread about its mean, sum((y - mean(y))**2) (each row times its weight,
    about the weighted mean, when ``weight`` is given): R²'s denominator."""
    if weight is None:
        centred = y - np.mean(y)   # squared in place
        return float(np.sum(np.square(centred, out=centred)))
    return float(np.sum(weight * (y - np.average(y, weights=weight)) ** 2))


def regression_scores(y: np.ndarray, prediction: np.ndarray, weight: np.ndarray | None = None,
                      spread: float | None = None) -> dict[str, float]:
    """Return RMSE, MAE and R² of ``prediction`` against ``y`` (R² is NaN for a constant ``y``);
    ``spread`` is ``target_spread(y, weight)`` when known."""
    return regression_scores_and_mse(y, prediction, weight, spread)[0]


def regression_scores_and_mse(y: np.ndarray, prediction: np.ndarray, weight: np.ndarray | None = None,
                              spread: float | None = None) -> tuple[dict[str, float], float]:
    """Return ``regression_scores`` and the mean squared error (weighted when ``weight`` is given)."""
    if len(y) == 0:
        return {"rmse": float("nan"), "mae": float("nan"), "r2": float("nan")}, float("nan")
    if spread is None:
        spread = target_spread(y, weight)
    error = np.asarray(y - prediction)
    if weight is None:
        # the same sums as mean(|error|), mean(error**2) and sum(error**2), the square taken in
        # place; numpy's mean is the sum over the count, so the sum is taken once
        mae = float(np.mean(np.abs(error)))
        total = np.sum(np.square(error, out=error))
        mse = float(total / error.size)
        r2 = 1.0 - float(total) / spread if spread > 0 else float("nan")
        return {"rmse": float(np.sqrt(mse)), "mae": mae, "r2": r2}, mse
    mse = average(error**2, weight)
    r2 = 1.0 - float(np.sum(weight * error**2)) / spread if spread > 0 else float("nan")
    return {"rmse": float(np.sqrt(mse)), "mae": average(np.abs(error), weight), "r2": r2}, mse


def roc_auc(y: np.ndarray, score: np.ndarray, weight: np.ndarray | None = None) -> float:
    """Return the area under the ROC curve (ties count one half); NaN when only one class is present.

    With weights, each pair of a positive and a negative row counts the product of their weights.
    """
    if weight is not None:
        return _weighted_auc(y, score, weight)
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
    average_rank = (starts + ends + 1) / 2.0
    ranks[order] = np.repeat(average_rank, ends - starts)
    rank_sum = float(np.sum(ranks[y == 1]))
    return (rank_sum - positives * (positives + 1) / 2.0) / (positives * negatives)


def _weighted_auc(y: np.ndarray, score: np.ndarray, weight: np.ndarray) -> float:
    """Return the weighted area under the ROC curve: the share of positive-negative weight pairs ranked right."""
    order = np.argsort(score, kind="mergesort")
    sorted_score, positive = score[order], y[order] == 1
    w_pos = np.where(positive, weight[order], 0.0)
    w_neg = np.where(positive, 0.0, weight[order])
    total_pos, total_neg = float(w_pos.sum()), float(w_neg.sum())
    if not (total_pos > 0 and total_neg > 0):
        return float("nan")
    boundaries = np.flatnonzero(np.diff(sorted_score)) + 1
    groups = np.split(np.arange(len(score)), boundaries)
    below, pairs = 0.0, 0.0
    for rows in groups:  # each tie group: its positives beat every negative below, tie with its own
        pos, neg = float(w_pos[rows].sum()), float(w_neg[rows].sum())
        pairs += pos * (below + 0.5 * neg)
        below += neg
    return pairs / (total_pos * total_neg)


def log_loss(y: np.ndarray, probability: np.ndarray, weight: np.ndarray | None = None) -> float:
    """Return the mean log loss of ``probability`` against ``y``.

    Binary: ``probability`` is the positive class's (a vector) and ``y`` is 0/1. Multiclass:
    ``probability`` is (n, K), one column per class, and ``y`` the class codes 0 .. K - 1. As
    sklearn.metrics.log_loss computes it: each probability (for binary, p and 1 - p) is clipped to
    [eps, 1 - eps], eps float64's machine epsilon, so a saturated wrong prediction costs -log(eps) = 36.04.
    """
    if probability.ndim == 2:
        codes = np.asarray(y, dtype=np.intp)
        chosen = np.clip(probability[np.arange(len(codes)), codes], PROB_EPS, 1 - PROB_EPS)
        return average(-np.log(chosen), weight) if len(codes) else float("nan")
    p = np.clip(probability, PROB_EPS, 1 - PROB_EPS)
    q = np.clip(1 - probability, PROB_EPS, 1 - PROB_EPS)
    if weight is None:
        return float(-np.mean(xlogy(y, p) + xlogy(1 - y, q)))
    return -average(xlogy(y, p) + xlogy(1 - y, q), weight)


def binary_scores(y: np.ndarray, probability: np.ndarray, threshold: float = 0.5,
                  weight: np.ndarray | None = None) -> dict[str, float]:
    """Return log loss, ROC AUC, accuracy at 0.5 and at ``threshold``, and the Brier score."""
    if len(y) == 0:
        return {k: float("nan") for k in ("logloss", "auc", "accuracy", "accuracy_at", "brier")}
    return {
        "logloss": log_loss(y, probability, weight),
        "auc": roc_auc(y, probability, weight),
        "accuracy": average((probability >= 0.5) == (y == 1), weight),
        "accuracy_at": average((probability >= threshold) == (y == 1), weight),
        "brier": average((probability - y) ** 2, weight),
    }


def one_hot(codes: np.ndarray, n_classes: int) -> np.ndarray:
    """Return the (n, K) float64 indicator matrix of class ``codes`` (0 .. K - 1)."""
    out = np.zeros((len(codes), n_classes), dtype=np.float64)
    out[np.arange(len(codes)), np.asarray(codes, dtype=np.intp)] = 1.0
    return out


def predicted_classes(probability: np.ndarray) -> np.ndarray:
    """Return each row's most probable class code (the first of equally probable ones)."""
    return np.argmax(probability, axis=1)


def multiclass_scores(y: np.ndarray, probability: np.ndarray, weight: np.ndarray | None = None) -> dict[str, float]:
    """Return log loss, accuracy, macro one-vs-rest ROC AUC and the Brier score of (n, K) ``probability``.

    As sklearn.metrics computes them: ``log_loss``; ``accuracy_score`` of the most probable class;
    ``roc_auc_score(multi_class="ovr", average="macro")``, the mean over classes of each class's
    AUC against the rest (here over the classes present with other rows beside them; NaN when
    none is); ``brier_score_loss``'s multiclass form, the mean over rows of the sum over classes
    of the squared difference between the probability and the indicator (from 0 to 2).
    """
    names = ("logloss", "accuracy", "auc", "brier")
    if len(y) == 0:
        return {k: float("nan") for k in names}
    codes = np.asarray(y, dtype=np.intp)
    n_classes = probability.shape[1]
    aucs = [roc_auc((codes == k).astype(np.float64), probability[:, k], weight) for k in range(n_classes)]
    defined = [a for a in aucs if np.isfinite(a)]
    return {
        "logloss": log_loss(codes, probability, weight),
        "accuracy": average(predicted_classes(probability) == codes, weight),
        "auc": float(np.mean(defined)) if defined else float("nan"),
        "brier": average(np.sum((one_hot(codes, n_classes) - probability) ** 2, axis=1), weight),
    }


def confusion_counts(y: np.ndarray, predicted: np.ndarray, n_classes: int,
                     weight: np.ndarray | None = None) -> np.ndarray:
    """Return the (K, K) confusion matrix: row i, column j counts the rows of class i predicted as j
    (weights summed when given), as sklearn.metrics.confusion_matrix lays it out."""
    cells = np.asarray(y, dtype=np.intp) * n_classes + np.asarray(predicted, dtype=np.intp)
    counts = np.bincount(cells, weights=weight, minlength=n_classes * n_classes)
    return counts.reshape(n_classes, n_classes)
