"""A ``sklearn:`` stage's estimator in ONNX: skl2onnx's converter for its class, on the stage's design.

The estimator is converted by skl2onnx with a float64 input of the design's width, and that graph
is embedded after the design (``GraphBuilder.embed``). Where the converter or the runtime has
only float32 for the class (an operator of ai.onnx.ml such as ``SVMRegressor``), the design is
cast to float32 for it and its output back to float64, and the stage is marked float32. The
scikit-learn trees and forests go to the exact float64 tree operator instead (``trees.py``).
A class skl2onnx has no converter for stops the export with an error naming the stage and class.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ...errors import ExportError
from .builder import ML, OPSET, GraphBuilder

#: scikit-learn tree classes written by ``trees.py`` (exact, float64) rather than by skl2onnx
TREE_CLASSES = ("DecisionTreeRegressor", "ExtraTreeRegressor")
FOREST_CLASSES = ("RandomForestRegressor", "ExtraTreesRegressor")
BOOSTING_CLASSES = ("GradientBoostingRegressor",)
#: operators ai.onnx.ml opset 5 retired (in favour of TreeEnsemble); skl2onnx still writes them
RETIRED_IN_ML5 = ("TreeEnsembleRegressor", "TreeEnsembleClassifier")


@dataclass(frozen=True)
class Converted:
    """An estimator's ONNX graph: its [N] output here, and the precision it computes in."""

    output: str
    precision: str
    note: str = ""


def estimator_graph(builder: GraphBuilder, design: str, width: int, estimator: Any, where: str) -> Converted:
    """Return the graph of a fitted scikit-learn regressor applied to the [N, width] ``design``.

    ``where`` names the stage in errors. Raise ExportError when skl2onnx has no converter for the
    estimator's class, or its graph cannot run on onnxruntime in either precision.
    """
    name = type(estimator).__name__
    found = None
    for precision in ("float64", "float32"):
        model = _convert(estimator, width, precision, where)
        problem = _runs(model)
        if problem is None:
            found = (model, precision)
            break
    if found is None:
        raise ExportError(f"{where}: the ONNX graph skl2onnx writes for {name} cannot run ({problem})")
    model, precision = found
    source = design
    if precision == "float32":
        from onnx import TensorProto

        source = builder.op("Cast", [design], "as_float32", to=TensorProto.FLOAT)
    (output, *_rest) = builder.embed(model, {model.graph.input[0].name: source}, "sklearn")
    builder.retired += [(where, node.op_type) for node in model.graph.node if node.op_type in RETIRED_IN_ML5]
    if precision == "float32":
        from onnx import TensorProto

        output = builder.op("Cast", [output], "as_double", to=TensorProto.DOUBLE)
    ops = sorted({node.op_type for node in model.graph.node if node.domain == ML})
    note = f"skl2onnx writes {name} in float32 ({', '.join(ops) or 'its operators'})" if precision == "float32" else ""
    return Converted(builder.flat(output), precision, note)


def _convert(estimator: Any, width: int, precision: str, where: str) -> Any:
    from skl2onnx import convert_sklearn
    from skl2onnx.common.data_types import DoubleTensorType, FloatTensorType
    from skl2onnx.common.exceptions import MissingConverter, MissingShapeCalculator

    kind = DoubleTensorType if precision == "float64" else FloatTensorType
    name = f"{type(estimator).__module__}.{type(estimator).__name__}"
    try:
        return convert_sklearn(estimator, initial_types=[("design", kind([None, width]))],
                               target_opset={"": OPSET, ML: 3})
    except (MissingConverter, MissingShapeCalculator):
        raise ExportError(f"{where}: skl2onnx has no converter for {name}, so the chain cannot be "
                          "exported (nothing was written)") from None
    except Exception as exc:  # a converter that fails on this estimator's settings
        raise ExportError(f"{where}: skl2onnx cannot convert this {name} ({_one_line(exc)})") from None


def _runs(model: Any) -> str | None:
    """Return None when onnxruntime can load ``model``, else the reason it cannot."""
    import onnxruntime

    try:
        onnxruntime.InferenceSession(model.SerializeToString(), providers=["CPUExecutionProvider"])
    except Exception as exc:  # the runtime's own errors: a type or an operator it lacks
        return _one_line(exc)
    return None


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:200]
