"""One converter per stage kind: a fitted stage's learner as a graph from the schema's columns to its output.

A converter gets the stage and the ``StageInputs`` (the graph, the schema's columns) and returns a
``StageGraph``: the name of its output before the stage's scale, a double tensor of shape [N]
for one output per row (regression and binary chains) or [N, K] for K (multiclass), and the
precision it computes in. Adding a kind is one function registered with ``@converts("kind")``;
a multiclass kind returns its K columns, and a
kind on a log link (``glm``) returns its linear predictor, the head applying the inverse link
(``compose.py``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ...errors import ExportError
from ...kinds import SKLEARN_PREFIX
from ...predictor import FittedStage
from .builder import GraphBuilder
from .columns import SchemaColumns
from .designs import linear_design, linear_output, spline_design
from .neighbours import neighbours_output
from .sklearn_stage import BOOSTING_CLASSES, FOREST_CLASSES, TREE_CLASSES, estimator_graph
from .trees import AVERAGE, SUM, lightgbm_trees, sklearn_tree, tree_ensemble

FLOAT64 = "float64"
FLOAT32 = "float32"


@dataclass(frozen=True)
class StageInputs:
    """What a converter builds from: the graph, the schema's columns, and the stage's place in the chain."""

    builder: GraphBuilder
    columns: SchemaColumns
    number: int
    #: K, the raw scores a row has (the class count of a multiclass chain, else 1)
    outputs: int = 1

    def where(self, stage: FittedStage) -> str:
        """Return the stage as errors name it: ``stage 3 (forest)``."""
        return f"stage {self.number} ({stage.kind})"


@dataclass(frozen=True)
class StageGraph:
    """A stage's output in the graph ([N], or [N, K] with K outputs per row; before the stage's scale)
    and its precision."""

    output: str
    precision: str = FLOAT64
    note: str = ""


Converter = Callable[[FittedStage, StageInputs], StageGraph]
CONVERTERS: dict[str, Converter] = {}
#: kinds whose converter returns one output per row only: refused for a multiclass chain
ONE_OUTPUT_ONLY = {"knn", SKLEARN_PREFIX}


def converts(*kinds: str) -> Callable[[Converter], Converter]:
    """Register the decorated function as the converter of ``kinds``."""
    def register(function: Converter) -> Converter:
        for kind in kinds:
            CONVERTERS[kind] = function
        return function
    return register


def convert_stage(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    """Return the graph of ``stage``; raise ExportError when its kind has no converter."""
    kind = SKLEARN_PREFIX if stage.kind.startswith(SKLEARN_PREFIX) else stage.kind
    if kind not in CONVERTERS:
        known = ", ".join(sorted(CONVERTERS))
        raise ExportError(f"{inputs.where(stage)}: kind {stage.kind!r} has no ONNX converter "
                          f"(kinds that convert: {known})")
    if inputs.outputs > 1 and kind in ONE_OUTPUT_ONLY:
        raise ExportError(f"{inputs.where(stage)}: a multiclass stage of kind {stage.kind!r} cannot be exported "
                          f"to ONNX (multiclass kinds that convert: "
                          f"{', '.join(sorted(set(CONVERTERS) - ONE_OUTPUT_ONLY))})")
    return CONVERTERS[kind](stage, inputs)


@converts("mean")
def _mean(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    first = inputs.columns.column(stage.feature_index[0]) if stage.feature_index else inputs.columns.column(0)
    return StageGraph(linear_output(inputs.builder, None, np.zeros(0), stage.learner.value, first))


@converts("linear", "ridge", "lasso", "logistic", "glm")
def _linear(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    model = stage.learner
    columns = inputs.columns.columns(stage.feature_index)
    design = linear_design(inputs.builder, columns, model.design)
    return StageGraph(linear_output(inputs.builder, design, model.coef, model.intercept, columns[0]))


@converts("spline")
def _spline(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    model = stage.learner
    columns = inputs.columns.columns(stage.feature_index)
    design = spline_design(inputs.builder, columns, model.design)
    return StageGraph(linear_output(inputs.builder, design, model.coef, model.intercept, columns[0]))


@converts("tree")
def _tree(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    matrix = inputs.columns.matrix(stage.feature_index, float32=True)
    if inputs.outputs > 1:  # one tree per class (kinds.per_class), class k's leaves adding to output k
        trees = [sklearn_tree(learner.tree_, target=k) for k, learner in enumerate(stage.learner.learners)]
        return StageGraph(tree_ensemble(inputs.builder, matrix, trees, n_targets=inputs.outputs))
    return StageGraph(tree_ensemble(inputs.builder, matrix, [sklearn_tree(stage.learner.tree_)]))


@converts("forest", "extra_trees")
def _forest(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    matrix = inputs.columns.matrix(stage.feature_index, float32=True)
    members = stage.learner.estimators_
    if inputs.outputs > 1:
        # one multi-output forest: each member once per class; the sum over members, then divided by
        # their count, as scikit-learn's forest averages
        trees = [sklearn_tree(member.tree_, output=k, target=k) for member in members
                 for k in range(inputs.outputs)]
        summed = tree_ensemble(inputs.builder, matrix, trees, n_targets=inputs.outputs)
        count = inputs.builder.constant([float(len(members))], "members")
        return StageGraph(inputs.builder.op("Div", [summed, count], "forest"))
    trees = [sklearn_tree(member.tree_) for member in members]
    return StageGraph(tree_ensemble(inputs.builder, matrix, trees, aggregate=AVERAGE))


@converts("lightgbm", "hist_tree")
def _booster(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    try:
        trees, per_iteration, average = lightgbm_trees(stage.learner.booster)
    except ExportError as exc:
        raise ExportError(f"{inputs.where(stage)}: {exc}") from None
    matrix = inputs.columns.matrix(stage.feature_index)
    output = tree_ensemble(inputs.builder, matrix, trees, n_targets=per_iteration,
                           aggregate=AVERAGE if average else SUM)
    return StageGraph(output)


@converts("knn")
def _knn(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    model = stage.learner
    design = linear_design(inputs.builder, inputs.columns.columns(stage.feature_index), model.design)
    if design is None:
        raise ExportError("a k-NN stage with no design column cannot be exported")
    params = model.params
    output = neighbours_output(inputs.builder, design, model.matrix, model.target, int(params["n_neighbors"]),
                               float(params["p"]), str(params["weights"]))
    return StageGraph(output)


@converts(SKLEARN_PREFIX)
def _sklearn(stage: FittedStage, inputs: StageInputs) -> StageGraph:
    model = stage.learner
    estimator = model.estimator
    design = linear_design(inputs.builder, inputs.columns.columns(stage.feature_index), model.design)
    if design is None:
        raise ExportError(f"{inputs.where(stage)}: its design has no column")
    name = type(estimator).__name__
    if name in TREE_CLASSES + FOREST_CLASSES + BOOSTING_CLASSES and type(estimator).__module__.startswith("sklearn."):
        return StageGraph(_sklearn_trees(inputs, design, estimator, inputs.where(stage)))
    converted = estimator_graph(inputs.builder, design, model.design.width, estimator, inputs.where(stage))
    return StageGraph(converted.output, converted.precision, converted.note)


def _sklearn_trees(inputs: StageInputs, design: str, estimator: Any, where: str) -> str:
    """Return a scikit-learn tree, forest or gradient boosting regressor as one TreeEnsemble on ``design``."""
    builder = inputs.builder
    rounded = _float32(builder, design)
    name = type(estimator).__name__
    if name in TREE_CLASSES:
        return tree_ensemble(builder, rounded, [sklearn_tree(estimator.tree_)])
    if name in FOREST_CLASSES:
        trees = [sklearn_tree(member.tree_) for member in estimator.estimators_]
        return tree_ensemble(builder, rounded, trees, aggregate=AVERAGE)
    # gradient boosting: the initial constant plus learning_rate times each tree's leaf
    start = estimator.init_
    if isinstance(start, str) and start == "zero":
        base = 0.0
    elif type(start).__name__ == "DummyRegressor":
        base = float(np.asarray(start.constant_, dtype=np.float64).ravel()[0])
    else:
        raise ExportError(f"{where}: a gradient boosting regressor with init={type(start).__name__} cannot be exported")
    rate = float(estimator.learning_rate)
    trees = [sklearn_tree(member.tree_, rate) for member in estimator.estimators_[:, 0]]
    summed = tree_ensemble(builder, rounded, trees)
    return builder.op("Add", [builder.constant([base], "init"), summed], "boosted")  # [N]


def _float32(builder: GraphBuilder, matrix: str) -> str:
    """Return ``matrix`` rounded to float32 and back, as scikit-learn's trees read their input."""
    from onnx import TensorProto

    single = builder.op("Cast", [matrix], "as_float32", to=TensorProto.FLOAT)
    return builder.op("Cast", [single], "rounded", to=TensorProto.DOUBLE)
