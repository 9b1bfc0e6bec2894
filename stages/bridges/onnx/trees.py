"""Tree learners as one ai.onnx.ml ``TreeEnsemble`` node (opset 5): double thresholds, leaves and output.

The converters of skl2onnx and onnxmltools write ``TreeEnsembleRegressor``, whose output is
float32 (its thresholds too, before ai.onnx.ml opset 3), and onnxmltools sends a missing value
of a LightGBM split one way where LightGBM sends it the other for some splits. So trees are read
from the learners' own structures and written as ``TreeEnsemble`` (ai.onnx.ml opset 5), whose
thresholds, leaf values and output are all float64:

- scikit-learn trees (``tree_``): a row goes left when its value, rounded to float32 as
  scikit-learn's predict rounds it, is at most the threshold; a missing value goes the way
  ``missing_go_to_left`` says.
- LightGBM (``dump_model``, thresholds printed with 17 digits, so exact): a numeric split sends
  a row left when its value is at most the threshold; a missing value goes the default way when
  the split's missing type is NaN, and is read as 0 when it is None (LightGBM's own rule). A
  category split sends a row left when its code is in the split's set, and a missing code right.
  Splits whose missing type is Zero (``zero_as_missing``) are not exported.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ...errors import ExportError
from .builder import ML, ML_OPSET, GraphBuilder

LEAF = -1
#: TreeEnsemble node modes (ai.onnx.ml opset 5)
BRANCH_LEQ = 0
BRANCH_MEMBER = 6
#: TreeEnsemble aggregate functions
AVERAGE, SUM = 0, 1


@dataclass
class Tree:
    """One binary tree in a neutral form: per node its feature, threshold or category set, children
    (``LEAF`` for a leaf), where a missing value goes, and (at leaves) its value per target."""

    feature: list[int] = field(default_factory=list)
    threshold: list[float] = field(default_factory=list)
    members: list[tuple[float, ...] | None] = field(default_factory=list)
    left: list[int] = field(default_factory=list)
    right: list[int] = field(default_factory=list)
    missing_left: list[bool] = field(default_factory=list)
    value: list[float] = field(default_factory=list)
    target: list[int] = field(default_factory=list)

    def add(self, feature: int = -1, threshold: float = 0.0, members: tuple[float, ...] | None = None,
            missing_left: bool = False, value: float = 0.0, target: int = 0) -> int:
        """Append a node (children set later); return its index."""
        self.feature.append(feature)
        self.threshold.append(threshold)
        self.members.append(members)
        self.left.append(LEAF)
        self.right.append(LEAF)
        self.missing_left.append(missing_left)
        self.value.append(value)
        self.target.append(target)
        return len(self.feature) - 1

    def is_leaf(self, node: int) -> bool:
        """Return True when ``node`` has no children."""
        return self.left[node] == LEAF


# ----------------------------------------------------------------------------- readers
def sklearn_tree(structure: Any, scale: float = 1.0, *, output: int = 0, target: int = 0) -> Tree:
    """Return a fitted scikit-learn ``tree_`` (a regression tree) as a Tree, leaf values times ``scale``;
    ``output`` picks the output of a multi-output tree, ``target`` the TreeEnsemble target its leaves add to."""
    left, right = structure.children_left, structure.children_right
    missing = getattr(structure, "missing_go_to_left", np.zeros(structure.node_count, dtype=np.uint8))
    values = np.asarray(structure.value, dtype=np.float64)[:, output, 0]
    tree = Tree()
    for node in range(structure.node_count):
        leaf = left[node] == -1
        tree.add(feature=-1 if leaf else int(structure.feature[node]),
                 threshold=0.0 if leaf else float(structure.threshold[node]),
                 missing_left=bool(missing[node]), value=float(values[node]) * scale if leaf else 0.0,
                 target=target)
    for node in range(structure.node_count):
        if left[node] != -1:
            tree.left[node], tree.right[node] = int(left[node]), int(right[node])
    return tree


def lightgbm_trees(booster: Any) -> tuple[list[Tree], int, bool]:
    """Return the trees of a LightGBM booster (the iterations its predict uses), the number of trees
    per iteration (one per output), and whether its output is their average (random-forest mode)."""
    dump = booster.dump_model()
    per_iteration = int(dump.get("num_tree_per_iteration", 1))
    trees = []
    for position, info in enumerate(dump["tree_info"]):
        tree = Tree()
        _read_lightgbm_node(info["tree_structure"], tree, position % per_iteration)
        trees.append(tree)
    return trees, per_iteration, bool(dump.get("average_output", False))


def _read_lightgbm_node(node: dict[str, Any], tree: Tree, target: int) -> int:
    if "split_feature" not in node:
        if "leaf_coeff" in node:
            raise ExportError("LightGBM's linear trees (linear_tree) cannot be exported")
        return tree.add(value=float(node["leaf_value"]), target=target)
    missing_type = node.get("missing_type", "None")
    if missing_type == "Zero":
        raise ExportError("a LightGBM split treats zero as missing (zero_as_missing), "
                              "which the ONNX tree operator cannot express")
    feature = int(node["split_feature"])
    if node["decision_type"] == "==":
        members = tuple(float(int(code)) for code in str(node["threshold"]).split("||"))
        index = tree.add(feature=feature, members=members, missing_left=False)
    elif node["decision_type"] == "<=":
        threshold = float(node["threshold"])
        # LightGBM reads a missing value as 0 where the split's missing type is None
        goes_left = bool(node["default_left"]) if missing_type == "NaN" else threshold >= 0.0
        index = tree.add(feature=feature, threshold=threshold, missing_left=goes_left)
    else:
        raise ExportError(f"a LightGBM split of type {node['decision_type']!r} cannot be exported")
    tree.left[index] = _read_lightgbm_node(node["left_child"], tree, target)
    tree.right[index] = _read_lightgbm_node(node["right_child"], tree, target)
    return index


# ----------------------------------------------------------------------------- the node
def tree_ensemble(builder: GraphBuilder, matrix: str, trees: list[Tree], *, n_targets: int = 1,
                  aggregate: int = SUM) -> str:
    """Add one TreeEnsemble node over the [N, p] double ``matrix``; return its output, [N] for one
    target, else [N, n_targets]."""
    from onnx import numpy_helper

    columns: dict[str, list[Any]] = {key: [] for key in (
        "featureids", "modes", "splits", "truenodeids", "trueleafs", "falsenodeids", "falseleafs", "missing")}
    members: list[float] = []
    leaf_targets: list[int] = []
    leaf_weights: list[float] = []
    roots = []
    for tree in trees:
        roots.append(len(columns["featureids"]))
        _write_tree(tree, columns, members, leaf_targets, leaf_weights)
    attributes: dict[str, Any] = {
        "aggregate_function": aggregate, "post_transform": 0, "n_targets": n_targets, "tree_roots": roots,
        "nodes_featureids": columns["featureids"],
        "nodes_modes": numpy_helper.from_array(np.asarray(columns["modes"], dtype=np.uint8)),
        "nodes_splits": numpy_helper.from_array(np.asarray(columns["splits"], dtype=np.float64)),
        "nodes_truenodeids": columns["truenodeids"], "nodes_trueleafs": columns["trueleafs"],
        "nodes_falsenodeids": columns["falsenodeids"], "nodes_falseleafs": columns["falseleafs"],
        "nodes_missing_value_tracks_true": columns["missing"],
        "leaf_targetids": leaf_targets,
        "leaf_weights": numpy_helper.from_array(np.asarray(leaf_weights, dtype=np.float64)),
    }
    if members:
        attributes["membership_values"] = numpy_helper.from_array(np.asarray(members, dtype=np.float64))
    output = builder.op("TreeEnsemble", [matrix], "trees", domain=ML, version=ML_OPSET, **attributes)
    return builder.flat(output) if n_targets == 1 else output


def _write_tree(tree: Tree, columns: dict[str, list[Any]], members: list[float], leaf_targets: list[int],
                leaf_weights: list[float]) -> None:
    """Append one tree's split nodes (a lone leaf gets a split whose two ways reach it) and leaves."""
    if tree.is_leaf(0):
        leaf = _add_leaf(tree, 0, leaf_targets, leaf_weights)
        _append_split(columns, 0, BRANCH_LEQ, 0.0, (leaf, 1), (leaf, 1), False)
        return
    split_index: dict[int, int] = {}
    order = [node for node in range(len(tree.feature)) if not tree.is_leaf(node)]
    for node in order:
        split_index[node] = len(columns["featureids"]) + len(split_index)
    placed: dict[int, int] = {}
    for node in order:
        ways = []
        for child in (tree.left[node], tree.right[node]):
            if tree.is_leaf(child):
                if child not in placed:
                    placed[child] = _add_leaf(tree, child, leaf_targets, leaf_weights)
                ways.append((placed[child], 1))
            else:
                ways.append((split_index[child], 0))
        node_members = tree.members[node]
        mode = BRANCH_LEQ if node_members is None else BRANCH_MEMBER
        if node_members is not None:
            members.extend([*node_members, float("nan")])
        _append_split(columns, tree.feature[node], mode, tree.threshold[node], ways[0], ways[1],
                      tree.missing_left[node])


def _add_leaf(tree: Tree, node: int, leaf_targets: list[int], leaf_weights: list[float]) -> int:
    leaf_targets.append(tree.target[node])
    leaf_weights.append(tree.value[node])
    return len(leaf_weights) - 1


def _append_split(columns: dict[str, list[Any]], feature: int, mode: int, threshold: float,
                  true_way: tuple[int, int], false_way: tuple[int, int], missing_true: bool) -> None:
    columns["featureids"].append(int(feature))
    columns["modes"].append(mode)
    columns["splits"].append(float(threshold) if mode == BRANCH_LEQ else 0.0)
    columns["truenodeids"].append(true_way[0])
    columns["trueleafs"].append(true_way[1])
    columns["falsenodeids"].append(false_way[0])
    columns["falseleafs"].append(false_way[1])
    columns["missing"].append(int(missing_true))
