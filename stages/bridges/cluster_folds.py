"""K-fold validation of a chain on a Dask cluster: one track per fold, as in memory (stages/tracks.py).

The fold of a row comes from the hash of its label (``cluster_rows.fold_codes``), the same whatever
the partitioning. A fold track is the chain fit on the fitting rows of the other folds and scored
on its own fold's rows, out of fold. Here a fold track is the chain's rows with the held-out
fold's rows given the validation code (a k-fold chain has no holdout rows of its own), so that
``part_rows(..., TRAIN)`` is the track's fitting rows and ``part_rows(..., VALID)`` its held rows:
every stage kind fits a fold track exactly as it fits the main one (``cluster_fit``), and its
out-of-fold scores are the validation part's sums. A track's sample is the chain's sample less the
held fold's rows. Each track's output is an (n, 1) Dask array over every row, persisted.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np

from ..fitting import Stage
from .cluster_rows import TRAIN, VALID, ClusterRows, _count


def fold_track_rows(rows: ClusterRows, fold: int) -> ClusterRows:
    """Return the rows of the track of ``fold`` (0-based): the fold's fitting rows recoded as
    validation rows, the sample without them; persisted on the workers."""
    import dask
    import dask.array as da

    assert rows.fold is not None and rows.fold_counts is not None and rows.sampled is not None
    held = (rows.fold == fold) & (rows.part == TRAIN)
    part = da.where(held, np.int8(VALID), rows.part).astype(np.int8)
    sampled = rows.sampled & ~held
    part, sampled = dask.persist(part, sampled)
    counts = rows.counts.copy()
    counts[:, TRAIN] -= rows.fold_counts[:, fold]
    counts[:, VALID] += rows.fold_counts[:, fold]
    sample_counts = sampled.map_blocks(_count, chunks=(1,), dtype=np.int64).compute()
    return replace(rows, part=part, counts=counts, sampled=sampled, sample_counts=sample_counts)


def fold_track_sample(sample: tuple[np.ndarray, np.ndarray], sample_folds: np.ndarray,
                      fold: int) -> tuple[np.ndarray, np.ndarray]:
    """Return the chain's sample (X, y) without the rows of ``fold``, in the same order."""
    keep = sample_folds != fold
    return sample[0][keep], sample[1][keep]


def merge_tracks(fits: list[Stage], rng_before: tuple[Any, ...], rng_after: tuple[Any, ...]) -> Stage:
    """Return one stage of every track from each track's own fit (the main track's first): its
    learners, scales and outputs per track, the main track's rule and notes, the streams of all."""
    main = fits[0]
    return replace(main, learners=tuple(f.learners[0] for f in fits), scales=tuple(f.scales[0] for f in fits),
                   outputs=tuple(f.outputs[0] for f in fits), fit_seconds=sum(f.fit_seconds for f in fits),
                   rng_before=rng_before, rng_after=rng_after)
