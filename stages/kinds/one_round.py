"""Growing one ``hist_tree`` stage as one more round of a booster kept beside the binned rows.

A one-round ``lightgbm.train`` per stage builds a new booster each time, and building one lays
the binned rows out again for row-wise histograms: at 200,000 rows that took longer than the
tree. Stages on the same binned rows with the same parameters (the everyday ``g`` of many small
trees) instead share one booster, kept with the binned rows (``binned.BinnedData.grower``):
each stage hands it the gradients at the chain's current output and grows one more tree.

Only where the result is the same bits as a fresh booster's (``tests/engine/test_one_round.py``
checks outputs and model text against the one-round ``lightgbm.train``):

- squared loss (LightGBM's ``regression`` objective, one output): its gradient is
  ``float32(raw - float32(y))`` (times the row weight, the hessian being the weight or 1), as
  LightGBM's ``RegressionL2loss::GetGradients`` computes it from the ``init_score`` and label;
  a fresh booster starting from ``init_score`` does not boost from the average, and no leaf is
  renewed;
- every row of the block (no subsample), one round at learning rate 1, and nothing drawn at
  random in the tree (no bagging, feature fraction below 1 or extra trees), so the tree does
  not depend on how many trees the booster grew before it or on its seed; each stage's seed is
  still set before its round, and its model text is the round's tree with the stage's parameters.

A round that grows no split (all rows alike) goes back to the one-round fit, which makes the
constant tree LightGBM makes first. The stage's learner is a booster of its own tree only.
"""

from __future__ import annotations

import ctypes
from typing import Any

import numpy as np

from .base import FitRequest
from .one_tree import OneTree, read_tree

#: parameters under which a tree depends on nothing drawn at random, and their neutral values
_NOT_RANDOM = {"feature_fraction": 1.0, "feature_fraction_bynode": 1.0, "extra_trees": False,
               "bagging_fraction": 1.0, "bagging_freq": 0, "linear_tree": False}


class Grower:
    """A booster on one binned block, grown a round per stage from gradients given to it."""

    def __init__(self, booster: Any, settings: dict[str, Any]) -> None:
        self.booster = booster
        self.settings = settings
        self.rounds = 0
        self.score = training_score(booster)   # LightGBM's own sum of the trees so far, per row

    def tree_values(self, tree: OneTree | None) -> np.ndarray | None:
        """Return the last tree's value on every row it was grown on, read from LightGBM's training
        score, or None when that cannot be told apart exactly (then the tree predicts the rows).

        LightGBM adds each row's leaf value to its training score (``ScoreUpdater::AddScore``): the
        change in the score is that value up to rounding, and it names the leaf whenever distinct
        leaf values lie further apart than the rounding. The value returned is the leaf's own.
        """
        before, after = self.score, training_score(self.booster)
        self.score = after
        if tree is None:
            return None
        leaves = np.unique(tree.leaf_value)
        change = after - before
        if len(leaves) == 1:
            return np.full(len(change), 0.0 + leaves[0])
        # each subtraction and addition rounds by at most half an ulp of its result
        tolerance = 4 * np.finfo(np.float64).eps * (max(np.abs(before).max(), np.abs(after).max()) + np.abs(leaves).max())
        if np.diff(leaves).min() <= 2 * tolerance:
            return None
        leaf = np.zeros(len(change), dtype=np.intp)
        for middle in (leaves[:-1] + leaves[1:]) / 2:   # a tree has few leaves: a pass each beats a search
            leaf += change > middle
        values = leaves[leaf]
        if not np.all(np.abs(change - values) <= tolerance):
            return None
        return 0.0 + values


def training_score(booster: Any) -> np.ndarray:
    """Return a copy of LightGBM's raw training score of ``booster`` (one value per row; one output)."""
    import lightgbm

    length = ctypes.c_int64(0)
    lightgbm.basic._safe_call(lightgbm.basic._LIB.LGBM_BoosterGetNumPredict(booster._handle, ctypes.c_int(0),
                                                                             ctypes.byref(length)))
    out = np.empty(length.value, dtype=np.float64)
    lightgbm.basic._safe_call(lightgbm.basic._LIB.LGBM_BoosterGetPredict(
        booster._handle, ctypes.c_int(0), ctypes.byref(length), out.ctypes.data_as(ctypes.POINTER(ctypes.c_double))))
    return out


def can_grow(request: FitRequest, native: dict[str, Any], rounds: int) -> bool:
    """Return True when the stage may be grown as one more round of a shared booster (see the module)."""
    if rounds != 1 or request.in_bag is not None or request.outputs != 1:
        return False
    if native.get("objective") != "regression" or native.get("learning_rate") != 1.0:
        return False
    if native.get("boosting", "gbdt") != "gbdt" or native.get("data_sample_strategy", "bagging") != "bagging":
        return False
    return all(native.get(name, neutral) in (neutral, None) for name, neutral in _NOT_RANDOM.items())


def gradients(request: FitRequest) -> tuple[np.ndarray, np.ndarray]:
    """Return LightGBM's squared-loss gradients and hessians at ``request.raw`` (float32, as it computes them)."""
    label = np.asarray(request.y, dtype=np.float32).astype(np.float64)
    difference = np.asarray(request.raw, dtype=np.float64) - label
    if request.weight is None:
        return difference.astype(np.float32), np.ones(len(label), dtype=np.float32)
    weight = np.asarray(request.weight, dtype=np.float32)
    return (difference * weight.astype(np.float64)).astype(np.float32), weight.copy()


#: the seeds a stage's parameters may set explicitly; the others LightGBM derives from ``seed``
_SEEDS = ("seed", "data_random_seed", "bagging_seed", "feature_fraction_seed", "extra_seed", "drop_seed",
          "objective_seed")


def grow_round(shared: Any, request: FitRequest, native: dict[str, Any]) -> tuple[Any, OneTree | None,
                                                                                 np.ndarray | None] | None:
    """Return the booster of one new tree grown on the shared booster of ``shared`` (a BinnedData),
    its tree read for numpy (``one_tree``), and its value on every fitting row (None when unknown);
    None when the round grew no split. Hold ``shared.lock``."""
    import lightgbm

    settings = {**native, "num_iterations": 1}
    unseeded = {k: v for k, v in settings.items() if k != "seed"}
    grower = shared.grower
    if grower is None or grower.settings != unseeded:
        train_set = shared.with_target(request.y, request.raw, request.weight)
        # gradients come from here, so LightGBM's own objective is set aside ("none")
        grower = Grower(lightgbm.Booster(params={**settings, "objective": "none"}, train_set=train_set), unseeded)
        shared.grower = grower
    grower.booster.reset_parameter({k: settings[k] for k in _SEEDS if k in settings})
    grad, hess = gradients(request)
    finished = ctypes.c_int(0)
    lightgbm.basic._safe_call(lightgbm.basic._LIB.LGBM_BoosterUpdateOneIterCustom(
        grower.booster._handle, grad.ctypes.data_as(ctypes.POINTER(ctypes.c_float)),
        hess.ctypes.data_as(ctypes.POINTER(ctypes.c_float)), ctypes.byref(finished)))
    if finished.value:  # no split: LightGBM grew no tree; the one-round fit makes the constant one
        shared.grower = None
        return None
    text = as_regression(grower.booster.model_to_string(start_iteration=grower.rounds, num_iteration=1))
    grower.rounds += 1
    tree = read_tree(text)
    return lightgbm.Booster(model_str=text), tree, grower.tree_values(tree)


def as_regression(text: str) -> str:
    """Return the model text of a tree grown from given gradients as LightGBM writes a squared-loss
    booster's: the header's objective line, and the objective and metric among the parameters."""
    head, sep, tail = text.partition("\nfeature_names=")
    text = f"{head}\nobjective=regression{sep}{tail}"
    return text.replace("\n[objective: custom]\n", "\n[objective: regression]\n", 1).replace(
        "\n[metric: custom]\n", "\n[metric: l2]\n", 1)
