"""The ``hist_tree`` kind: one histogram tree, LightGBM with one round and a learning rate of 1.

Its splits are found on binned features, so it fits in a fraction of an exact tree's time on
large data. It fits the loss from the chain's offset, so its leaves take LightGBM's own
optimal values: the mean residual for squared loss, one Newton step for log loss, and the
leaf's median residual (LightGBM's leaf renewal) for absolute loss. The binned rows are kept
between stages on the same rows (``binned.py``): the second and later stages skip the binning.
With ``subsample`` below 1 each stage grows its tree on rows drawn without replacement from the
chain's stream (stochastic gradient boosting, Friedman 2002), a subset of the binned rows.
"""

from __future__ import annotations

from typing import Any, ClassVar

from . import register
from .base import Artifact, FitRequest, check_subsample
from .lightgbm_stage import MAX_LEAVES, BoosterKind, BoosterLearner, train_booster
from .one_tree import read_tree


def default_leaves(max_depth: int | None) -> int:
    """Return the number of leaves a tree of ``max_depth`` can have, within LightGBM's limit."""
    if max_depth is None or max_depth <= 0:
        return 31  # no depth limit: LightGBM's own default
    return min(2**max_depth, MAX_LEAVES)


class HistTreeKind(BoosterKind):
    """A single LightGBM tree with loss-optimal leaves."""

    name: ClassVar[str] = "hist_tree"
    summary: ClassVar[str] = "one histogram tree (binned splits), leaves set for the loss"
    defaults: ClassVar[dict[str, Any]] = {
        # bin edges from 50,000 sampled rows rather than LightGBM's 200,000: finding them was
        # a third of a first stage's time at a million rows (bench/hist_tree.py)
        "max_depth": 3, "min_child_samples": 20, "max_bin": 255, "bin_construct_sample_cnt": 50_000, "reg_lambda": 0.0,
        "min_sum_hessian_in_leaf": 1e-3, "n_jobs": 0,
        "verbosity": -1, "deterministic": True, "force_row_wise": True,
    }
    main_params: ClassVar[tuple[str, ...]] = ("max_depth", "min_child_samples")
    extra_params: ClassVar[tuple[str, ...]] = (
        "num_leaves", "min_data_in_leaf", "lambda_l2", "reg_alpha", "lambda_l1", "min_child_weight",
        "min_split_gain", "min_gain_to_split", "colsample_bytree", "feature_fraction",
        "feature_fraction_bynode", "max_delta_step", "min_data_in_bin", "cat_smooth", "cat_l2",
        "max_cat_to_onehot", "max_cat_threshold", "min_data_per_group", "extra_trees",
        "path_smooth", "monotone_constraints", "use_missing", "zero_as_missing", "num_threads",
        "force_col_wise", "subsample",
    )
    subsamples: ClassVar[bool] = True

    def resolve_params(self, params: dict[str, Any] | None, task: str) -> dict[str, Any]:
        """Return the resolved LightGBM parameters plus ``subsample``, the stage's own row fraction
        (not LightGBM's bagging); raise StageSpecError for a bad name or value."""
        given = dict(params or {})
        fraction = check_subsample(given.pop("subsample", 1.0), self.name)
        return {**super().resolve_params(given, task), "subsample": fraction}

    def fit(self, request: FitRequest, params: dict[str, Any]) -> BoosterLearner:
        """Return a one-round booster on the rows in bag; num_leaves defaults to 2**max_depth (all leaves a depth allows)."""
        native = {k: v for k, v in params.items() if k != "subsample"}
        native.update(num_boost_round=1, learning_rate=1.0)
        if native.get("num_leaves") is None:
            native["num_leaves"] = default_leaves(native.get("max_depth"))
        if request.loss.lightgbm_objective == "poisson":
            # LightGBM damps Poisson leaves (curvature taken at exp(F + 0.7)); it needs a step above 0,
            # and 1e-12 gives Newton leaves to a relative 1e-12
            native.setdefault("poisson_max_delta_step", 1e-12)
        learner = train_booster(request, native, self.name, reuse_bins=True)
        if learner.tree is None:
            learner.tree = read_tree(learner.booster.model_to_string())
        return learner

    def load(self, artifact: Artifact) -> BoosterLearner:
        """Return the stage's booster stored in ``artifact``, its tree read for predicting in numpy."""
        learner = super().load(artifact)
        learner.tree = read_tree(learner.booster.model_to_string())
        return learner


register(HistTreeKind())
