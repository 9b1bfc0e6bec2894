"""Predicting a data set larger than memory on a Dask cluster: each partition is predicted where it
lives (``map_partitions``) by the fitted chain, which travels to each worker once, and written as
one Parquet part with the row id and the prediction."""

from __future__ import annotations

import os
import shutil
import uuid
from typing import Any

import numpy as np
import pandas as pd

from ..errors import DataError
from ..predictor import FittedChain

#: the columns of the Parquet parts ``write_predictions`` writes
ROW_ID, PREDICTION = "row_id", "prediction"


def _predict_part(part: pd.DataFrame, fitted: FittedChain, row_id: str | None, offsets: list[int] | None,
                  partition_info: dict[str, Any] | None = None) -> pd.DataFrame:
    if row_id is not None:
        ids = part[row_id].to_numpy()
    elif offsets is None:
        ids = part.index.to_numpy()
    else:  # the row's place in the data
        start = offsets[partition_info["number"]] if partition_info else 0
        ids = np.arange(start, start + len(part), dtype=np.int64)
    return pd.DataFrame({ROW_ID: ids, PREDICTION: np.asarray(fitted.predict(part), dtype=np.float64)})


def predict_partitions(fitted: FittedChain, frame: Any, row_id: str | None = None) -> Any:
    """Return a Dask DataFrame of ``row_id`` and ``prediction`` for every row of the Dask DataFrame
    ``frame``, partition by partition. The row id is the ``row_id`` column when given, else the
    frame's integer index when its divisions are known, else the row's position in the data (the
    labels a chain on a cluster gives its rows)."""
    if row_id is not None and row_id not in frame.columns:
        raise DataError(f"--id {row_id!r} is not a column of the data")
    offsets = None
    if row_id is None and not (pd.api.types.is_integer_dtype(frame.index.dtype) and frame.known_divisions):
        lengths = [int(n) for n in frame.map_partitions(len).compute()]
        offsets = [int(v) for v in np.concatenate([[0], np.cumsum(lengths)[:-1]])]
    dtype = frame[row_id].dtype if row_id is not None else (frame.index.dtype if offsets is None else np.int64)
    meta = pd.DataFrame({ROW_ID: pd.Series(dtype=dtype), PREDICTION: pd.Series(dtype=np.float64)})
    return frame.map_partitions(_predict_part, fitted, row_id, offsets, meta=meta)


def write_predictions(fitted: FittedChain, frame: Any, folder: str | os.PathLike, row_id: str | None = None) -> int:
    """Write the predictions of every row of ``frame`` as Parquet parts in the new folder ``folder``
    (one part per partition, written by the workers); return the number of parts.

    The parts go to a folder beside it, renamed to ``folder`` only when every part is written: a
    failed run leaves nothing behind. An existing ``folder`` is refused, never replaced.
    """
    target = os.path.abspath(os.fspath(folder))
    if os.path.exists(target):
        raise DataError(f"--out {os.fspath(folder)} exists; predictions go to a new folder (nothing was written)")
    partial = os.path.join(os.path.dirname(target), f".{os.path.basename(target)}.partial-{uuid.uuid4().hex[:8]}")
    predictions = predict_partitions(fitted, frame, row_id)
    try:
        predictions.to_parquet(partial, write_index=False)
        os.rename(partial, target)
    finally:
        if os.path.exists(partial):
            shutil.rmtree(partial, ignore_errors=True)
    return int(predictions.npartitions)
