"""How a stage's step is chosen: from rows its learner did not fit on, whenever it could interpolate them.

A stage adds ``shrinkage * step * h(x)`` to the chain. The step comes from one of five sources,
which the kind names (``StageKind.step_source``):

- ``FITS_LOSS``: the learner fits the loss itself from the chain's offset (lightgbm, hist_tree,
  logistic); no step.
- ``LEAVES``: tree kinds set each leaf to the loss's optimal value on its rows (Newton step for
  log loss, median for absolute loss, Huber's step); no step beyond that.
- ``IN_SAMPLE``: linear kinds, which cannot interpolate their fitting rows: no step on squared
  loss (least squares already is the step), otherwise a line search on the fitting rows.
- ``OUT_OF_BAG``: bagged kinds (forest, extra_trees with bootstrap): a line search on each
  row's prediction by the trees that did not see it.
- ``CROSS_FIT``: every other learner (knn, spline, sklearn:, extra_trees without bootstrap):
  the fitting rows are cut into CROSS_FIT_FOLDS folds, drawn from the chain's random stream so
  a refit draws the same folds; the learner is refit on all folds but one and predicts that one,
  and the line search runs on these out-of-fold predictions. The stage itself is the learner fit
  on every fitting row.

Every line search is the loss's own (``Loss.line_search``), on arrays of rows with the rows'
weights. A multiclass stage's K outputs share one step: the loss is searched along all of them
at once.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import StageSpecError

FITS_LOSS = "fits the loss"
LEAVES = "leaves"
IN_SAMPLE = "in-sample"
OUT_OF_BAG = "out-of-bag"
CROSS_FIT = "cross-fit"

#: folds of the fitting rows a cross-fit step uses
CROSS_FIT_FOLDS = 5


@dataclass(frozen=True)
class StepChoice:
    """The step of one stage on one track, and how it was chosen (the rule the details show)."""

    step: float
    rule: str


def fold_assignment(n_rows: int, folds: int, random_state: np.random.RandomState) -> np.ndarray:
    """Return the fold (0 to folds - 1) of each of ``n_rows`` rows: a random permutation dealt round-robin."""
    assignment = np.empty(n_rows, dtype=np.int64)
    assignment[random_state.permutation(n_rows)] = np.arange(n_rows) % folds
    return assignment


def cross_fit_predictions(kind: Any, params: dict[str, Any], request: Any, folds: int = CROSS_FIT_FOLDS,
                          progress: Any = None) -> np.ndarray:
    """Return each fitting row's prediction by the learner fit on the other folds.

    Raise StageSpecError when a fold is too small for the learner (e.g. fewer rows than k-NN's k).
    """
    assignment = fold_assignment(len(request.y), folds, request.random_state)
    held = np.empty(request.residual.shape, dtype=np.float64)
    for fold in range(folds):
        request.check_cancel()
        if progress is not None:
            progress(fold / folds, f"cross-fit fold {fold + 1}/{folds}")
        out = assignment == fold
        learner = kind.fit(request.subset(~out), params)
        if kind.refines_leaves:
            kind.refine(learner, request.subset(~out))
        held[out] = np.asarray(learner.predict(request.X[out]), dtype=np.float64)
    return held


def cross_fit_step(kind: Any, params: dict[str, Any], request: Any, progress: Any = None) -> StepChoice:
    """Return the line-search step on out-of-fold predictions, or step 1 when the rows are too few to cut."""
    folds = CROSS_FIT_FOLDS
    if len(request.y) < 2 * folds:
        return StepChoice(1.0, "none (too few rows to cross-fit)")
    try:
        held = cross_fit_predictions(kind, params, request, folds, progress)
    except StageSpecError:
        return StepChoice(1.0, "none (folds too small for the learner)")
    return StepChoice(request.loss.line_search(request.y, request.raw, held, request.weight), f"cross-fit {folds} folds")


def choose_step(kind: Any, params: dict[str, Any], request: Any, learner: Any, fitted_output: np.ndarray,
                progress: Any = None) -> StepChoice:
    """Return the step of a fitted stage and the rule that chose it.

    ``fitted_output`` is the learner's output on the fitting rows (used only where the learner
    cannot interpolate them).
    """
    loss = request.loss
    source = kind.step_source(params)
    if source == FITS_LOSS:
        return StepChoice(1.0, "none (fits the loss)")
    if source == LEAVES:
        return StepChoice(1.0, kind.leaf_rule(loss))
    if source == IN_SAMPLE:
        if loss.name == "squared":
            return StepChoice(1.0, "none (least squares)")
        return StepChoice(loss.line_search(request.y, request.raw, fitted_output, request.weight),
                          "line search on fitting rows")
    if source == OUT_OF_BAG:
        held, has = kind.out_of_bag(learner, request)
        if not has.any():
            return StepChoice(1.0, "none (no out-of-bag rows)")
        weight = None if request.weight is None else request.weight[has]
        return StepChoice(loss.line_search(request.y[has], request.raw[has], held[has], weight), "out-of-bag")
    return cross_fit_step(kind, params, request, progress)


def step_of(scale: float, shrinkage: float) -> float:
    """Return the step inside a stage's scale (shrinkage times step); NaN when the shrinkage is 0."""
    return scale / shrinkage if shrinkage else float("nan")
