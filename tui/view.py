"""What the panes show: a read-only snapshot of a chain, taken after each completed action.

The engine holds its chain's lock for the whole of a fit, so the screen never reads the live
chain: a worker takes a ``ChainView`` when its job is done and posts it. Residuals of any
stage are computed from the snapshot's cached outputs (immutable arrays), so moving through
the table during a fit never waits for the fit. A chain file opened read-only gives a view
without residuals, built from the scores stored in the file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from stages import scoring
from stages.kinds import get_kind
from stages.losses import Loss
from stages.outputs import squeeze
from stages.report.table import StageRow, fitted_rows, stage_rows
from stages.schema import Task
from stages.tracks import Layout
from stages.validation import Part

if TYPE_CHECKING:
    from stages.chain import Chain
    from stages.predictor import FittedChain, FittedStage
    from stages.schema import ColumnInfo


__all__ = ["ChainView", "ImportanceCache", "ResidualSource", "StageInfo", "StageRow", "view_of_chain",
           "view_of_fitted"]


@dataclass(frozen=True)
class StageInfo:
    """What the details pane says about one stage."""

    index: int
    kind: str
    shrinkage: float
    given: dict[str, Any]
    params: dict[str, Any]
    features: tuple[str, ...]
    all_features: bool
    seconds: float
    importance: dict[str, float] | None
    step: float = float("nan")
    step_rule: str = ""
    notes: tuple[str, ...] = ()
    importance_type: str = ""


@dataclass(frozen=True, eq=False)
class ResidualSource:
    """The targets and each row's cached raw outputs: enough to compute any stage's residuals."""

    y: np.ndarray
    layout: Layout
    loss: Loss
    outputs: tuple[tuple[np.ndarray, ...], ...]

    def residuals(self, part: Part, row: int) -> np.ndarray:
        """Return target minus prediction on ``part`` (train or valid) after row ``row`` (for a multiclass
        chain, 1 - p of each row's own class: ``scoring.shown_residual``)."""
        return scoring.shown_residual(self.loss, self.targets(part), self.raw(part, row))

    def class_residuals(self, part: Part, row: int, k: int) -> np.ndarray:
        """Return class ``k``'s pseudo-residuals 1[y = k] - p_k on ``part`` after row ``row`` (multiclass)."""
        return self.loss.display_residual(self.targets(part), self.raw(part, row))[:, k]

    def true_probability(self, part: Part, row: int) -> np.ndarray:
        """Return the predicted probability of each row's own class on ``part`` after row ``row``
        (multiclass; for binary chains, of the positive class where y is 1 and the negative where 0)."""
        y = np.asarray(self.targets(part), dtype=np.intp)
        p = self.loss.link(self.raw(part, row))
        if p.ndim == 2 and p.shape[1] > 1:
            return p[np.arange(len(y)), y]
        p = p.reshape(-1)
        return np.where(y == 1, p, 1.0 - p)

    def fitted(self, part: Part, row: int) -> np.ndarray:
        """Return the predictions (probabilities for binary chains) on ``part`` after row ``row``."""
        return squeeze(self.loss.link(self.raw(part, row)))

    def raw(self, part: Part, row: int) -> np.ndarray:
        """Return the raw output on ``part`` after row ``row``, in the order of ``targets``."""
        outputs = self.outputs[row]
        if part == "train":
            return outputs[0][self.layout.train]
        return scoring.validation_raw(self.layout, outputs)

    def targets(self, part: Part) -> np.ndarray:
        """Return the targets of ``part`` (train or valid)."""
        if part == "train":
            return self.y[self.layout.train]
        return scoring.validation_y(self.layout, self.y)


@dataclass(frozen=True, eq=False)
class ChainView:
    """A snapshot of a chain: its table rows, stage details, settings and residual source."""

    source: str
    target: str
    task: Task
    loss: str
    metric: str
    second: str
    validation: str
    sizes: str
    start_value: float
    rows: tuple[StageRow, ...]
    stages: tuple[StageInfo, ...]
    features: tuple[str, ...]
    notes: tuple[str, ...] = ()
    classes: tuple[str, ...] = ()
    has_test: bool = False
    n_test: int = 0
    test_revealed: bool = False
    reveals: int = 0
    can_undo: bool = False
    kfold: bool = False
    residuals: ResidualSource | None = None
    read_only: bool = False
    data_path: str | None = None
    extra: dict[str, Any] = field(default_factory=dict)
    #: the chain's stage objects when the snapshot was taken (they name the chain state in questions)
    stage_objects: tuple[Any, ...] = ()
    id_column: str = ""
    n_rows: int = 0

    @property
    def n_stages(self) -> int:
        """Return the number of stages (rows minus the start value)."""
        return len(self.rows) - 1

    @property
    def best(self) -> int:
        """Return the row with the best validation score."""
        return next((r.index for r in self.rows if r.best), 0)

    def stage(self, row: int) -> StageInfo | None:
        """Return the details of row ``row``, or None for the start value."""
        return self.stages[row - 1] if 1 <= row <= len(self.stages) else None


class ImportanceCache:
    """Feature importance per fitted stage and what it measures, computed once (stage objects never change)."""

    def __init__(self) -> None:
        self._values: dict[Any, tuple[dict[str, float], str]] = {}

    def get(self, chain: Chain, row: int) -> dict[str, float]:
        """Return the importance of stage ``row`` of ``chain``, computing it on first use."""
        return self.entry(chain, row)[0]

    def entry(self, chain: Chain, row: int) -> tuple[dict[str, float], str]:
        """Return the importance of stage ``row`` of ``chain`` and what it measures (``importance_type``)."""
        from stages.understand.importance import importance_type

        stage = chain.stages[row - 1]
        if stage not in self._values:
            columns = chain.schema.subset(list(stage.feature_index))
            self._values[stage] = (chain.importance(row), importance_type(stage.kind, stage.learners[0], columns))
        return self._values[stage]


def _sizes(rows: dict[str, int], kfold: str = "", revealed: bool = False, live: bool = False) -> str:
    text = f"{rows.get('train', 0):,} train · {rows.get('valid', 0):,} valid"
    if kfold:
        text = f"{rows.get('train', 0):,} train, scored out of fold"
    if rows.get("test"):
        text += f" · {rows['test']:,} test {'revealed' if revealed else 'locked'}"
        if live and not revealed:
            text += " (r reveals it)"
    return text


def view_of_chain(chain: Chain, cache: ImportanceCache) -> ChainView:
    """Return a snapshot of a live chain; call it only from the thread doing the chain's work."""
    table = stage_rows(chain)
    names = chain.schema.names
    infos = []
    stages = chain.stages
    for i, stage in enumerate(stages, start=1):
        features = tuple(names[j] for j in stage.feature_index)
        importance, measured = cache.entry(chain, i)
        infos.append(StageInfo(
            index=i, kind=stage.kind, shrinkage=stage.spec.shrinkage, given=dict(stage.spec.params),
            params=dict(stage.params), features=features, all_features=len(features) == len(names),
            seconds=stage.fit_seconds, importance=importance, importance_type=measured, step=stage.step,
            step_rule=stage.step_rule, notes=tuple(stage.notes),
        ))
    described = chain.describe()
    layout = chain.layout
    kfold = f"{len(layout.tracks) - 1} folds" if layout.is_kfold else ""
    source = ResidualSource(chain.y, layout, chain.loss,
                            tuple(chain.outputs(r) for r in range(len(chain.stages) + 1)))
    return ChainView(
        source=chain.source, target=chain.schema.target, task=chain.task, loss=chain.loss.name,
        metric=table.metric, second=table.second, validation=chain.validation.describe(),
        sizes=_sizes(described["rows"], kfold, chain.test_revealed, live=True), start_value=float(chain.starts[0][0]),
        rows=table.rows, stages=tuple(infos), features=tuple(names),
        notes=tuple(chain.notes), classes=tuple(chain.schema.classes), has_test=layout.n_test > 0,
        n_test=layout.n_test,
        test_revealed=chain.test_revealed, reveals=chain.reveal_count, can_undo=chain.can_undo(),
        kfold=layout.is_kfold,
        residuals=source, data_path=chain.data_path, stage_objects=tuple(stages), id_column=chain.schema.id_column,
        n_rows=int(sum(described["rows"].values())),
    )


def _stored_importance(stage: FittedStage, columns: tuple[ColumnInfo, ...]) -> tuple[dict[str, float] | None, str]:
    from stages.understand.importance import importance_type

    try:
        values = get_kind(stage.kind).importance(stage.learner, columns)
        measured = importance_type(stage.kind, stage.learner, columns) if values is not None else ""
    except Exception:  # an importance the learner cannot give is simply not shown
        return None, ""
    if values is None:
        return None, ""
    values = np.asarray(values, dtype=np.float64)
    total = float(values.sum())
    if total > 0:
        values = values / total
    return {c.name: float(v) for c, v in zip(columns, values, strict=False)}, measured


def view_of_fitted(fitted: FittedChain, name: str) -> ChainView:
    """Return a read-only view of a loaded chain file, from the scores stored in it."""
    from stages.validation import describe_stored

    table = fitted_rows(fitted)
    meta = dict(fitted.meta or {})
    validation = describe_stored(meta.get("validation")) or "validation as stored"  # an older or foreign file
    kfold = dict(meta.get("validation") or {}).get("scheme") == "kfold"
    names = fitted.schema.names
    infos = []
    for i, stage in enumerate(fitted.stages, start=1):
        columns = fitted.schema.subset(list(stage.feature_index))
        features = tuple(c.name for c in columns)
        importance, measured = _stored_importance(stage, columns)
        infos.append(StageInfo(
            index=i, kind=stage.kind, shrinkage=stage.spec.shrinkage, given=dict(stage.spec.params),
            params=dict(stage.params), features=features, all_features=len(features) == len(names),
            seconds=stage.fit_seconds, importance=importance, importance_type=measured, step=stage.step,
            step_rule=stage.step_rule, notes=tuple(stage.notes),
        ))
    # a read-only view shows everything the file holds: the test scores, when it was revealed
    revealed = bool(meta.get("test_revealed")) or any(r.test is not None for r in table.rows)
    return ChainView(
        source=name, target=fitted.schema.target, task=fitted.task, loss=fitted.loss.name, metric=table.metric,
        second=table.second, validation=validation,
        sizes=_sizes(dict(meta.get("rows", {})), "folds" if kfold else "", revealed),
        start_value=float(fitted.start[0]), rows=table.rows, stages=tuple(infos),
        features=tuple(names), classes=tuple(fitted.schema.classes), read_only=True, kfold=kfold,
        test_revealed=revealed, has_test=bool((meta.get("rows") or {}).get("test")),
        reveals=int(meta.get("test_reveals") or 0), extra={"data": meta.get("source", "")},
        id_column=fitted.schema.id_column,
    )
