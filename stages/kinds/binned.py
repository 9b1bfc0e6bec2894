"""Binned data kept between LightGBM fits on the same rows, so repeated one-tree stages bin once.

Binning the features (LightGBM's ``Dataset``) costs far more than growing one tree: at a
million rows it is most of a ``hist_tree`` stage's time. Every stage of a chain reads the same
feature matrix, so the binned form of one block of rows is kept here, keyed by the identity of
the array it came from (held by weak reference: the entry goes when the matrix goes), its
position, shape and strides, the categorical columns and every LightGBM parameter but the seed.
Each fit then sets its own label and offset. Bins do not depend on the stage's seed: the
sample LightGBM bins from is drawn with a fixed ``data_random_seed``.
"""

from __future__ import annotations

import threading
import weakref
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Any

import numpy as np

#: the seed of LightGBM's binning sample (its own default) for kinds that reuse bins
BIN_SEED = 1
#: how many binned blocks are kept at most (a k-fold chain has k + 1 blocks)
MAX_ENTRIES = 8

_ENTRIES: OrderedDict[tuple, _Entry] = OrderedDict()
_LOCK = threading.Lock()


@dataclass(eq=False)
class BinnedData:
    """One block of rows in LightGBM's binned form; hold ``lock`` while fitting on it."""

    dataset: Any
    lock: threading.Lock = field(default_factory=threading.Lock)
    #: the booster later stages grow one round each on (``one_round.Grower``), None until one does
    grower: Any = None

    def with_target(self, label: np.ndarray, init_score: np.ndarray, weight: np.ndarray | None = None) -> Any:
        """Return the binned dataset with this fit's label, offset ((n, K) for K raw scores) and row
        weights set (the rows of one matrix are one chain's, whose weights every stage shares).

        A booster kept on the dataset read the label it had, so it goes."""
        self.grower = None
        self.dataset.set_label(label)
        self.dataset.set_init_score(init_score)
        if weight is not None:
            self.dataset.set_weight(weight)
        return self.dataset


def _owner(X: np.ndarray) -> np.ndarray:
    while isinstance(X.base, np.ndarray):
        X = X.base
    return X


def _key(X: np.ndarray, categorical: list[int], params: dict[str, Any]) -> tuple:
    owner = _owner(X)
    settings = tuple(sorted((k, repr(v)) for k, v in params.items() if k != "seed"))
    return (id(owner), X.__array_interface__["data"][0], X.shape, X.strides, X.dtype.str, tuple(categorical), settings)


def binned(X: np.ndarray, categorical: list[int], params: dict[str, Any]) -> BinnedData:
    """Return the binned form of ``X`` under ``params``, from the store or freshly binned."""
    import lightgbm

    key = _key(X, categorical, params)
    owner = _owner(X)
    with _LOCK:
        entry = _ENTRIES.get(key)
        if entry is not None and entry.owner() is owner:
            _ENTRIES.move_to_end(key)
            return entry.data
    dataset_params = {k: v for k, v in params.items() if k != "seed"}
    dataset = lightgbm.Dataset(X, categorical_feature=categorical, params=dataset_params, free_raw_data=True)
    dataset.construct()
    data = BinnedData(dataset)
    with _LOCK:
        _ENTRIES[key] = _Entry(weakref.ref(owner), data)
        weakref.finalize(owner, _forget, key)
        while len(_ENTRIES) > MAX_ENTRIES:
            _ENTRIES.popitem(last=False)
    return data


@dataclass(eq=False)
class _Entry:
    owner: weakref.ref
    data: BinnedData


def _forget(key: tuple) -> None:
    with _LOCK:
        _ENTRIES.pop(key, None)


def clear() -> None:
    """Forget every binned block (frees their memory)."""
    with _LOCK:
        _ENTRIES.clear()
