"""The rows of a chain on a Dask cluster: features, target and part of every row, left on the workers.

Which part a row is in comes from a hash of its row label (``row_uniform``), so a row is in the
same part whatever the partitioning. The features, target and parts are Dask arrays chunked like
the partitions and persisted on the workers; the number of rows of each part in each chunk is
known here, so the rows of one part are a Dask array of known chunks (``part_rows``) without a
shuffle. Only small things come to this machine: counts, sums, the sample (``sample``) and the
small factors of the least squares.

Dask is imported inside the functions: this module imports without it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..errors import DataError, RemnantError
from ..schema import NUMERIC, ColumnInfo, Schema

SPLIT_SALT = 0x5EED_0001
SAMPLE_SALT = 0x5EED_0002
#: the part codes of the ``part`` array
TRAIN, VALID, TEST = 0, 1, 2
#: rows pulled to this machine for the sample a stage fits on, unless the recipe says otherwise
DEFAULT_SAMPLE_ROWS = 200_000
#: bins per feature of the codes LightGBM trains on over a cluster
N_BINS = 64


class ClusterError(RemnantError):
    """A cluster cannot be reached or used: Dask is missing, the address is wrong, a worker went away."""


def require_dask() -> None:
    """Raise ClusterError naming the extra to install when Dask (distributed, dask.dataframe) is missing."""
    try:
        import dask.dataframe  # noqa: F401
        import distributed  # noqa: F401
    except ImportError as exc:
        raise ClusterError(f"running on a cluster needs Dask, which is not installed ({exc.name or exc}): "
                           "pip install 'remnant[dask]'") from None


def row_uniform(labels: np.ndarray, seed: int, salt: int) -> np.ndarray:
    """Return one number in [0, 1) per integer row label, from a splitmix64 hash of label, seed and salt."""
    with np.errstate(over="ignore"):
        z = np.asarray(labels).astype(np.uint64) + np.uint64((seed * 0x9E3779B97F4A7C15 + salt) % 2**64)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z >> np.uint64(11)).astype(np.float64) / 2.0**53


def part_codes(labels: np.ndarray, fraction: float, test_fraction: float, seed: int) -> np.ndarray:
    """Return the part of each row label: TEST below ``test_fraction`` of the hash, VALID for the next
    ``fraction``, TRAIN for the rest (int8)."""
    u = row_uniform(labels, seed, SPLIT_SALT)
    codes = np.full(len(u), TRAIN, dtype=np.int8)
    codes[u < test_fraction + fraction] = VALID
    codes[u < test_fraction] = TEST
    return codes


def fold_codes(labels: np.ndarray, folds: int, seed: int) -> np.ndarray:
    """Return the fold (0 to folds - 1) of each row label, from the same hash stream as the parts."""
    u = row_uniform(labels, seed, SPLIT_SALT + 1)
    return np.minimum((u * folds).astype(np.int8), folds - 1).astype(np.int8)


def in_sample(labels: np.ndarray, share: float, seed: int) -> np.ndarray:
    """Return True for the rows whose label's hash falls below ``share``: the sample, whatever the partitioning."""
    return row_uniform(labels, seed, SAMPLE_SALT) < share


def numeric_schema(meta: pd.DataFrame, target: str, features: list[str] | None, ignore: tuple[str, ...]) -> Schema:
    """Return the schema of the numeric features of a Dask frame's ``meta``; raise DataError for a
    missing target or a feature that is not a number (categories stay with the in-memory engine)."""
    if target not in meta.columns:
        raise DataError(f"target {target!r} is not a column of the data ({', '.join(map(str, meta.columns[:8]))})")
    names = list(features) if features else [c for c in meta.columns if c != target and c not in ignore]
    columns = []
    for name in names:
        if name not in meta.columns:
            raise DataError(f"feature {name!r} is not a column of the data")
        dtype = meta[name].dtype
        if not (pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)):
            raise DataError(f"feature {name!r} is {dtype}: a chain on a cluster takes numeric features only "
                            "for now (leave it out with ignore, or fit on one machine)")
        columns.append(ColumnInfo(str(name), NUMERIC, str(dtype)))
    if not columns:
        raise DataError("the data has no feature columns besides the target")
    if not pd.api.types.is_numeric_dtype(meta[target].dtype):
        raise DataError(f"target {target!r} is {meta[target].dtype}: a chain on a cluster fits numeric targets "
                        "(regression) for now")
    return Schema(tuple(columns), target, "regression")


@dataclass
class ClusterRows:
    """Every row of a chain on the workers: ``X`` (n, p) float64, ``y``, ``labels`` and ``part``,
    chunked alike; ``counts[c, k]`` rows of part k in chunk c; ``fold`` per row for k-fold, else None."""

    X: Any
    y: Any
    labels: Any
    part: Any
    counts: np.ndarray
    fold: Any = None
    fold_counts: np.ndarray | None = None
    sampled: Any = None
    sample_counts: np.ndarray | None = None
    #: other columns of the data asked for by name (an exposure), float64 vectors chunked like the rows
    columns: dict[str, Any] = field(default_factory=dict)

    @property
    def chunks(self) -> tuple[int, ...]:
        """Return the rows of each chunk."""
        return tuple(int(c) for c in self.X.chunks[0])

    def n_part(self, code: int) -> int:
        """Return the number of rows of part ``code``."""
        return int(self.counts[:, code].sum())

    def part_rows(self, array: Any, code: int, fold: int | None = None, keep: bool = True) -> Any:
        """Return the rows of ``array`` (a Dask array chunked like the rows) in part ``code``, as a Dask
        array of known chunks. With ``fold``, the rows of that fold (``keep``) or of the other folds."""
        if fold is None:
            return take(array, self.part == code, self.counts[:, code])
        assert self.fold is not None and self.fold_counts is not None
        per = self.fold_counts[:, fold] if keep else self.counts[:, code] - self.fold_counts[:, fold]
        mask = (self.part == code) & ((self.fold == fold) if keep else (self.fold != fold))
        return take(array, mask, per)

    def sample(self, rows: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
        """Return about ``rows`` fitting rows pulled here (X, y), chosen by the hash of their labels (all
        fitting rows when there are fewer); ``sampled`` and ``sample_counts`` then say where they are."""
        import dask

        share = min(1.0, rows / max(1, self.n_part(TRAIN)))
        chosen = self.labels.map_blocks(in_sample, share, seed, dtype=bool) & (self.part == TRAIN)
        (self.sampled,) = dask.persist(chosen)
        self.sample_counts = self.sampled.map_blocks(_count, chunks=(1,), dtype=np.int64).compute()
        X_s, y_s = dask.compute(self.sampled_rows(self.X), self.sampled_rows(self.y))
        return np.asarray(X_s, dtype=np.float64), np.asarray(y_s, dtype=np.float64)

    def sampled_rows(self, array: Any) -> Any:
        """Return the rows of ``array`` in the sample (after ``sample``), as a Dask array of known chunks."""
        assert self.sample_counts is not None, "sample() comes first"
        return take(array, self.sampled, self.sample_counts)


def take(array: Any, mask: Any, sizes: np.ndarray) -> Any:
    """Return the rows of the Dask array ``array`` where the Dask vector ``mask`` (chunked alike) is True,
    ``sizes[c]`` of them in chunk c: a Dask array of known chunks, with no shuffle."""
    import dask.array as da

    chunks = (tuple(int(c) for c in sizes), *array.chunks[1:])
    return da.map_blocks(_take, array, mask if array.ndim == 1 else mask[:, None], chunks=chunks,
                         dtype=array.dtype, meta=np.empty((0,) * array.ndim, dtype=array.dtype))


def _take(block: np.ndarray, mask: np.ndarray) -> np.ndarray:
    return block[mask.reshape(-1)] if block.ndim == 1 else block[mask[:, 0]]


def build_rows(frame: Any, schema: Schema, *, fraction: float, test_fraction: float, seed: int,
               folds: int = 0, row_id: str | None = None, columns: tuple[str, ...] = ()) -> ClusterRows:
    """Return the rows of a Dask DataFrame on the workers, persisted: features in schema order as
    float64, the target, each row's label (the ``row_id`` column, else the frame's integer index,
    else its position in the data), its part and fold, and the named other ``columns`` as float64."""
    import dask
    import dask.array as da

    # persisted first: Dask's planner may otherwise regroup the partitions of each projection differently
    frame = frame.persist()
    lengths = tuple(int(n) for n in frame.map_partitions(len).compute())
    if sum(lengths) == 0:
        raise DataError("the data has no rows")
    X = frame[schema.names].to_dask_array(lengths=lengths).astype(np.float64)
    y = frame[schema.target].to_dask_array(lengths=lengths).astype(np.float64)
    if row_id is not None:
        labels = frame[row_id].to_dask_array(lengths=lengths).astype(np.int64)
    elif pd.api.types.is_integer_dtype(frame.index.dtype) and frame.known_divisions:
        labels = frame.index.to_dask_array(lengths=lengths).astype(np.int64)
    else:  # the row's place in the data: the same whatever the partitioning
        labels = da.arange(sum(lengths), chunks=(lengths,), dtype=np.int64)
    extra = {name: frame[name].to_dask_array(lengths=lengths).astype(np.float64) for name in columns}
    part = labels.map_blocks(part_codes, fraction, test_fraction, seed, dtype=np.int8)
    fold = labels.map_blocks(fold_codes, folds, seed, dtype=np.int8) if folds else None
    X, y, labels, part, extra = dask.persist(X, y, labels, part, extra)
    del frame  # the arrays hold the rows now; the frame's partitions can go
    if fold is not None:
        (fold,) = dask.persist(fold)
    per_part = part.map_blocks(_part_counts, chunks=((3,) * len(lengths),), dtype=np.int64)
    bad, counts = dask.compute(da.isnan(y).sum(), per_part)
    counts = np.asarray(counts).reshape(-1, 3)
    fold_counts = None
    if fold is not None:
        fold_counts = np.stack([((part == TRAIN) & (fold == f)).map_blocks(_count, chunks=(1,), dtype=np.int64)
                                .compute() for f in range(folds)], axis=1)
    if bad:
        raise DataError(f"target {schema.target!r} has {bad:,} missing values; every row needs a target")
    return ClusterRows(X, y, labels, part, counts, fold, fold_counts, columns=extra)


def _part_counts(block: np.ndarray) -> np.ndarray:
    return np.bincount(block.astype(np.intp), minlength=3)[:3].astype(np.int64)


def _count(block: np.ndarray) -> np.ndarray:
    return np.array([int(np.count_nonzero(block))], dtype=np.int64)
