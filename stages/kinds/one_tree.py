"""The prediction of a one-tree LightGBM booster over a float64 matrix, in numpy, to the same bits.

A ``hist_tree`` stage predicts every row of its track once it is grown. LightGBM's own predict
walks the tree row by row after copying each row into a buffer: for a shallow tree on a large
matrix that cost more than growing the tree. Here the rows are sent down the tree a node at a
time, with LightGBM's own rule for a numeric split (LightGBM ``Tree::NumericalDecision``):

- a value with ``|v| <= 1e-35`` is read as 0, as LightGBM's dense-row reader does;
- NaN counts as 0 unless the split's missing type is NaN;
- a missing value (NaN for missing type NaN, zero for missing type Zero) goes the default way;
- otherwise ``v <= threshold`` goes left.

Leaf values and thresholds come from the model text, which LightGBM writes with 17 significant
digits, so they are the booster's doubles exactly; the output is ``0.0 + leaf``, as LightGBM
sums a single tree. A tree with a categorical split or linear leaves is not read here
(``read_tree`` returns None) and keeps LightGBM's predict.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: LightGBM's kZeroThreshold: |v| at or below it is zero
ZERO = 1e-35
_CATEGORICAL, _DEFAULT_LEFT = 1, 2
_MISSING_ZERO, _MISSING_NAN = 1, 2


@dataclass(frozen=True)
class OneTree:
    """A numeric LightGBM tree: per internal node its feature, threshold, decision bits and children
    (a child below 0 is leaf ``~child``), and the leaf values."""

    feature: np.ndarray
    threshold: np.ndarray
    decision: np.ndarray
    left: np.ndarray
    right: np.ndarray
    leaf_value: np.ndarray
    n_features: int

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return the tree's value for every row of ``X`` (float64, n x n_features), as LightGBM predicts it."""
        if X.ndim != 2 or X.shape[1] != self.n_features:
            raise ValueError(f"the tree reads {self.n_features} features, not an array of shape {X.shape}")
        out = np.empty(X.shape[0], dtype=np.float64)
        if len(self.feature) == 0:
            out[:] = 0.0 + self.leaf_value[0]
            return out
        special: dict[int, np.ndarray | None] = {}
        pending: list[tuple[int, np.ndarray | None]] = [(0, None)]   # (node, the rows that reach it; None: all)
        while pending:
            node, reach = pending.pop()
            feature = int(self.feature[node])
            if feature not in special:
                usual = np.abs(X[:, feature]) > ZERO   # False for NaN and for values read as zero
                special[feature] = None if usual.all() else ~usual
            left = _goes_left(X[:, feature], int(self.decision[node]), float(self.threshold[node]), special[feature])
            for child, chosen in ((self.left[node], left), (self.right[node], ~left)):
                rows = chosen if reach is None else reach & chosen
                if child < 0:
                    out[rows] = 0.0 + self.leaf_value[~child]
                else:
                    pending.append((int(child), rows))
        return out


def _goes_left(values: np.ndarray, decision: int, threshold: float, special: np.ndarray | None) -> np.ndarray:
    """Return which rows a numeric split sends left; ``special`` marks the NaN and zero-like values."""
    left = values <= threshold
    if special is None:
        return left
    odd = np.flatnonzero(special)
    value = values[odd]
    nan = np.isnan(value)
    value = np.where(nan | (np.abs(value) <= ZERO), 0.0, value)   # NaN counts as 0 unless missing is NaN
    missing_type = (decision >> 2) & 3
    if missing_type == _MISSING_NAN:
        missing = nan
    elif missing_type == _MISSING_ZERO:
        missing = np.ones(len(odd), dtype=bool)    # every special value reads as zero here
    else:
        missing = np.zeros(len(odd), dtype=bool)
    left[odd] = np.where(missing, bool(decision & _DEFAULT_LEFT), value <= threshold)
    return left


def read_tree(model_text: str) -> OneTree | None:
    """Return the one tree of a LightGBM model text, or None when the text holds another model
    (several trees or classes, a categorical split, linear leaves) that LightGBM must predict itself."""
    header, _, rest = model_text.partition("\nTree=0\n")
    if not rest or "\nTree=1\n" in rest:
        return None
    fields = _fields(header)
    if fields.get("num_tree_per_iteration", "1") != "1" or "max_feature_idx" not in fields:
        return None
    tree = _fields(rest.partition("\nend of trees")[0])
    if tree.get("num_cat", "0") != "0" or tree.get("is_linear", "0") != "0":
        return None
    leaves = int(tree["num_leaves"])
    leaf_value = np.array(tree["leaf_value"].split(), dtype=np.float64)
    if leaves == 1:
        empty = np.zeros(0, dtype=np.int64)
        return OneTree(empty, np.zeros(0), empty, empty, empty, leaf_value, int(fields["max_feature_idx"]) + 1)
    decision = np.array(tree["decision_type"].split(), dtype=np.int64)
    if (decision & _CATEGORICAL).any():
        return None
    return OneTree(
        feature=np.array(tree["split_feature"].split(), dtype=np.int64),
        threshold=np.array(tree["threshold"].split(), dtype=np.float64), decision=decision,
        left=np.array(tree["left_child"].split(), dtype=np.int64),
        right=np.array(tree["right_child"].split(), dtype=np.int64),
        leaf_value=leaf_value, n_features=int(fields["max_feature_idx"]) + 1,
    )


def _fields(text: str) -> dict[str, str]:
    out = {}
    for line in text.splitlines():
        key, sep, value = line.partition("=")
        if sep:
            out[key] = value
    return out
