"""Feature importance of one stage: the learner's own where it has one, else permutation on validation rows."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from .. import scoring
from ..errors import StageSpecError
from ..kinds import get_kind
from ..outputs import block

if TYPE_CHECKING:
    from ..chain import Chain


def stage_importance(chain: Chain, row: int, *, sample: int = 2000) -> dict[str, float]:
    """Return feature -> importance for stage ``row``, normalised to sum to 1 (all zero stays zero)."""
    if not 1 <= row <= len(chain.stages):
        raise StageSpecError(f"there is no stage {row}; the chain has {len(chain.stages)}")
    stage = chain.stages[row - 1]
    columns = chain.schema.subset(list(stage.feature_index))
    names = [c.name for c in columns]
    learner = stage.learners[0]
    values = get_kind(stage.kind).importance(learner, columns)
    if values is None:
        values = _permutation(chain, row, sample)
    values = np.asarray(values, dtype=np.float64)
    total = float(values.sum())
    if total > 0:
        values = values / total
    return dict(zip(names, (float(v) for v in values), strict=True))


def _permutation(chain: Chain, row: int, sample: int) -> np.ndarray:
    stage = chain.stages[row - 1]
    layout = chain.layout
    part = layout.valid if layout.n_valid else layout.train
    X = chain.matrix[part][:, list(stage.feature_index)]
    y = chain.y[part]
    base = chain.outputs(row - 1)[0][part]
    learner, scale, outputs = stage.learners[0], stage.scale, chain.loss.outputs

    def predict(rows: np.ndarray) -> np.ndarray:
        return scale * block(learner.predict(rows), len(rows), outputs)

    return scoring.permutation_importance(predict, X, y, base, chain.loss, sample=sample, seed=chain.seed)


#: what each kind's own importance measures
NATIVE = {"tree": "impurity", "forest": "impurity", "extra_trees": "impurity",
          "linear": "|coefficient| standardised", "ridge": "|coefficient| standardised",
          "lasso": "|coefficient| standardised", "logistic": "|coefficient| standardised",
          "spline": "|coefficient| of the basis"}


def importance_type(kind: str, learner: Any, columns: tuple[Any, ...]) -> str:
    """Return what a stage's importance (``stage_importance``) measures: ``impurity`` (the fall in
    squared error at the tree's splits), ``gain`` or ``split count`` (LightGBM), ``|coefficient|
    standardised`` (linear kinds), or ``permutation`` (the rise in validation loss when the feature
    is shuffled, for learners without an importance of their own)."""
    booster = getattr(learner, "importance_type", None)
    if isinstance(booster, str):
        return "split count" if booster == "split" else booster
    if get_kind(kind).importance(learner, columns) is None:
        return "permutation"
    if kind in NATIVE:
        return NATIVE[kind]
    estimator = getattr(learner, "estimator", None)
    return "impurity" if getattr(estimator, "feature_importances_", None) is not None else "|coefficient|"
