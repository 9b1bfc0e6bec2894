"""One ONNX graph under construction: unique value names, constants, nodes and the opsets they need.

A thin layer over the ``onnx`` package's own helpers (``onnx.helper``, ``onnx.numpy_helper``,
``onnx.compose``): every name the export makes is fresh, so no value of a stage's graph can
collide with a feature column's name, and the opset imports follow the operators used.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ...errors import ExportError

#: the default domain's opset: every operator the export writes exists in it (ONNX 1.16, IR 10)
OPSET = 21
#: ai.onnx.ml opset 5 has TreeEnsemble, whose thresholds, leaves and output take doubles; the
#: graph imports the lowest ai.onnx.ml opset its operators need (2 when there is no tree)
ML_OPSET = 5
ML = "ai.onnx.ml"
IR_VERSION = 10


class GraphBuilder:
    """Nodes, constants, inputs and outputs of one graph; ``model()`` returns the ONNX model."""

    def __init__(self, outputs: list[str] | tuple[str, ...] = ()) -> None:
        """``outputs`` are the names of the graph's outputs, kept free for ``add_output``."""
        self.nodes: list[Any] = []
        self.initializers: list[Any] = []
        self.inputs: list[Any] = []
        self.outputs: list[Any] = []
        self.domains: dict[str, int] = {"": OPSET}
        #: (stage, operator) of embedded graphs whose operator ai.onnx.ml opset 5 retired
        self.retired: list[tuple[str, str]] = []
        self._used: set[str] = set(outputs)
        self._output_names = set(outputs)
        self._counts: dict[str, int] = {}

    # ------------------------------------------------------------------ names
    def fresh(self, base: str) -> str:
        """Return a value name that is used nowhere else in the graph, built from ``base``."""
        count = self._counts.get(base, 0)
        while True:
            name = f"{base}_{count}" if count else base
            count += 1
            if name not in self._used:
                self._counts[base] = count
                self._used.add(name)
                return name

    def reserve(self, name: str) -> str:
        """Claim ``name`` exactly (a graph input or output); return it."""
        if name in self._used:
            raise ValueError(f"the name {name!r} is used twice in the graph")
        self._used.add(name)
        return name

    # ------------------------------------------------------------------ values
    def constant(self, values: Any, base: str = "const", dtype: Any = np.float64) -> str:
        """Return the name of a constant tensor holding ``values`` (an array of ``dtype``)."""
        from onnx import numpy_helper

        array = np.asarray(values, dtype=dtype) if dtype is not object else np.asarray(values, dtype=object)
        name = self.fresh(base)
        self.initializers.append(numpy_helper.from_array(array, name))
        return name

    def op(self, op_type: str, inputs: list[str], base: str | None = None, *, outputs: int = 1,
           domain: str = "", version: int = 1, **attributes: Any) -> Any:
        """Add one node; return its output name (or a list of names when ``outputs`` > 1).

        ``version`` is the lowest opset of ``domain`` the node needs (other than the default domain)."""
        from onnx import helper

        names = [self.fresh(base or op_type.lower()) for _ in range(outputs)]
        self.nodes.append(helper.make_node(op_type, inputs, names, name=self.fresh(f"node_{op_type}"),
                                           domain=domain, **attributes))
        if domain:
            self.domains[domain] = max(self.domains.get(domain, 0), version)
        return names[0] if outputs == 1 else names

    def add_input(self, name: str, elem_type: int, shape: list[Any]) -> str:
        """Declare a graph input ``name``; return it."""
        from onnx import helper

        self.inputs.append(helper.make_tensor_value_info(self.reserve(name), elem_type, shape))
        return name

    def add_output(self, value: str, name: str, elem_type: int, shape: list[Any]) -> None:
        """Expose ``value`` as the graph output ``name`` (through an Identity node)."""
        from onnx import helper

        if name in self._output_names:
            self._output_names.discard(name)
        else:
            self.reserve(name)
        self.nodes.append(helper.make_node("Identity", [value], [name], name=self.fresh("node_output")))
        self.outputs.append(helper.make_tensor_value_info(name, elem_type, shape))

    # ------------------------------------------------------------------ shapes
    def column(self, value: str) -> str:
        """Return ``value`` reshaped to one column, [N, 1]."""
        return self.op("Reshape", [value, self.constant([-1, 1], "shape_column", np.int64)], "column")

    def flat(self, value: str) -> str:
        """Return ``value`` reshaped to one dimension, [N]."""
        return self.op("Reshape", [value, self.constant([-1], "shape_flat", np.int64)], "flat")

    def concat_columns(self, values: list[str], base: str = "matrix") -> str:
        """Return the [N, sum of widths] matrix of [N, w] ``values`` side by side."""
        return values[0] if len(values) == 1 else self.op("Concat", values, base, axis=1)

    # ------------------------------------------------------------------ other graphs
    def embed(self, model: Any, inputs: dict[str, str], prefix: str) -> list[str]:
        """Copy the nodes and constants of another ONNX model into this graph; return its outputs' names here.

        Its names get a fresh ``prefix`` (``onnx.compose.add_prefix``), and its graph inputs are
        wired to this graph's values ``inputs`` (input name there -> value name here).
        """
        from onnx import compose, helper

        prefix = self.fresh(prefix) + "/"
        renamed = compose.add_prefix(model, prefix, rename_inputs=True, rename_outputs=True)
        graph = renamed.graph
        made = [v.name for v in graph.input] + [name for node in graph.node for name in node.output] \
            + [t.name for t in graph.initializer]
        clash = sorted(set(made) & self._used)
        if clash:
            raise ValueError(f"an embedded graph's value {clash[0]!r} has a name already in use")
        self._used.update(made)
        for value in graph.input:
            original = value.name[len(prefix):]
            self.nodes.append(helper.make_node("Identity", [inputs[original]], [value.name],
                                               name=self.fresh("node_wire")))
        self.nodes.extend(graph.node)
        self.initializers.extend(graph.initializer)
        for opset in renamed.opset_import:
            self.domains[opset.domain] = max(self.domains.get(opset.domain, 0), opset.version)
        return [value.name for value in graph.output]

    def model(self, doc: str = "", metadata: dict[str, str] | None = None) -> Any:
        """Return the ONNX model of this graph, checked by ``onnx.checker``."""
        from onnx import checker, helper

        graph = helper.make_graph(self.nodes, "remnant_chain", self.inputs, self.outputs, self.initializers)
        opsets = [helper.make_opsetid(domain, version) for domain, version in sorted(self.domains.items())]
        model = helper.make_model(graph, opset_imports=opsets, producer_name="remnant", doc_string=doc)
        model.ir_version = IR_VERSION
        for key, value in (metadata or {}).items():
            entry = model.metadata_props.add()
            entry.key, entry.value = key, value
        try:
            checker.check_model(model, full_check=True)
        except (checker.ValidationError, onnx_errors()) as exc:
            raise ExportError(f"the composed ONNX graph is not valid ({' '.join(str(exc).split())[:300]})") from None
        return model


def onnx_errors() -> type[Exception]:
    """Return the error class of onnx's shape inference (raised by the checker's full check)."""
    from onnx.shape_inference import InferenceError

    return InferenceError
