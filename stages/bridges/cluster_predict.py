"""Predicting a data set larger than memory on a Dask cluster: each partition is predicted where it
lives (``map_partitions``) by the fitted chain, which travels to each worker once."""

from __future__ import annotations

import os
from typing import Any

import numpy as np
import pandas as pd

from ..predictor import FittedChain

#: the column of the row id in the Parquet parts ``write_predictions`` writes
ROW_ID = "row_id"


def _predict_part(part: pd.DataFrame, fitted: FittedChain, row_id: str | None) -> pd.DataFrame:
    ids = part[row_id].to_numpy() if row_id else part.index.to_numpy()
    return pd.DataFrame({ROW_ID: ids, "prediction": np.asarray(fitted.predict(part), dtype=np.float64)})


def predict_partitions(fitted: FittedChain, frame: Any, row_id: str | None = None) -> Any:
    """Return a Dask DataFrame of ``row_id`` (the ``row_id`` column, else the frame's index) and
    ``prediction`` for every row of the Dask DataFrame ``frame``, partition by partition."""
    meta = pd.DataFrame({ROW_ID: pd.Series(dtype=frame[row_id].dtype if row_id else frame.index.dtype),
                         "prediction": pd.Series(dtype=np.float64)})
    return frame.map_partitions(_predict_part, fitted, row_id, meta=meta)


def write_predictions(fitted: FittedChain, frame: Any, folder: str | os.PathLike, row_id: str | None = None) -> int:
    """Write the predictions of every row of ``frame`` as Parquet parts in ``folder`` (one per
    partition, written by the workers); return the number of parts."""
    predictions = predict_partitions(fitted, frame, row_id)
    predictions.to_parquet(os.fspath(folder), write_index=False)
    return int(predictions.npartitions)
