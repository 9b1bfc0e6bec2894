"""The stage table: one row per stage (row 0 is the start value), built in one place from each
stage's spec, scores and step, for a live chain (``stage_rows``) and for a loaded chain file
(``fitted_rows``).

The rows are typed and hold numbers, never text: ``None`` where a cell does not apply or is not a
number (the start value's shrinkage and change, the test score before the reveal, the fold spread
without folds, a metric with no validation rows). The DataFrame of ``Chain.table()``
(``StageTable.frame``), the command line's text and CSV tables and the workbench's chain table
all derive from these rows, so adding a column is one edit here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Protocol

import pandas as pd

from .. import scoring
from ..scoring import Scores, fold_spread
from ..spec import StageSpec

if TYPE_CHECKING:
    from ..chain import Chain
    from ..predictor import FittedChain

#: the second metric shown beside the one the chain is judged by (accuracy beside a multiclass log loss)
SECONDARY = {"regression": "r2", "binary": "auc", "multiclass": "accuracy"}
#: every validation metric the table shows, in order (the chain's own metric is left out of the extras)
SHOWN = {"regression": ("rmse", "r2", "mae"), "binary": ("logloss", "auc", "brier", "accuracy_at"),
         "multiclass": ("logloss", "accuracy", "auc", "brier")}


def extra_metrics(task: str, metric: str) -> list[str]:
    """Return the validation metrics shown after the second one: MAE (or RMSE when the chain is
    judged by MAE) for regression; Brier score and accuracy at the threshold for binary chains;
    the macro one-vs-rest AUC and the Brier score for multiclass chains."""
    return [name for name in SHOWN[task] if name not in (metric, SECONDARY[task])]


class FittedStageLike(Protocol):
    """What a row needs of a stage: a live chain's ``Stage`` and a chain file's ``FittedStage`` both have it."""

    @property
    def kind(self) -> str: ...

    @property
    def spec(self) -> StageSpec: ...

    @property
    def feature_index(self) -> tuple[int, ...]: ...

    @property
    def fit_seconds(self) -> float: ...

    @property
    def step(self) -> float: ...

    @property
    def step_rule(self) -> str: ...

    @property
    def oob_loss(self) -> tuple[float, float] | None: ...

    @property
    def oob_improvement(self) -> float: ...


@dataclass(frozen=True)
class StageRow:
    """One row of the stage table; row 0 (``index`` 0) is the start value.

    ``train`` and ``valid`` are the chain's own metric (NaN when a part has no rows); ``others``
    the other validation metrics in the table's order, the second one first; ``step`` the stage's
    step (its scale over its shrinkage) and ``step_rule`` how it was chosen; ``oob_improvement``
    the loss saved on the rows a subsampled stage left out; ``spread`` the standard error of the
    per-fold scores (k-fold only); ``test`` the test score once revealed.
    """

    index: int
    kind: str
    shrinkage: float | None
    features: str
    train: float
    valid: float
    change: float | None
    others: Mapping[str, float | None]
    seconds: float
    overfit: bool
    best: bool
    step: float | None = None
    step_rule: str = ""
    oob_improvement: float | None = None
    spread: float | None = None
    test: float | None = None

    @property
    def second(self) -> float | None:
        """Return the second validation metric (R² or AUC), or None when it is not a number."""
        return next(iter(self.others.values()), None)


@dataclass(frozen=True)
class StageTable:
    """The rows of a chain's stage table and what its columns are: the chain's ``metric``, the
    ``others`` metrics of every row (second first), and whether it has out-of-bag, fold and test
    columns."""

    task: str
    metric: str
    others: tuple[str, ...]
    kfold: bool
    tested: bool
    rows: tuple[StageRow, ...]
    oob: bool = False

    @property
    def second(self) -> str:
        """Return the name of the second validation metric (r2 or auc)."""
        return self.others[0]

    def columns(self) -> list[str]:
        """Return the DataFrame's column names, in order."""
        metric = self.metric
        names = ["stage", "kind", "shrinkage", "features", f"train_{metric}", f"valid_{metric}", "change",
                 *(f"valid_{name}" for name in self.others), "seconds", "overfit", "best", "step", "step_rule"]
        if self.oob:
            names.append("oob_improvement")
        if self.kfold:
            names.append("fold_spread")
        if self.tested:
            names.append(f"test_{metric}")
        return names

    def records(self) -> list[dict[str, Any]]:
        """Return one dict per row, keyed by ``columns()``; a cell that is None is NaN here."""
        out = []
        for row in self.rows:
            record: dict[str, Any] = {
                "stage": row.index, "kind": row.kind, "shrinkage": _nan(row.shrinkage), "features": row.features,
                f"train_{self.metric}": row.train, f"valid_{self.metric}": row.valid, "change": _nan(row.change),
                **{f"valid_{name}": _nan(row.others.get(name)) for name in self.others},
                "seconds": row.seconds, "overfit": row.overfit, "best": row.best, "step": _nan(row.step),
                "step_rule": row.step_rule,
            }
            if self.oob:
                record["oob_improvement"] = _nan(row.oob_improvement)
            if self.kfold:
                record["fold_spread"] = _nan(row.spread)
            if self.tested:
                record[f"test_{self.metric}"] = _nan(row.test)
            out.append(record)
        return out

    def frame(self) -> pd.DataFrame:
        """Return the table as a DataFrame: kind, shrinkage, features, scores, change, seconds, flags, the
        step and how it was chosen, and (with a subsample) the loss saved on the rows left out."""
        return pd.DataFrame(self.records(), columns=self.columns())


def build_rows(task: str, metric: str, stages: Sequence[FittedStageLike], scores: Sequence[Scores],
               n_features: int, *, kfold: bool, tested: bool) -> StageTable:
    """Return the stage table of ``stages`` with ``scores`` (one more than stages: the start value first)."""
    others = (SECONDARY[task], *extra_metrics(task, metric))
    oob = any(stage.oob_loss is not None for stage in stages)
    flags = scoring.overfit_flags(metric, list(scores))
    best = scoring.best_row(metric, list(scores))
    rows = []
    for i, s in enumerate(scores):
        stage = stages[i - 1] if i else None
        valid = _value(s.valid, metric)
        rows.append(StageRow(
            index=i, kind=stage.kind if stage else "start", shrinkage=stage.spec.shrinkage if stage else None,
            features=_features(stage, n_features), train=_value(s.train, metric), valid=valid,
            change=_number(valid - _value(scores[i - 1].valid, metric)) if i else None,
            others={name: _number(s.valid.get(name)) for name in others},
            seconds=stage.fit_seconds if stage else 0.0, overfit=flags[i], best=i == best,
            step=_number(stage.step) if stage else None, step_rule=stage.step_rule if stage else "",
            oob_improvement=_number(stage.oob_improvement) if stage and oob else None,
            spread=_number(fold_spread(s.fold_valid)) if kfold else None,
            test=_number(s.test.get(metric)) if tested else None,
        ))
    return StageTable(task, metric, others, kfold, tested, tuple(rows), oob)


def stage_rows(chain: Chain) -> StageTable:
    """Return the stage table of a live chain; call it where no other thread changes the chain
    (``Chain.table()`` holds the chain's lock around it)."""
    return build_rows(chain.task, chain.metric, chain.stages, chain.scores(), len(chain.schema.columns),
                      kfold=chain.layout.is_kfold, tested=chain.test_revealed)


def fitted_rows(fitted: FittedChain) -> StageTable:
    """Return the stage table of a loaded chain file, from the scores its manifest stored."""
    scores = [_scores(fitted.start_scores), *(_scores(stage.scores) for stage in fitted.stages)]
    kfold = dict(fitted.meta.get("validation") or {}).get("scheme") == "kfold"
    return build_rows(fitted.task, fitted.loss.primary, fitted.stages, scores, len(fitted.schema.columns),
                      kfold=kfold, tested=any(s.test for s in scores))


def stage_table(chain: Chain) -> pd.DataFrame:
    """Return the chain's stage table as a DataFrame: kind, shrinkage, features, scores, change,
    seconds, flags, the step and how it was chosen, and (with a subsample) the loss saved on the
    rows left out."""
    return stage_rows(chain).frame()


def _scores(data: Mapping[str, Any]) -> Scores:
    return Scores(dict(data.get("train", {})), dict(data.get("valid", {})), tuple(data.get("fold_valid", ())),
                  dict(data.get("test", {})))


def _value(scores: Mapping[str, Any], name: str) -> float:
    value = scores.get(name)
    return math.nan if value is None else float(value)


def _number(value: Any) -> float | None:
    """Return ``value`` as a float, or None when it is missing or not a number."""
    if value is None:
        return None
    number = float(value)
    return None if math.isnan(number) else number


def _nan(value: float | None) -> float:
    return math.nan if value is None else value


def _features(stage: FittedStageLike | None, n_features: int) -> str:
    if stage is None:
        return ""
    if not stage.spec.features or len(stage.feature_index) == n_features:
        return "all"
    return ",".join(stage.spec.features)
