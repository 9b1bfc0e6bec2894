"""Checks of fitted structures that a native library walks without bounds checks.

scikit-learn's trees, libsvm's support-vector models and LightGBM's trees are walked by C
code that trusts every index it reads: a child index out of range reads outside memory, a
child pointing back up loops for ever, a split feature past the input reads outside the
row. A chain file may come from a stranger, so every such structure is checked here when it
is loaded, before any prediction:

* a tree's node counts agree with its arrays; every child index is in range; every node but
  the root has exactly one parent and is reachable from the root (so there is no cycle);
  split features are within the stage's inputs; thresholds and leaf values are finite;
* a libsvm model's arrays have the shapes its C code reads (support vectors, coefficients,
  intercept), over the stage's inputs, with a kernel remnant knows;
* a histogram gradient boosting regressor's predictors (``TreePredictor``) hold node records of
  scikit-learn's own dtype, linked as a tree (as above), split on numeric inputs only (no
  categorical bitsets, which its C code indexes unchecked), with finite leaf values.

Each check raises ChainFileError with one line saying what is wrong.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .errors import ChainFileError

#: scikit-learn's marker of "no child" in a tree's node arrays
SKLEARN_LEAF = -1
#: the support-vector kernels whose C code remnant's checks cover
SVM_KERNELS = ("linear", "poly", "rbf", "sigmoid")


def check_links(left: np.ndarray, right: np.ndarray, n_nodes: int, what: str,
                owners: np.ndarray | None = None) -> None:
    """Raise ChainFileError unless ``left``/``right`` make a tree over nodes ``0 .. n_nodes - 1``.

    ``left[i]``, ``right[i]`` are the two children of internal node ``owners[i]`` (default ``i``):
    node indices below ``n_nodes``. Every node but node 0 (the root) must be a child of exactly
    one node and be reachable from the root.
    """
    children = np.concatenate([np.asarray(left, dtype=np.int64), np.asarray(right, dtype=np.int64)])
    if children.size and (children.min() < 0 or children.max() >= n_nodes):
        bad = children[(children < 0) | (children >= n_nodes)][0]
        raise ChainFileError(f"{what} has a child index {int(bad):,} outside its {n_nodes:,} nodes")
    parents = np.bincount(children, minlength=n_nodes)
    if n_nodes and parents[0]:
        raise ChainFileError(f"{what} has its root as a child of another node (a cycle)")
    if n_nodes > 1 and (parents[1:] != 1).any():
        node = int(np.flatnonzero(parents[1:] != 1)[0]) + 1
        count = int(parents[node])
        raise ChainFileError(f"{what} has node {node:,} as the child of {count} nodes (each needs exactly one)")
    left, right = np.asarray(left, dtype=np.int64), np.asarray(right, dtype=np.int64)
    owners = np.arange(len(left)) if owners is None else np.asarray(owners, dtype=np.int64)
    reached = _reachable(left, right, owners, n_nodes)
    if reached != n_nodes:
        raise ChainFileError(f"{what} has {n_nodes - reached:,} nodes the root does not reach (a cycle or a detached part)")


def _reachable(left: np.ndarray, right: np.ndarray, owners: np.ndarray, n_nodes: int) -> int:
    """Return how many nodes lead up to the root through their parents (``owners[i]`` is the parent of
    ``left[i]`` and ``right[i]``; every node but the root has exactly one parent)."""
    if n_nodes <= 1:
        return n_nodes
    parent = np.zeros(n_nodes, dtype=np.int64)
    parent[left] = owners
    parent[right] = owners
    parent[0] = 0
    ancestor = parent
    for _ in range(n_nodes.bit_length()):  # after k rounds, each node's 2**k-th ancestor (the root stays put)
        ancestor = ancestor[ancestor]
    return int(np.count_nonzero(ancestor == 0))


# ----------------------------------------------------------------------------- scikit-learn trees
def check_sklearn_tree(tree: Any, n_features: int | None, what: str = "a tree", n_outputs: int = 1) -> None:
    """Raise ChainFileError unless a scikit-learn ``Tree`` is a sound regression tree of ``n_outputs``
    outputs (one per row, or one per class of a multiclass chain's multi-output forest).

    ``n_features`` is the number of inputs the tree may split on (None: its own ``n_features``).
    """
    count, capacity = int(tree.node_count), int(tree.capacity)
    left, right = np.asarray(tree.children_left), np.asarray(tree.children_right)
    if count < 1 or count != capacity or len(left) != count:
        raise ChainFileError(f"{what} says it has {count:,} nodes but holds {capacity:,}")
    if int(tree.n_outputs) != n_outputs or int(tree.max_n_classes) != 1:
        raise ChainFileError(f"{what} has {int(tree.n_outputs)} outputs; this stage's trees have {n_outputs}")
    width = int(tree.n_features)
    if n_features is not None and width != n_features:
        raise ChainFileError(f"{what} reads {width:,} features; the stage has {n_features:,}")
    leaf = (left == SKLEARN_LEAF) & (right == SKLEARN_LEAF)
    internal = ~leaf
    check_links(left[internal], right[internal], count, what, owners=np.flatnonzero(internal))
    feature = np.asarray(tree.feature)[internal]
    if feature.size and (feature.min() < 0 or feature.max() >= width):
        bad = int(feature[(feature < 0) | (feature >= width)][0])
        raise ChainFileError(f"{what} splits on feature {bad:,}; it has {width:,}")
    # +inf is the threshold scikit-learn gives a split of the missing values from all the others
    threshold = np.asarray(tree.threshold)[internal]
    if not (np.isfinite(threshold) | (threshold == np.inf)).all():
        raise ChainFileError(f"{what} has a split threshold that is not a number or is minus infinity")
    if not np.isfinite(np.asarray(tree.value)).all():
        raise ChainFileError(f"{what} has a leaf value that is not a finite number")
    if not np.isin(np.asarray(tree.missing_go_to_left), (0, 1)).all():
        raise ChainFileError(f"{what} has a missing-value direction that is neither left nor right")
    if not 0 <= int(tree.max_depth) < count:
        raise ChainFileError(f"{what} says it is {int(tree.max_depth):,} deep with {count:,} nodes")


def sklearn_trees(obj: Any) -> list[tuple[Any, Any]]:
    """Return every scikit-learn ``Tree`` reachable from ``obj`` (through attributes, lists, tuples,
    dicts and object arrays) with the estimator holding it as ``tree_`` (None for a bare tree)."""
    from sklearn.tree._tree import Tree

    found, seen, stack = [], set(), [obj]
    while stack:
        item = stack.pop()
        if id(item) in seen or item is None or isinstance(item, str | bytes | int | float | bool):
            continue
        seen.add(id(item))
        if isinstance(item, Tree):
            found.append((None, item))
        elif isinstance(item, dict):
            stack.extend(item.values())
        elif isinstance(item, list | tuple | set):
            stack.extend(item)
        elif isinstance(item, np.ndarray):
            if item.dtype == object:
                stack.extend(item.ravel().tolist())
        elif hasattr(item, "__dict__"):
            attributes = vars(item)
            if isinstance(attributes.get("tree_"), Tree):
                found.append((item, attributes["tree_"]))
                seen.add(id(attributes["tree_"]))
            stack.extend(attributes.values())
    return found


# ----------------------------------------------------------------------------- libsvm models
def check_libsvm(model: Any, n_features: int, what: str = "a support-vector model") -> None:
    """Raise ChainFileError unless a fitted SVR or NuSVR holds the arrays libsvm's prediction reads."""
    if getattr(model, "_impl", None) not in ("epsilon_svr", "nu_svr") or getattr(model, "_sparse", True) is not False:
        raise ChainFileError(f"{what} is not a dense regression model")
    if model.kernel not in SVM_KERNELS:
        raise ChainFileError(f"{what} uses kernel {model.kernel!r}; remnant loads {', '.join(SVM_KERNELS)}")
    support, vectors = np.asarray(model.support_), np.asarray(model.support_vectors_)
    n_support = len(support)
    shapes = {
        "support vectors": (vectors, (n_support, n_features), np.float64),
        "coefficients": (np.asarray(model._dual_coef_), (1, n_support), np.float64),
        "intercept": (np.asarray(model._intercept_), (1,), np.float64),
        "class counts": (np.asarray(model._n_support), (2,), np.int32),
        "support indices": (support, (n_support,), np.int32),
    }
    for name, (array, shape, dtype) in shapes.items():
        if array.shape != shape or array.dtype != dtype or not array.flags.c_contiguous:
            raise ChainFileError(f"{what}: its {name} have shape {array.shape}, expected {shape}")
        if array.dtype.kind == "f" and not np.isfinite(array).all():
            raise ChainFileError(f"{what}: its {name} hold a value that is not a finite number")
    shape_fit = tuple(getattr(model, "shape_fit_", ()))
    if len(shape_fit) != 2 or shape_fit[1] != n_features:
        raise ChainFileError(f"{what} was fit on {shape_fit} rows and columns, not {n_features} columns")
    for name in ("_probA", "_probB"):
        if np.asarray(getattr(model, name)).size > 1:
            raise ChainFileError(f"{what}: {name} holds more than one value")
    numbers = {"gamma": model._gamma, "coef0": model.coef0, "cache_size": model.cache_size}
    if not all(isinstance(v, int | float | np.floating) and np.isfinite(v) for v in numbers.values()):
        raise ChainFileError(f"{what} has a kernel setting that is not a finite number")
    if not 0 < float(model.cache_size) <= 1e5 or not isinstance(model.degree, int | np.integer) \
            or not 0 <= int(model.degree) <= 1000:
        raise ChainFileError(f"{what} has a cache size or degree out of range")


def check_fitted_estimator(estimator: Any, n_features: int | None, what: str, n_outputs: int = 1) -> None:
    """Raise ChainFileError unless ``estimator`` reads ``n_features`` inputs and every tree and libsvm
    model inside it is sound (a tree inside an ensemble may read fewer inputs, never more), each tree
    of ``n_outputs`` outputs."""
    from sklearn.svm import SVR, NuSVR

    width = getattr(estimator, "n_features_in_", n_features)
    if not isinstance(width, int | np.integer) or isinstance(width, bool) or (n_features is not None
                                                                              and width != n_features):
        raise ChainFileError(f"{what} reads {width!r} features; the stage has {n_features}")
    for i, (owner, tree) in enumerate(sklearn_trees(estimator)):
        where = f"{what}: tree {i + 1}"
        if owner is not None and getattr(owner, "n_features_in_", None) != int(tree.n_features):
            raise ChainFileError(f"{where} reads {int(tree.n_features):,} features, but its estimator "
                                 f"says {getattr(owner, 'n_features_in_', None)!r}")
        check_sklearn_tree(tree, None, where, n_outputs)
        if int(tree.n_features) > int(width):
            raise ChainFileError(f"{where} reads {int(tree.n_features):,} features; the stage has {int(width):,}")
    if type(estimator) in (SVR, NuSVR):
        check_libsvm(estimator, int(width), what)
    from sklearn.ensemble import HistGradientBoostingRegressor

    if type(estimator) is HistGradientBoostingRegressor:
        check_hist_predictors(estimator, int(width), what)


def check_hist_predictors(estimator: Any, n_features: int, what: str) -> None:
    """Raise ChainFileError unless a loaded ``HistGradientBoostingRegressor`` is sound to predict with:
    one predictor an iteration, each a tree of scikit-learn's node records over ``n_features``
    numeric inputs, a finite baseline, and no categorical feature or preprocessor."""
    from sklearn.ensemble._hist_gradient_boosting.common import PREDICTOR_RECORD_DTYPE
    from sklearn.ensemble._hist_gradient_boosting.predictor import TreePredictor

    if getattr(estimator, "n_trees_per_iteration_", None) != 1 or getattr(estimator, "_preprocessor", None) is not None:
        raise ChainFileError(f"{what} is not a regressor of one tree an iteration on numeric inputs")
    baseline = getattr(estimator, "_baseline_prediction", None)
    if not isinstance(baseline, np.ndarray) or baseline.shape != (1, 1) or not np.isfinite(baseline).all():
        raise ChainFileError(f"{what} has no finite baseline prediction")
    categorical = getattr(getattr(estimator, "_bin_mapper", None), "is_categorical_", None)
    if categorical is not None and (not isinstance(categorical, np.ndarray) or categorical.size != n_features
                                    or categorical.any()):
        raise ChainFileError(f"{what} has categorical features, which remnant does not load")
    predictors = getattr(estimator, "_predictors", None)
    if not isinstance(predictors, list) or not all(isinstance(group, list) and len(group) == 1 for group in predictors):
        raise ChainFileError(f"{what} does not hold one tree an iteration")
    for i, (predictor,) in enumerate(predictors):
        where = f"{what}: tree {i + 1}"
        nodes = getattr(predictor, "nodes", None)
        if type(predictor) is not TreePredictor or not isinstance(nodes, np.ndarray) or nodes.ndim != 1 \
                or nodes.dtype != PREDICTOR_RECORD_DTYPE or len(nodes) < 1:
            raise ChainFileError(f"{where} is not a tree of scikit-learn's node records")
        if not np.isin(nodes["is_leaf"], (0, 1)).all() or nodes["is_categorical"].any():
            raise ChainFileError(f"{where} has a node that is neither a leaf nor a numeric split")
        internal = nodes["is_leaf"] == 0
        check_links(nodes["left"][internal], nodes["right"][internal], len(nodes), where,
                    owners=np.flatnonzero(internal))
        feature = nodes["feature_idx"][internal]
        if feature.size and (feature.min() < 0 or feature.max() >= n_features):
            raise ChainFileError(f"{where} splits on a feature outside its {n_features:,}")
        if not np.isin(nodes["missing_go_to_left"], (0, 1)).all():
            raise ChainFileError(f"{where} has a missing-value direction that is neither left nor right")
        if not np.isfinite(nodes["value"]).all() or np.isnan(nodes["num_threshold"][internal]).any():
            raise ChainFileError(f"{where} has a leaf value or a threshold that is not a number")
