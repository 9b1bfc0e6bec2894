"""The ``tree`` kind: one regression tree (scikit-learn's exact CART), leaves refined for the loss.

With float32 features and the chain's single random stream, a
chain of tree stages reproduces scikit-learn's gradient boosting stage for stage. With
``subsample`` below 1 each stage grows its tree on rows drawn without replacement (stochastic
gradient boosting, Friedman 2002, Computational Statistics & Data Analysis 38:367-378): the rows
left out weigh 0, as in GradientBoostingRegressor(subsample=...), and the leaves take their
values from the rows drawn. A multiclass stage grows K trees, one per class, each to its class's
pseudo-residuals, with the multinomial Newton leaves, as GradientBoostingClassifier grows a round;
its artifact holds the K trees as one list.
"""

from __future__ import annotations

import copy
from typing import Any, ClassVar

import numpy as np

from ..errors import ChainFileError
from ..tree_structure import check_fitted_estimator
from . import register, skops_io
from .base import Artifact, FitRequest, StageKind, check_has_features, check_subsample
from .per_class import PerClass, fit_per_class


def refine_tree_leaves(tree: Any, X: np.ndarray, request: FitRequest) -> None:
    """Set each leaf of a fitted scikit-learn tree to the loss's optimal value on its rows (those in bag)."""
    loss, weight = request.loss, request.weight
    context = loss.refinement_context(request.y, request.raw, weight)
    if loss.leaf_value(request.y[:1], request.raw[:1], request.residual[:1], context) is None:
        return
    leaves = tree.apply(np.asarray(X, dtype=np.float32))
    values = tree.tree_.value
    drawn = np.arange(len(leaves)) if request.in_bag is None else np.flatnonzero(request.in_bag)
    for rows in _rows_by_leaf(tree, leaves, drawn):
        leaf = leaves[rows[0]]
        values[leaf, 0, 0] = loss.leaf_value(request.y[rows], request.raw[rows], request.residual[rows], context,
                                             None if weight is None else weight[rows])


#: up to this many leaves, a leaf's rows are found by comparing every row's leaf (quicker than a sort)
FEW_LEAVES = 64


def _rows_by_leaf(tree: Any, leaves: np.ndarray, drawn: np.ndarray) -> list[np.ndarray]:
    """Return the positions in ``drawn`` (ascending) of each leaf that holds any, each in ascending order.

    Either way a leaf's rows come in the same order, so its value is summed in the same order."""
    at = leaves[drawn]
    ids = np.flatnonzero(tree.tree_.children_left == -1)
    if len(ids) <= FEW_LEAVES:
        found = (drawn[at == leaf] for leaf in ids)
        return [rows for rows in found if len(rows)]
    order = drawn[np.argsort(at, kind="stable")]
    return np.split(order, np.flatnonzero(np.diff(leaves[order])) + 1)


class TreeKind(StageKind):
    """A single decision tree fit to the residuals."""

    name: ClassVar[str] = "tree"
    summary: ClassVar[str] = "one regression tree (exact splits), leaves set for the loss"
    defaults: ClassVar[dict[str, Any]] = {
        "max_depth": 3, "min_samples_leaf": 1, "min_samples_split": 2, "criterion": "squared_error",
        "max_features": None, "max_leaf_nodes": None, "min_impurity_decrease": 0.0, "ccp_alpha": 0.0,
        "min_weight_fraction_leaf": 0.0, "subsample": 1.0,
    }
    main_params: ClassVar[tuple[str, ...]] = ("max_depth", "min_samples_leaf")
    refines_leaves: ClassVar[bool] = True
    subsamples: ClassVar[bool] = True

    def resolve_params(self, params: dict[str, Any] | None, task: str) -> dict[str, Any]:
        """Return the defaults overlaid with ``params``; raise StageSpecError for an unknown name or a bad subsample."""
        resolved = super().resolve_params(params, task)
        check_subsample(resolved["subsample"], self.name)
        return resolved

    def fit(self, request: FitRequest, params: dict[str, Any]) -> Any:
        """Return a DecisionTreeRegressor fit to the residuals of the rows in bag (K of them, one per class,
        for a multiclass chain); ``refine`` then sets their leaves for the loss."""
        check_has_features(request.X, self.name)
        if request.outputs > 1:
            X = np.asfortranarray(request.X, dtype=np.float32)
            grown = fit_per_class(request, lambda one: self._grow(one, params, X))
            return PerClass(grown.learners, cast=np.float32)  # trees read float32: convert rows once
        return self._grow(request, params, np.asfortranarray(request.X, dtype=np.float32))

    def _grow(self, request: FitRequest, params: dict[str, Any], X: np.ndarray) -> Any:
        from sklearn.tree import DecisionTreeRegressor

        settings = {k: v for k, v in params.items() if k != "subsample"}
        tree = DecisionTreeRegressor(splitter="best", random_state=request.random_state, **settings)
        weight = request.weight
        if request.in_bag is not None:
            weight = request.in_bag.astype(np.float64) if weight is None else weight * request.in_bag
        # column-major: the exact splitter reads one feature at a time (about 5 % quicker than rows)
        tree.fit(X, request.residual, sample_weight=weight)
        return tree

    def refine(self, learner: Any, request: FitRequest) -> None:
        """Set each leaf to the loss's optimal value (median for absolute, Newton step for log loss,
        the multinomial Newton step for each class's tree)."""
        if isinstance(learner, PerClass):
            rows = np.asarray(request.X, dtype=np.float32)  # once for the K trees
            for k, tree in enumerate(learner.learners):
                refine_tree_leaves(tree, rows, request.for_output(k))
            return
        refine_tree_leaves(learner, request.X, request)

    def save(self, learner: Any) -> Artifact:
        """Return the tree (a list of K trees for a multiclass stage) as a skops artifact, the exact types
        it holds in ``meta``."""
        trees = learner.learners if isinstance(learner, PerClass) else (learner,)
        stored = [copy.copy(tree) for tree in trees]
        for tree in stored:
            tree.random_state = None  # the chain's stream is not part of the fitted model
        payload, types = skops_io.dump(stored if isinstance(learner, PerClass) else stored[0])
        return Artifact("skops", payload, {"types": types})

    def load(self, artifact: Artifact) -> Any:
        """Return the tree (K trees for K outputs) stored in ``artifact``; raise ChainFileError for an
        untrusted type, another number of trees or an unsound tree."""
        from sklearn.tree import DecisionTreeRegressor

        several = artifact.n_outputs > 1
        found = skops_io.load(artifact.payload, expected=(list,) if several else (DecisionTreeRegressor,),
                              recorded=artifact.meta.get("types"), n_features=artifact.n_features)
        trees = found if several else [found]
        if len(trees) != artifact.n_outputs or any(type(tree) is not DecisionTreeRegressor for tree in trees):
            raise ChainFileError(f"tree stage artifact holds {len(trees)} items, not {artifact.n_outputs} trees")
        for k, tree in enumerate(trees):
            check_fitted_estimator(tree, artifact.n_features, "tree stage artifact" + (f" (class {k + 1})" if several else ""))
        return PerClass(tuple(trees), cast=np.float32) if several else trees[0]

    def importance(self, learner: Any, columns) -> np.ndarray:
        """Return the tree's impurity-based importances (for K trees, their mean)."""
        trees = learner.learners if isinstance(learner, PerClass) else (learner,)
        return np.mean([np.asarray(t.feature_importances_, dtype=np.float64) for t in trees], axis=0)


register(TreeKind())
