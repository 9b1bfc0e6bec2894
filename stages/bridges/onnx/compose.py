"""The whole chain as one graph: the schema's inputs, every stage, the raw score, the inverse link.

The raw score is computed as ``FittedChain.raw_from_matrix`` computes it: the start value on
every row, then ``raw + scale * output`` for each stage in turn (the same float64 operations in
the same order). A ``Head`` turns the raw score into the model's outputs:

- ``RegressionHead`` (squared, absolute, huber): ``prediction`` is the raw score;
- ``BinaryHead`` (logloss): ``probability`` is the logistic of the raw score and ``prediction``
  the positive class where it is at least the chain's threshold, else the negative class;
- ``MulticlassHead`` (multinomial log loss): the raw score has K columns (the start value is a
  K-vector on every row, and every stage's converter returns [N, K]); ``probability`` is their
  ``Softmax`` per row, [N, K] in the chain's stored class order (``fitted.classes``), and
  ``prediction`` the class at the ``ArgMax`` of the probabilities (the first of tied ones, as
  numpy's argmax in ``predict``).

- ``LogLinkHead`` (poisson, gamma, tweedie; the ``glm`` kind's converter returns its linear
  predictor like any other stage): ``prediction`` is ``Exp(Min(raw, 700))``, the mean per unit of
  exposure, as ``predict`` computes it (``loglink.RAW_CEILING``). A chain fit with an exposure
  column declares one more double input named as that column, and ``prediction`` is the mean
  times it: each row's expected total, as ``predict(frame, exposure=column)`` gives it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ...errors import ExportError
from ...loglink import RAW_CEILING, is_log_link
from ...predictor import FittedChain, class_label
from .builder import ML, ML_OPSET, GraphBuilder
from .columns import SchemaColumns
from .converters import FLOAT32, FLOAT64, StageGraph, StageInputs, convert_stage

REGRESSION_LOSSES = ("squared", "absolute", "huber")
BINARY_LOSSES = ("logloss",)


@dataclass(frozen=True)
class Output:
    """One output of the model: its name, and what its values are."""

    name: str
    about: str


class Head:
    """Turns the raw score into the model's outputs; subclasses say which."""

    outputs: tuple[Output, ...] = ()
    #: the inputs the head declares besides the features
    inputs: tuple[str, ...] = ()

    def add_inputs(self, builder: GraphBuilder) -> None:
        """Declare any input the head needs besides the features (none here)."""

    def offset(self, builder: GraphBuilder, raw: str) -> str:
        """Return the raw score with the head's offset added (none here)."""
        return raw

    def finish(self, builder: GraphBuilder, raw: str) -> None:
        """Add the model's outputs computed from the raw score ([N]; [N, K] for K outputs per row)."""
        raise NotImplementedError


class RegressionHead(Head):
    """``prediction``: the raw score itself (an identity link)."""

    outputs = (Output("prediction", "the predicted value"),)

    def finish(self, builder: GraphBuilder, raw: str) -> None:
        """Output the raw score as ``prediction``, [N] doubles."""
        from onnx import TensorProto

        builder.add_output(raw, "prediction", TensorProto.DOUBLE, ["N"])


class BinaryHead(Head):
    """``probability`` (of the positive class) and ``prediction`` (the class at the chain's threshold)."""

    outputs = (Output("prediction", "the predicted class"), Output("probability", "the positive class's probability"))

    def __init__(self, classes: tuple[str, ...], threshold: float) -> None:
        self.classes = classes
        self.threshold = threshold

    def finish(self, builder: GraphBuilder, raw: str) -> None:
        """Output ``prediction`` (the class label, typed as ``predict`` returns it) and ``probability``."""
        from onnx import TensorProto

        probability = builder.op("Sigmoid", [raw], "probability")
        positive = builder.op("GreaterOrEqual", [probability, builder.constant([self.threshold], "threshold")])
        labels, elem_type = label_constants(self.classes)
        negative_label = builder.constant(labels[:1], "negative_class", labels.dtype)
        positive_label = builder.constant(labels[1:], "positive_class", labels.dtype)
        label = builder.op("Where", [positive, positive_label, negative_label], "label")
        builder.add_output(label, "prediction", elem_type, ["N"])
        builder.add_output(probability, "probability", TensorProto.DOUBLE, ["N"])


class MulticlassHead(Head):
    """``probability`` ([N, K], the softmax of the K raw scores) and ``prediction`` (the most probable class)."""

    outputs = (Output("prediction", "the predicted class"),
               Output("probability", "each class's probability, in the chain's class order"))

    def __init__(self, classes: tuple[str, ...]) -> None:
        self.classes = classes

    def finish(self, builder: GraphBuilder, raw: str) -> None:
        """Output ``prediction`` (the class label, typed as ``predict`` returns it) and ``probability``."""
        from onnx import TensorProto

        probability = builder.op("Softmax", [raw], "probability", axis=1)
        best = builder.op("ArgMax", [probability], "most_probable", axis=1, keepdims=0)
        labels, elem_type = label_constants(self.classes)
        label = builder.op("Gather", [builder.constant(labels, "classes", labels.dtype), best], "label", axis=0)
        builder.add_output(label, "prediction", elem_type, ["N"])
        builder.add_output(probability, "probability", TensorProto.DOUBLE, ["N", len(self.classes)])


class LogLinkHead(Head):
    """``prediction``: the mean per unit of exposure, exp of the raw score; with an exposure input,
    times it (each row's expected total)."""

    def __init__(self, exposure: str | None) -> None:
        self.exposure = exposure
        self.inputs = (exposure,) if exposure else ()
        about = ("each row's expected total: the mean per unit of exposure times the exposure input" if exposure
                 else "the mean per unit of exposure")
        self.outputs = (Output("prediction", about),)

    def add_inputs(self, builder: GraphBuilder) -> None:
        """Declare the exposure, [N] doubles, when the chain was fit with an exposure column."""
        from onnx import TensorProto

        if self.exposure:
            builder.add_input(self.exposure, TensorProto.DOUBLE, ["N"])

    def finish(self, builder: GraphBuilder, raw: str) -> None:
        """Output ``prediction``, [N] doubles: exp of the raw score kept below the ceiling ``predict`` keeps it
        below, times the exposure when there is one."""
        from onnx import TensorProto

        capped = builder.op("Min", [raw, builder.constant([RAW_CEILING], "raw_ceiling")], "capped")
        mean = builder.op("Exp", [capped], "mean")
        if self.exposure:
            mean = builder.op("Mul", [mean, self.exposure], "expected")
        builder.add_output(mean, "prediction", TensorProto.DOUBLE, ["N"])


def label_constants(classes: tuple[str, ...]) -> tuple[np.ndarray, int]:
    """Return the class labels as ``predict`` gives them (whole numbers, other numbers, or text),
    as an array, and the ONNX element type that holds them."""
    from onnx import TensorProto

    labels = [class_label(text) for text in classes]
    if all(isinstance(label, int) for label in labels):
        return np.asarray(labels, dtype=np.int64), TensorProto.INT64
    if all(isinstance(label, int | float) for label in labels):
        return np.asarray(labels, dtype=np.float64), TensorProto.DOUBLE
    return np.asarray([str(label) for label in labels], dtype=object), TensorProto.STRING


def head_for(fitted: FittedChain) -> Head:
    """Return the head of ``fitted``'s task and loss; raise ExportError for one not exported yet."""
    loss = fitted.loss.name
    if fitted.task == "regression" and loss in REGRESSION_LOSSES:
        return RegressionHead()
    if fitted.task == "binary" and loss in BINARY_LOSSES and len(fitted.schema.classes) == 2:
        return BinaryHead(fitted.schema.classes, fitted.threshold)
    if fitted.task == "multiclass" and loss in BINARY_LOSSES and fitted.outputs == len(fitted.schema.classes):
        return MulticlassHead(fitted.schema.classes)
    if fitted.task == "regression" and is_log_link(fitted.loss) and fitted.outputs == 1:
        return LogLinkHead(fitted.exposure_column)
    raise ExportError(f"a {fitted.task} chain with loss {loss!r} cannot be exported to ONNX yet "
                      f"(exported: regression with {', '.join(REGRESSION_LOSSES)} and the log-link losses; "
                      "binary and multiclass with logloss)")


@dataclass
class ChainGraph:
    """The composed model and what each stage became."""

    model: Any
    stages: list[StageGraph] = field(default_factory=list)

    @property
    def precision(self) -> str:
        """Return float32 when any stage computes in float32, else float64."""
        return FLOAT32 if any(s.precision == FLOAT32 for s in self.stages) else FLOAT64


def chain_graph(fitted: FittedChain, *, each_stage: bool = False) -> ChainGraph:
    """Return the ONNX model of the whole chain; with ``each_stage``, also outputs ``after_k`` (the
    raw score after stage k) for finding the stage where a difference starts.

    Raise ExportError when a stage does not convert or a feature's name is one of the outputs'.
    """
    head = head_for(fitted)
    names = fitted.schema.names
    taken = sorted({o.name for o in head.outputs} & set(names))
    if taken:
        raise ExportError(f"feature {taken[0]!r} has the name of an output of the model; rename the column")
    clash = sorted(set(head.inputs) & ({o.name for o in head.outputs} | set(names)))
    if clash:
        raise ExportError(f"exposure column {clash[0]!r} has the name of a feature or an output of the model; "
                          "rename the column")
    outputs = [o.name for o in head.outputs] + [f"after_{k}" for k in range(1, len(fitted.stages) + 1) if each_stage]
    if each_stage and set(outputs) & set(names):
        raise ExportError("a feature has the name of a stage's diagnostic output")
    builder = GraphBuilder(outputs)
    columns = SchemaColumns(builder, fitted.schema)
    head.add_inputs(builder)
    outputs_per_row = fitted.outputs
    raw = head.offset(builder, _start(builder, names[0], np.asarray(fitted.start, dtype=np.float64)))
    shape: list[str | int] = ["N"] if outputs_per_row == 1 else ["N", outputs_per_row]
    found = []
    for number, stage in enumerate(fitted.stages, start=1):
        graph = convert_stage(stage, StageInputs(builder, columns, number, outputs_per_row))
        found.append(graph)
        scaled = builder.op("Mul", [graph.output, builder.constant([stage.scale], "scale")], f"stage_{number}")
        raw = builder.op("Add", [raw, scaled], "raw")
        if each_stage:
            from onnx import TensorProto

            builder.add_output(raw, f"after_{number}", TensorProto.DOUBLE, shape)
    if builder.retired and builder.domains.get(ML, 0) >= ML_OPSET:
        where, operator = builder.retired[0]
        raise ExportError(f"{where}: skl2onnx writes it with {operator}, which ai.onnx.ml opset {ML_OPSET} "
                          "retired, and the chain's tree stages need that opset: the two cannot be in one model")
    head.finish(builder, raw)
    metadata = {"remnant_task": fitted.task, "remnant_loss": fitted.loss.name,
                "remnant_stages": ", ".join(s.kind for s in fitted.stages)}
    if head.inputs:
        metadata["remnant_exposure"] = head.inputs[0]
    return ChainGraph(builder.model("a residual chain exported by remnant", metadata), found)


def _start(builder: GraphBuilder, first_input: str, start: np.ndarray) -> str:
    """Return the start value on every row, [N] (the row count read from the first input); with K
    start values (multiclass), [N, K]: zeros plus the K values, which is each value exactly."""
    from onnx import TensorProto, helper

    shape = builder.op("Shape", [first_input], "rows")
    if start.size == 1:
        value = helper.make_tensor("start", TensorProto.DOUBLE, [1], [float(start.reshape(-1)[0])])
        return builder.op("ConstantOfShape", [shape], "start", value=value)
    rows_by_classes = builder.op("Concat", [shape, builder.constant([start.size], "classes", np.int64)],
                                 "start_shape", axis=0)
    zero = helper.make_tensor("zero", TensorProto.DOUBLE, [1], [0.0])
    zeros = builder.op("ConstantOfShape", [rows_by_classes], "zeros", value=zero)
    return builder.op("Add", [zeros, builder.constant(start.reshape(-1), "start")], "start")
