"""The stage table: one row per stage (row 0 is the start value), as a pandas DataFrame."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .. import scoring
from ..scoring import fold_spread

if TYPE_CHECKING:
    from ..chain import Chain

#: the second metric shown beside the one the chain is judged by
SECONDARY = {"regression": "r2", "binary": "auc"}
#: every validation metric the table shows, in order (the chain's own metric is left out of the extras)
SHOWN = {"regression": ("rmse", "r2", "mae"), "binary": ("logloss", "auc", "brier", "accuracy_at")}


def extra_metrics(task: str, metric: str) -> list[str]:
    """Return the validation metrics shown after the second one: MAE (or RMSE when the chain is
    judged by MAE) for regression; Brier score and accuracy at the threshold for binary chains."""
    return [name for name in SHOWN[task] if name not in (metric, SECONDARY[task])]


def stage_table(chain: Chain) -> pd.DataFrame:
    """Return the chain's stage table: kind, shrinkage, features, scores, change, seconds, flags, the
    step and how it was chosen, and (with a subsample) the loss saved on the rows left out."""
    metric = chain.metric
    second = SECONDARY[chain.task]
    scores = chain.scores()
    flags = scoring.overfit_flags(metric, scores)
    best = scoring.best_row(metric, scores)
    n_features = len(chain.schema.columns)
    rows = []
    for i, s in enumerate(scores):
        stage = chain.stages[i - 1] if i else None
        row = {
            "stage": i,
            "kind": stage.kind if stage else "start",
            "shrinkage": stage.spec.shrinkage if stage else np.nan,
            "features": _features(stage, n_features),
            f"train_{metric}": s.train[metric],
            f"valid_{metric}": s.valid[metric],
            "change": s.valid[metric] - scores[i - 1].valid[metric] if i else np.nan,
            f"valid_{second}": s.valid.get(second, np.nan),
            **{f"valid_{name}": s.valid.get(name, np.nan) for name in extra_metrics(chain.task, metric)},
            "seconds": stage.fit_seconds if stage else 0.0,
            "overfit": flags[i],
            "best": i == best,
            "step": stage.step if stage else np.nan,
            "step_rule": stage.step_rule if stage else "",
        }
        if any(s.oob_loss is not None for s in chain.stages):
            row["oob_improvement"] = stage.oob_improvement if stage else np.nan
        if chain.layout.is_kfold:
            row["fold_spread"] = fold_spread(s.fold_valid)
        if chain.test_revealed:
            row[f"test_{metric}"] = s.test.get(metric, np.nan)
        rows.append(row)
    return pd.DataFrame(rows)


def _features(stage, n_features: int) -> str:
    if stage is None:
        return ""
    if not stage.spec.features or len(stage.feature_index) == n_features:
        return "all"
    return ",".join(stage.spec.features)
