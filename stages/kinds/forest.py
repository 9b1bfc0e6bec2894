"""The ``forest`` and ``extra_trees`` kinds: a whole random forest, or extremely randomised trees, as one stage.

Both are regressed on the residuals. A forest nearly interpolates the rows it was grown on,
so its step is line-searched on predictions for rows it did not see: each row's out-of-bag
prediction (the mean of the trees whose bootstrap sample left it out) when the trees are
bootstrapped, a cross-fit otherwise (``stages.steps``). The defaults follow Breiman's random forests as randomForest sets them (Breiman 2001,
Random Forests, Machine Learning 45:5-32; Liaw & Wiener 2002, Classification and Regression
by randomForest, R News 2(3):18-22): a third of the features tried at each split and leaves of
at least five rows for regression; the square root of the features and single-row leaves for
binary chains. Extra trees (Geurts, Ernst & Wehenkel 2006, Extremely randomized trees,
Machine Learning 63:3-42) share these defaults but draw thresholds at random and, by
default, grow every tree on all rows. Missing values go to the trees as NaN, which
scikit-learn's forests route natively (RandomForest since 1.4, ExtraTrees since 1.6).
"""

from __future__ import annotations

import time
from typing import Any, ClassVar

import numpy as np

from ..errors import ChainFileError, StageSpecError
from ..tree_structure import check_fitted_estimator
from . import register, skops_io
from .base import Artifact, FitRequest, StageKind, check_has_features

_SEED_NOTE = "the chain's seed sets it (the [chain] seed of a recipe)"
#: a forest grows in batches of trees taking about this long each, so a cancel is seen that soon
BATCH_SECONDS = 0.5


def _forest_defaults(bootstrap: bool) -> dict[str, Any]:
    """Return every constructor parameter of a scikit-learn forest regressor with the stage's defaults."""
    return {
        "n_estimators": 100,
        "criterion": "squared_error",
        "max_depth": None,
        "min_samples_split": 2,
        "min_samples_leaf": 5,
        "min_weight_fraction_leaf": 0.0,
        "max_features": 1 / 3,
        "max_leaf_nodes": None,
        "min_impurity_decrease": 0.0,
        "bootstrap": bootstrap,
        "oob_score": False,
        "n_jobs": None,
        "verbose": 0,
        "warm_start": False,
        "ccp_alpha": 0.0,
        "max_samples": None,
        "monotonic_cst": None,
    }


class ForestKind(StageKind):
    """Shared base of the forest kinds: fit a scikit-learn forest regressor to the residuals."""

    main_params: ClassVar[tuple[str, ...]] = ("n_estimators", "max_features", "min_samples_leaf")
    #: import path of the scikit-learn estimator, as module and class name
    estimator_path: ClassVar[tuple[str, str]]

    def task_defaults(self, task: str) -> dict[str, Any]:
        """Return the defaults for ``task``: mtry p/3 and leaves of 5 rows for regression, sqrt(p) and 1 for
        binary and multiclass chains (classification, as randomForest sets them)."""
        out = dict(self.defaults)
        if task in ("binary", "multiclass"):
            out.update(max_features="sqrt", min_samples_leaf=1)
        return out

    def resolve_params(self, params: dict[str, Any] | None, task: str) -> dict[str, Any]:
        """Return the defaults overlaid with ``params``; raise StageSpecError for an unknown name."""
        if params and "random_state" in params:
            raise StageSpecError(f"kind {self.name!r} does not take 'random_state': {_SEED_NOTE}")
        return super().resolve_params(params, task)

    def estimator_class(self) -> type:
        """Return the scikit-learn estimator class this kind fits."""
        import importlib

        module, cls = self.estimator_path
        return getattr(importlib.import_module(module), cls)

    def fit(self, request: FitRequest, params: dict[str, Any]) -> Any:
        """Return the forest fit to the residuals, its trees seeded from the chain's stream (for a
        multiclass chain one multi-output forest: each tree predicts the K classes' residuals)."""
        check_has_features(request.X, self.name)
        request.check_cancel()
        forest = self.estimator_class()(random_state=request.random_state, **params)
        if params.get("n_jobs") is None:
            # unset: grown on the chain's threads; scikit-learn draws every tree's seed before it
            # grows any, so the trees do not depend on the thread count
            forest.set_params(n_jobs=request.thread_count)
        grow_in_batches(forest, request)
        # predicting stays on one thread: a threaded forest sums its trees in the order they finish,
        # which moves the last bit of a prediction from call to call (a rebuilt output, a session's check)
        forest.set_params(n_jobs=None)
        return forest

    def step_source(self, params: dict[str, Any]) -> str:
        """Return out-of-bag for bootstrapped trees; otherwise every tree saw every row, so cross-fit."""
        from .. import steps

        return steps.OUT_OF_BAG if params.get("bootstrap") else steps.CROSS_FIT

    def out_of_bag(self, learner: Any, request: FitRequest) -> tuple[np.ndarray, np.ndarray]:
        """Return each fitting row's mean prediction over the trees that left it out, and which rows have one."""
        n = request.X.shape[0]
        X = np.asarray(request.X, dtype=np.float32)  # what the forest's own predict casts to
        total, count = np.zeros(request.residual.shape), np.zeros(n)
        for tree, drawn in zip(learner.estimators_, learner.estimators_samples_, strict=True):
            request.check_cancel()
            left_out = np.ones(n, dtype=bool)
            left_out[drawn] = False
            if left_out.any():
                total[left_out] += tree.predict(X[left_out], check_input=False)
                count[left_out] += 1
        has = count > 0
        held = np.zeros(total.shape)
        held[has] = total[has] / (count[has] if total.ndim == 1 else count[has, None])
        return held, has

    def save(self, learner: Any) -> Artifact:
        """Return the forest as a skops artifact, the exact types it holds in ``meta``."""
        learner.random_state = None  # the chain's stream is not part of the fitted model
        payload, types = skops_io.dump(learner)
        return Artifact("skops", payload, {"types": types})

    def load(self, artifact: Artifact) -> Any:
        """Return the forest stored in ``artifact``; raise ChainFileError for an untrusted payload or an unsound tree."""
        learner = skops_io.load(artifact.payload, recorded=artifact.meta.get("types"), n_features=artifact.n_features,
                                n_outputs=artifact.n_outputs)
        if type(learner) is not self.estimator_class():
            raise ChainFileError(f"{self.name} stage artifact holds a {type(learner).__name__}, not a forest")
        if int(getattr(learner, "n_outputs_", 1)) != artifact.n_outputs:
            raise ChainFileError(f"{self.name} stage artifact predicts {getattr(learner, 'n_outputs_', None)!r} "
                                 f"outputs; the chain has {artifact.n_outputs}")
        check_fitted_estimator(learner, artifact.n_features, f"{self.name} stage artifact", artifact.n_outputs)
        return learner

    def importance(self, learner: Any, columns) -> np.ndarray:
        """Return the forest's impurity-based importances (they sum to 1)."""
        return np.asarray(learner.feature_importances_, dtype=np.float64)


def grow_in_batches(forest: Any, request: FitRequest) -> None:
    """Grow ``forest`` a batch of trees at a time, reporting progress and checking for a cancel
    between batches; the forest is the one a single fit with the same stream would grow.

    Each batch is a warm start from the stream's state before the first tree: scikit-learn's
    warm start skips the seeds of the trees already grown, so every tree gets the seed it would
    have got in one fit. A batch is sized to take about ``BATCH_SECONDS`` (from the time the
    trees so far took), so a cancel is seen within about that long. Afterwards the chain's
    stream stands where a single fit would have left it.
    """
    report = request.progress or (lambda fraction, message: None)
    n_trees = forest.n_estimators
    if isinstance(n_trees, bool) or not isinstance(n_trees, int) or n_trees < 1:
        forest.fit(request.X, request.residual, sample_weight=request.weight)  # scikit-learn says what is wrong
        return
    warm_start, stream = forest.warm_start, request.random_state
    before = stream.get_state()
    batch_stream = np.random.RandomState()
    X = np.asarray(request.X, dtype=np.float32)  # what scikit-learn would cast it to, once instead of per batch
    done, size = 0, 1
    report(0.0, f"0/{n_trees} trees")
    forest.set_params(warm_start=True)
    while done < n_trees:
        request.check_cancel()
        started = time.perf_counter()
        batch_stream.set_state(before)
        done = min(n_trees, done + size)
        forest.set_params(n_estimators=done, random_state=batch_stream)
        forest.fit(X, request.residual, sample_weight=request.weight)
        report(done / n_trees, f"{done}/{n_trees} trees")
        per_tree = (time.perf_counter() - started) / size
        size = max(1, min(n_trees - done, int(BATCH_SECONDS / max(per_tree, 1e-6))))
    forest.set_params(warm_start=warm_start, random_state=stream)
    stream.set_state(batch_stream.get_state())


class RandomForestKind(ForestKind):
    """Breiman's random forest: bootstrap samples, a random subset of features at each split."""

    name: ClassVar[str] = "forest"
    summary: ClassVar[str] = "a random forest fit to the residuals (bootstrap, p/3 features per split)"
    defaults: ClassVar[dict[str, Any]] = _forest_defaults(bootstrap=True)
    estimator_path: ClassVar[tuple[str, str]] = ("sklearn.ensemble", "RandomForestRegressor")


class ExtraTreesKind(ForestKind):
    """Extremely randomised trees: random thresholds, every row in every tree."""

    name: ClassVar[str] = "extra_trees"
    summary: ClassVar[str] = "extremely randomised trees fit to the residuals (random thresholds)"
    defaults: ClassVar[dict[str, Any]] = _forest_defaults(bootstrap=False)
    estimator_path: ClassVar[tuple[str, str]] = ("sklearn.ensemble", "ExtraTreesRegressor")


register(RandomForestKind())
register(ExtraTreesKind())
