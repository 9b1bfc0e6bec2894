"""Scores per stage, overfit and best-stage flags, residual histograms, and permutation importance."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from . import metrics
from .losses import Loss
from .metrics import HIGHER_IS_BETTER
from .tracks import Layout


@dataclass(frozen=True)
class Scores:
    """Metrics of one chain state: ``train`` and ``valid`` dicts, per-fold validation, and test once revealed."""

    train: dict[str, float]
    valid: dict[str, float]
    fold_valid: tuple[float, ...] = ()
    test: dict[str, float] = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Return a JSON-ready dict of the scores."""
        out: dict[str, Any] = {"train": self.train, "valid": self.valid}
        if self.fold_valid:
            out["fold_valid"] = list(self.fold_valid)
        if self.test:
            out["test"] = self.test
        return out


def validation_raw(layout: Layout, outputs: tuple[np.ndarray, ...]) -> np.ndarray:
    """Return the raw output (n, K) on the validation rows: holdout rows, or out-of-fold rows in chain order."""
    if not layout.is_kfold:
        return outputs[0][layout.valid]
    assembled = np.empty((layout.n_train, *outputs[0].shape[1:]), dtype=np.float64)
    for track, output in zip(layout.tracks[1:], outputs[1:], strict=True):
        assembled[track.evaluate] = output[track.evaluate]
    return assembled


def validation_y(layout: Layout, y: np.ndarray) -> np.ndarray:
    """Return the targets of the validation rows, in the order ``validation_raw`` uses."""
    return y[: layout.n_train] if layout.is_kfold else y[layout.valid]


def _part(weight: np.ndarray | None, rows: slice | np.ndarray | None) -> np.ndarray | None:
    return None if weight is None else weight[rows]


class TargetSpreads:
    """The spread of the target about its mean (``metrics.target_spread``, R²'s denominator) on each
    part of one chain's rows, computed the first time a part is scored and kept: the target, the
    rows and the weights of a chain never change, so every stage's scores share it (the same bits)."""

    def __init__(self) -> None:
        self._by_part: dict[str, float] = {}

    def of(self, part: str, loss: Loss, y: np.ndarray, weight: np.ndarray | None) -> dict[str, float]:
        """Return the keyword ``loss.scores`` takes the spread of ``part`` (its target ``y`` and
        ``weight``) by, or nothing for a loss that reports no R²."""
        if loss.task != "regression":
            return {}
        if part not in self._by_part:
            self._by_part[part] = metrics.target_spread(y, weight)
        return {"spread": self._by_part[part]}


def score_state(loss: Loss, layout: Layout, y: np.ndarray, outputs: tuple[np.ndarray, ...], threshold: float = 0.5,
                weight: np.ndarray | None = None, spreads: TargetSpreads | None = None) -> Scores:
    """Return train, validation and per-fold scores for one set of track outputs (rows weighted by
    ``weight``, in chain order, when given); ``spreads`` keeps the target's spread on each part
    for the chain's next scores (the chain's own ``TargetSpreads``; only for this chain's rows)."""
    spreads = TargetSpreads() if spreads is None else spreads
    train_y, train_weight = y[layout.train], _part(weight, layout.train)
    train = loss.scores(train_y, outputs[0][layout.train], threshold, train_weight,
                        **spreads.of("train", loss, train_y, train_weight))
    valid_y = validation_y(layout, y)
    if len(valid_y):
        valid_weight = None if weight is None else validation_y(layout, weight)
        valid = loss.scores(valid_y, validation_raw(layout, outputs), threshold, valid_weight,
                            **spreads.of("valid", loss, valid_y, valid_weight))
    else:  # every row fits (no validation part): nothing to score
        valid = {name: float("nan") for name in train}
    folds: tuple[float, ...] = ()
    if layout.is_kfold:
        folds = tuple(
            _fold_score(loss, spreads, f"fold {i}", y[track.evaluate], output[track.evaluate], threshold,
                        _part(weight, track.evaluate))
            for i, (track, output) in enumerate(zip(layout.tracks[1:], outputs[1:], strict=True), start=1)
        )
    return Scores(train, valid, folds)


def _fold_score(loss: Loss, spreads: TargetSpreads, part: str, y: np.ndarray, raw: np.ndarray, threshold: float,
                weight: np.ndarray | None) -> float:
    return loss.scores(y, raw, threshold, weight, **spreads.of(part, loss, y, weight))[loss.primary]


def test_scores(loss: Loss, layout: Layout, y: np.ndarray, output: np.ndarray, threshold: float = 0.5,
                weight: np.ndarray | None = None) -> dict[str, float]:
    """Return the scores of the main track on the locked test rows."""
    return loss.scores(y[layout.test], output[layout.test], threshold, _part(weight, layout.test))


def shown_residual(loss: Loss, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
    """Return one residual per row to draw: target minus prediction (y - p for binary); for a multiclass
    chain the pseudo-residual of each row's own class, 1 - p_y (0 when the chain is sure and right)."""
    shown = loss.display_residual(y, raw)
    if shown.ndim == 2 and shown.shape[1] > 1:
        return shown[np.arange(len(y)), np.asarray(y, dtype=np.intp)]
    return shown.reshape(-1)


def fold_spread(values: tuple[float, ...]) -> float:
    """Return the standard error of per-fold scores (std with ddof=1 over sqrt(k)); NaN for fewer than 2."""
    if len(values) < 2:
        return float("nan")
    return float(np.std(values, ddof=1) / np.sqrt(len(values)))


def better(metric: str, new: float, old: float) -> bool:
    """Return True when ``new`` is strictly better than ``old`` for ``metric``."""
    if not (np.isfinite(new) and np.isfinite(old)):
        return False
    return new > old if HIGHER_IS_BETTER.get(metric, False) else new < old


def overfit_flags(metric: str, scores: list[Scores]) -> list[bool]:
    """Return, per row, whether train improved while validation got worse against the row before."""
    flags = [False]
    for prev, cur in zip(scores, scores[1:], strict=False):
        flags.append(better(metric, cur.train[metric], prev.train[metric])
                     and better(metric, prev.valid[metric], cur.valid[metric]))
    return flags


def best_row(metric: str, scores: list[Scores]) -> int:
    """Return the row (0 is the start value) with the best validation score; the earliest on ties."""
    best = 0
    for i, s in enumerate(scores):
        if better(metric, s.valid[metric], scores[best].valid[metric]):
            best = i
    return best


def histogram(values: list[np.ndarray], bins: int | str | np.ndarray = "auto", max_bins: int = 60,
              weights: list[np.ndarray] | None = None) -> tuple[list[np.ndarray], np.ndarray]:
    """Return counts per array over shared bin edges (numpy's bin rule on all values, at most ``max_bins``);
    with ``weights`` (one array per array of values), the summed weights of each bin's rows."""
    finite = [v[np.isfinite(v)] for v in values]
    pooled = np.concatenate(finite) if finite else np.array([0.0])
    if pooled.size == 0:
        pooled = np.array([0.0])
    edges = np.histogram_bin_edges(pooled, bins=bins)
    if len(edges) - 1 > max_bins:
        edges = np.histogram_bin_edges(pooled, bins=max_bins)
    if weights is None:
        return [np.histogram(v, bins=edges)[0] for v in finite], edges
    kept = [w[np.isfinite(v)] for v, w in zip(values, weights, strict=True)]
    return [np.histogram(v, bins=edges, weights=w)[0] for v, w in zip(finite, kept, strict=True)], edges


def permutation_importance(
    predict, X: np.ndarray, y: np.ndarray, base_raw: np.ndarray, loss: Loss,
    *, sample: int = 2000, repeats: int = 3, seed: int = 0,
) -> np.ndarray:
    """Return per feature the mean rise in loss when that feature's column is shuffled.

    ``predict(X)`` is the stage's scaled output and ``base_raw`` the chain's raw output before
    the stage, both (n, K). At most ``sample`` rows are used, drawn with ``seed``.
    """
    rng = np.random.RandomState(seed)
    if len(y) > sample:
        rows = np.sort(rng.choice(len(y), size=sample, replace=False))
        X, y, base_raw = X[rows], y[rows], base_raw[rows]
    reference = loss.value(y, base_raw + predict(X))
    rises = np.zeros(X.shape[1])
    for j in range(X.shape[1]):
        shuffled = X.copy()
        for _ in range(repeats):
            shuffled[:, j] = X[rng.permutation(len(y)), j]
            rises[j] += loss.value(y, base_raw + predict(shuffled)) - reference
    return np.maximum(rises / repeats, 0.0)
