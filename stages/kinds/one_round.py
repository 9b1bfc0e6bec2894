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

The tree's value on every row comes from LightGBM's own scores, not from predicting: its
training score for the fitting rows, and for the track's other rows (validation and test, when
they are one block of the matrix: ``FitRequest.others``) the score of a validation set the booster
keeps, binned once with the fitting rows' bins, as ``lightgbm.train`` keeps one for ``valid_sets``.
On binned rows a split ``bin <= threshold bin`` is ``value <= threshold`` on the value, since the
threshold is its bin's upper bound (NaN and zero-like values take their own bins), so these are
the bits the numpy walk and LightGBM's predict give (``tests/engine/test_one_round.py`` compares
them, NaN and zeros included). The value is told from the change in the score (``leaf_values``);
where leaves lie too close to tell apart, those rows are predicted.
"""

from __future__ import annotations

import ctypes
import weakref
from dataclasses import dataclass
from typing import Any

import numpy as np

from .base import FitRequest
from .one_tree import OneTree, read_tree

#: parameters under which a tree depends on nothing drawn at random, and their neutral values
_NOT_RANDOM = {"feature_fraction": 1.0, "feature_fraction_bynode": 1.0, "extra_trees": False,
               "bagging_fraction": 1.0, "bagging_freq": 0, "linear_tree": False}


class Grower:
    """A booster on one binned block, grown a round per stage from gradients given to it.

    ``others`` names the rows the stage also predicts after its fit (the track's validation and
    test rows, ``FitRequest.others``) when LightGBM keeps them as a validation set of the booster,
    binned once with the fitting rows' bins; None when it does not."""

    def __init__(self, booster: Any, settings: dict[str, Any], others: RowsOf | None = None) -> None:
        self.booster = booster
        self.settings = settings
        self.rounds = 0
        self.others = others
        # the label as LightGBM reads it (float32, widened), the gradient buffer and the hessians of
        # unweighted rows (all 1), kept while the rounds are fit on the same target rows
        self._label: tuple[RowsOf, np.ndarray, np.ndarray, np.ndarray] | None = None
        # LightGBM's own sum of the trees so far, per row: the fitting rows, then the other rows
        self.scores = [RunningScore(booster, 0)] + ([RunningScore(booster, 1)] if others is not None else [])

    def gradients(self, request: FitRequest) -> tuple[np.ndarray, np.ndarray]:
        """Return the unweighted squared-loss gradients ``float32(raw - float32(y))`` and hessians (1) at
        ``request.raw``, as ``gradients`` computes them, in buffers kept from round to round."""
        if self._label is None or not self._label[0].holds(request.y):
            n = len(request.y)
            label = np.asarray(request.y, dtype=np.float32).astype(np.float64)
            self._label = (RowsOf(request.y), label, np.empty(n, dtype=np.float32), np.ones(n, dtype=np.float32))
        _, label, grad, ones = self._label
        # computed in float64 and rounded once to float32, as astype(np.float32) rounds the difference
        np.subtract(np.asarray(request.raw, dtype=np.float64), label, out=grad, casting="same_kind")
        return grad, ones

    def tree_values(self, tree: OneTree | None, with_others: bool) -> tuple[np.ndarray | None, np.ndarray | None,
                                                                             np.ndarray | None]:
        """Return the last tree's value on every fitting row, on every other row (when kept and
        ``with_others``), and on both in one array (fitting rows first; when both are known), each
        None when it cannot be told apart exactly from the change in LightGBM's score (then the
        tree predicts those rows)."""
        fit_score = self.scores[0]
        other_score = self.scores[1] if len(self.scores) > 1 else None
        n_fit = len(fit_score.values)
        whole = np.empty(n_fit + (len(other_score.values) if other_score is not None and with_others else 0))
        on_fit = fit_score.last_tree(tree, out=whole[:n_fit])
        on_others = None
        if other_score is not None:   # read every round, so the next round's change is its tree alone
            on_others = other_score.last_tree(tree, out=whole[n_fit:] if with_others else None)
        if not with_others:
            on_others = None
        return on_fit, on_others, whole if on_fit is not None and on_others is not None else None


class RunningScore:
    """LightGBM's raw score of one data set of a booster (0: the training rows, 1: its validation set),
    read after each round into buffers kept from round to round."""

    def __init__(self, booster: Any, index: int) -> None:
        self.booster, self.index = booster, index
        self.values = read_score(booster, index)
        self.spare = np.empty_like(self.values)
        self.largest = _largest(self.values)

    def last_tree(self, tree: OneTree | None, out: np.ndarray | None = None) -> np.ndarray | None:
        """Return the value of the tree grown since the last read on each row (``leaf_values``; in
        ``out`` when given), or None."""
        before, after = self.values, read_score(self.booster, self.index, out=self.spare)
        self.values, self.spare = after, before
        largest_before, self.largest = self.largest, _largest(after)
        largest = max(largest_before, self.largest)
        if tree is None:
            return None
        return leaf_values(before, after, tree.leaf_value, largest, scratch=before, out=out)


def leaf_values(before: np.ndarray, after: np.ndarray, leaf_value: np.ndarray, largest: float | None = None,
                scratch: np.ndarray | None = None, out: np.ndarray | None = None) -> np.ndarray | None:
    """Return the leaf value of the tree LightGBM added to a score between ``before`` and ``after``
    on every row, or None when that cannot be told apart exactly.

    LightGBM adds each row's leaf value to its score (``ScoreUpdater::AddScore``): the change in
    the score is that value up to rounding, and it names the leaf whenever distinct leaf values
    lie further apart than the rounding. The value returned is the leaf's own (``0.0 + leaf``, as
    LightGBM sums one tree). ``largest`` bounds ``|before|`` and ``|after|`` (found when None);
    ``scratch`` (may be ``before``) takes the change, so no temporary of the rows' size is made;
    the values are written into ``out`` when given.
    """
    values = np.empty(len(after)) if out is None else out
    leaves = np.unique(leaf_value)
    if len(leaves) == 1:
        values[:] = 0.0 + leaves[0]
        return values
    if largest is None:
        largest = max(_largest(before), _largest(after))
    # each subtraction and addition rounds by at most half an ulp of its result
    tolerance = 4 * np.finfo(np.float64).eps * (largest + np.abs(leaves).max())
    if not np.diff(leaves).min() > 2 * tolerance:
        return None
    change = np.subtract(after, before, out=scratch)
    # a tree has few leaves: a pass a leaf over one byte a row beats a search
    leaf: np.ndarray = np.zeros(len(change), dtype=np.uint8 if len(leaves) <= 256 else np.intp)
    above = np.empty(len(change), dtype=bool)
    for middle in (leaves[:-1] + leaves[1:]) / 2:
        np.greater(change, middle, out=above)
        np.add(leaf, above, out=leaf)
    np.take(0.0 + leaves, leaf, out=values, mode="clip")   # every code is a leaf; "clip" writes in place
    np.subtract(change, values, out=change)
    np.abs(change, out=change)
    if not change.max() <= tolerance:
        return None
    return values


def _largest(values: np.ndarray) -> float:
    """Return max |value| (NaN when a value is NaN), without a temporary of the values' size."""
    if not len(values):
        return 0.0
    return max(float(values.max()), -float(values.min()))


def read_score(booster: Any, index: int = 0, out: np.ndarray | None = None) -> np.ndarray:
    """Return LightGBM's raw score of ``booster`` on its data set ``index`` (0: the training rows; one
    value per row, one output), written into ``out`` when given."""
    import lightgbm

    length = ctypes.c_int64(0)
    lightgbm.basic._safe_call(lightgbm.basic._LIB.LGBM_BoosterGetNumPredict(booster._handle, ctypes.c_int(index),
                                                                             ctypes.byref(length)))
    if out is None or len(out) != length.value:
        out = np.empty(length.value, dtype=np.float64)
    lightgbm.basic._safe_call(lightgbm.basic._LIB.LGBM_BoosterGetPredict(
        booster._handle, ctypes.c_int(index), ctypes.byref(length), out.ctypes.data_as(ctypes.POINTER(ctypes.c_double))))
    return out


def training_score(booster: Any) -> np.ndarray:
    """Return a copy of LightGBM's raw training score of ``booster`` (one value per row; one output)."""
    return read_score(booster, 0)


def can_grow(request: FitRequest, native: dict[str, Any], rounds: int) -> bool:
    """Return True when the stage may be grown as one more round of a shared booster (see the module)."""
    if rounds != 1 or request.in_bag is not None or request.outputs != 1:
        return False
    if native.get("objective") != "regression" or native.get("learning_rate") != 1.0:
        return False
    if native.get("boosting", "gbdt") != "gbdt" or native.get("data_sample_strategy", "bagging") != "bagging":
        return False
    return all(native.get(name, neutral) in (neutral, None) for name, neutral in _NOT_RANDOM.items())


def gradients(request: FitRequest, grower: Grower | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Return LightGBM's squared-loss gradients and hessians at ``request.raw`` (float32, as it computes them);
    unweighted, in ``grower``'s buffers (``Grower.gradients``) when given."""
    if request.weight is None and grower is not None:
        return grower.gradients(request)
    label = np.asarray(request.y, dtype=np.float32).astype(np.float64)
    difference = np.asarray(request.raw, dtype=np.float64) - label
    if request.weight is None:
        return difference.astype(np.float32), np.ones(len(label), dtype=np.float32)
    weight = np.asarray(request.weight, dtype=np.float32)
    return (difference * weight.astype(np.float64)).astype(np.float32), weight.copy()


#: the seeds a stage's parameters may set explicitly; the others LightGBM derives from ``seed``
_SEEDS = ("seed", "data_random_seed", "bagging_seed", "feature_fraction_seed", "extra_seed", "drop_seed",
          "objective_seed")


def grow_round(shared: Any, request: FitRequest, native: dict[str, Any]) -> Round | None:
    """Return the round grown on the shared booster of ``shared`` (a BinnedData), or None when it grew
    no split. Hold ``shared.lock``."""
    import lightgbm

    settings = {**native, "num_iterations": 1}
    unseeded = {k: v for k, v in settings.items() if k != "seed"}
    grower = shared.grower
    if grower is None or grower.settings != unseeded:
        train_set = shared.with_target(request.y, request.raw, request.weight)
        # gradients come from here, so LightGBM's own objective is set aside ("none")
        booster = lightgbm.Booster(params={**settings, "objective": "none"}, train_set=train_set)
        others = None
        if request.others is not None and len(request.others):
            # the other rows binned once with the fitting rows' bins: LightGBM adds each tree to their
            # score as lightgbm.train does to a validation set's
            booster.add_valid(train_set.create_valid(request.others, params=train_set.get_params()), "others")
            others = RowsOf(request.others)
        grower = Grower(booster, unseeded, others)
        shared.grower = grower
    grower.booster.reset_parameter({k: settings[k] for k in _SEEDS if k in settings})
    grad, hess = gradients(request, grower)
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
    same_others = grower.others is not None and request.others is not None and grower.others.holds(request.others)
    return Round(text, tree, *grower.tree_values(tree, same_others))


@dataclass(frozen=True, eq=False)
class Round:
    """One round grown on a kept booster: the model text of its tree alone (what ``lightgbm.train``'s
    one-round booster writes; a booster is built from it when first needed), the tree read for numpy
    (``one_tree``; None when numpy cannot read it), and the tree's value on the fitting rows, on
    the request's other rows, and on both in one array (fitting rows first), each None when unknown."""

    text: str
    tree: OneTree | None
    on_fit_rows: np.ndarray | None
    on_other_rows: np.ndarray | None
    on_track_rows: np.ndarray | None


class RowsOf:
    """Which rows of which matrix an array views: the same rows are the same object's same memory."""

    def __init__(self, X: np.ndarray) -> None:
        owner = _owner(X)
        self.owner = weakref.ref(owner)
        self.where = _where(X)

    def holds(self, X: np.ndarray) -> bool:
        """Return True when ``X`` views the same rows of the same (living) matrix."""
        owner = _owner(X)
        return self.owner() is owner and self.where == _where(X)


def _owner(X: np.ndarray) -> np.ndarray:
    while isinstance(X.base, np.ndarray):
        X = X.base
    return X


def _where(X: np.ndarray) -> tuple:
    return (X.__array_interface__["data"][0], X.shape, X.strides, X.dtype.str)


def as_regression(text: str) -> str:
    """Return the model text of a tree grown from given gradients as LightGBM writes a squared-loss
    booster's: the header's objective line, and the objective and metric among the parameters."""
    head, sep, tail = text.partition("\nfeature_names=")
    text = f"{head}\nobjective=regression{sep}{tail}"
    return text.replace("\n[objective: custom]\n", "\n[objective: regression]\n", 1).replace(
        "\n[metric: custom]\n", "\n[metric: l2]\n", 1)
