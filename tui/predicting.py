"""Streaming predictions for ``remnant predict``: read a data file in chunks, check each chunk
against the chain's schema, and write CSV with one row per input row, in input order.

CSV is read with ``pandas.read_csv(chunksize=...)`` using the delimiter ``read_table`` would
sniff, categorical columns (and the id column) as text so that "007" stays "007"; Parquet with
``ParquetFile.iter_batches``. Only the chain's columns and the id column are kept in memory.
"""

from __future__ import annotations

import contextlib
import re
import warnings
from collections.abc import Iterator
from typing import IO, Any

import numpy as np
import pandas as pd

from stages.atomic import STDOUT, atomic_output
from stages.errors import DataError, SchemaError, UnseenLevelsWarning, UnseenMissingWarning
from stages.metrics import predicted_classes
from stages.predictor import FittedChain, probability_columns, unseen_missing_message
from stages.reading import (
    check_statistics,
    column_ranges,
    index_as_columns,
    open_parquet,
    read_options,
    source_name,
)
from stages.row_weights import GIVEN, check_exposure, read_values
from stages.scoring import shown_residual
from stages.understand.rows import encode_target

OUTPUT_COLUMNS = ("prediction", "probability")


def iter_chunks(path: str, columns: list[str], text_columns: list[str], chunk_rows: int) -> Iterator[pd.DataFrame]:
    """Yield the file's rows ``chunk_rows`` at a time, keeping only ``columns`` that exist;
    ``text_columns`` are read as text. Raise DataError for anything unreadable."""
    name = source_name(path)
    kind, options = read_options(path)
    wanted = set(columns)
    if kind == "parquet":
        yield from _parquet_chunks(path, name, columns, chunk_rows)
        return
    dtype = {column: "string" for column in text_columns}
    try:
        # every column is read (not usecols): only then does pandas refuse a row with more
        # fields than the header, as `remnant fit` does, instead of dropping the extra field
        with pd.read_csv(path, chunksize=chunk_rows, dtype=dtype, low_memory=False, **options) as reader:
            for chunk in reader:
                yield chunk[[c for c in chunk.columns if c in wanted]]
    except UnicodeDecodeError as err:
        raise DataError(f"{name}: the text is not UTF-8 ({err.reason}); save it as UTF-8") from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{name}: the file is empty") from None
    except (pd.errors.ParserError, ValueError) as err:
        raise DataError(f"{name}: {_parser_problem(str(err))}") from None


def _parquet_chunks(path: str, name: str, columns: list[str], chunk_rows: int) -> Iterator[pd.DataFrame]:
    """Yield the Parquet file's rows as fit reads them: a stored named index is a column, and values
    outside the ranges the file's statistics record are refused as damage."""
    import pyarrow as pa

    try:
        file = open_parquet(path)
        present = set(file.schema_arrow.names)
        ranges = column_ranges(file)
        batches = file.iter_batches(batch_size=chunk_rows, columns=[c for c in columns if c in present])
        for batch in batches:
            chunk = index_as_columns(batch.to_pandas())
            check_statistics(file, chunk, name, ranges)
            yield chunk
    except (pa.ArrowException, OSError) as err:
        raise DataError(f"{name}: cannot read the Parquet file ({_first_line(err)})") from None


def _parser_problem(message: str) -> str:
    fields = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", message)
    if fields:
        expected, line, saw = fields.groups()
        return f"line {line} has {saw} fields, but the header has {expected}"
    return f"cannot be parsed as CSV ({_first_line(message)})"


def _first_line(err: object) -> str:
    lines = str(err).strip().splitlines()
    return lines[-1] if lines else type(err).__name__


def chain_exposure(fitted: FittedChain) -> str | None:
    """Return the exposure column a chain was fit with and needs in the data (None without one)."""
    column = fitted.exposure_column
    return None if column in (None, GIVEN) else column


def exposures(chunk: pd.DataFrame, column: str, source: str, offset: int, *, option: bool = False) -> np.ndarray:
    """Return the chunk's exposures in ``column``, checked positive; DataError naming the column (and the
    file's row) when it is missing or holds a value that is not a positive number."""
    if column not in chunk.columns:
        if option:
            raise DataError(f"{source}: --exposure column {column!r} is not a column")
        raise DataError(f"{source}: the chain was fit with exposure column {column!r}, which is not a column "
                        "(a log-link chain predicts per unit of exposure and needs it for totals and residuals)")
    values, _ = read_values(chunk, column, "exposure", source)
    return check_exposure(values, column, source, rows=np.arange(len(chunk)) + offset)


def predict_chunk(fitted: FittedChain, chunk: pd.DataFrame, *, threshold: float, id_column: str | None,
                  source: str, offset: int = 0, each_stage: bool = False,
                  filled: dict[str, int] | None = None, exposure: str | None = None,
                  ) -> tuple[pd.DataFrame, dict[str, int]]:
    """Return the output rows of one chunk (id, prediction, probability) and its unseen levels per column.

    A multiclass chain writes ``prediction`` (the most probable class) and ``probability_<class>`` for
    each class (``probability_columns``). With ``each_stage``, also ``after_1`` .. ``after_N`` (the
    prediction after each stage: the probability for a binary chain, the predicted class for a
    multiclass chain) and, when the chunk holds the target, ``residual`` (target minus the
    prediction; y - p for binary chains, y being 1 for the positive class; 1 - p of the row's own
    class for multiclass chains). A target class the chain never saw is an error naming it.
    ``offset`` is the number of rows before the chunk, so that messages name rows of the whole file.
    Missing values the fitting rows never had are given their median; ``filled`` (when given)
    counts them per column.

    A log-link chain (poisson, gamma, tweedie) predicts the mean per unit of exposure; with
    ``exposure`` (a column) its predictions are multiplied back to each row's expected total. A
    chain fit with an exposure needs its exposure column in the data; its ``residual`` is the target
    minus the expected total on that exposure.
    """
    if id_column is not None and id_column not in chunk.columns:
        raise DataError(f"{source}: id column {id_column!r} is not a column")
    try:
        matrix, unseen = fitted.schema.encode(chunk, source=source)
    except SchemaError as err:
        raise SchemaError(_whole_file_rows(str(err), offset)) from None
    if len(chunk) == 0:  # a header-only file: the columns were checked, there is nothing to predict
        return pd.DataFrame(), unseen
    needed = chain_exposure(fitted)
    fitted_exposure = None if needed is None else exposures(chunk, needed, source, offset)
    scale = None if exposure is None else exposures(chunk, exposure, source, offset, option=True)
    matrix, found = fitted.schema.fill_missing(matrix)
    if filled is not None:
        for column, count in found.items():
            filled[column] = filled.get(column, 0) + count
    after = fitted.raw_after_each_stage(matrix) if each_stage else None
    raw = fitted.raw_from_matrix(matrix) if after is None else after[:, -1]
    out: dict[str, Any] = {}
    if id_column is not None:
        out[id_column] = chunk[id_column].to_numpy()
    if fitted.task == "multiclass":
        probability = fitted.loss.link(raw)
        out["prediction"] = np.asarray(fitted.schema.classes, dtype=object)[predicted_classes(probability)]
        out.update(zip(probability_columns(fitted.schema.classes), probability.T, strict=True))
    elif fitted.task == "binary":
        probability = fitted.loss.link(raw[:, 0])
        negative, positive = fitted.schema.classes
        out["prediction"] = np.where(probability >= threshold, positive, negative)
        out["probability"] = probability
    else:
        out["prediction"] = fitted.loss.link(raw[:, 0]) if scale is None else fitted.loss.link(raw[:, 0]) * scale
    if after is not None:
        out.update(_each_stage(fitted, chunk, after, source, offset, scale, fitted_exposure))
    return pd.DataFrame(out), unseen


def _each_stage(fitted: FittedChain, chunk: pd.DataFrame, after: np.ndarray, source: str,
                offset: int, scale: np.ndarray | None = None,
                fitted_exposure: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Return the columns ``after_1`` .. ``after_N`` and, when the chunk has the target, ``residual``."""
    if fitted.task == "multiclass":
        labels = np.asarray(fitted.schema.classes, dtype=object)
        out = {f"after_{k}": labels[predicted_classes(fitted.loss.link(after[:, k]))] for k in range(1, after.shape[1])}
    else:
        shown = fitted.loss.link(after[:, :, 0])
        written = shown if scale is None else shown * scale[:, None]
        out = {f"after_{k}": written[:, k] for k in range(1, after.shape[1])}
        if fitted_exposure is not None:
            shown = shown * fitted_exposure[:, None]  # the residual is against the expected total
    target = fitted.schema.target
    if target in chunk.columns:
        try:
            y = encode_target(fitted.schema, chunk[target], source)
        except DataError as err:
            raise DataError(_whole_file_rows(str(err), offset)) from None
        if fitted.task == "multiclass":
            known = ~np.isnan(y)
            residual = np.full(len(y), np.nan)
            residual[known] = shown_residual(fitted.loss, y[known], after[known, -1])
            out["residual"] = residual
        else:
            out["residual"] = y - shown[:, -1]
    return out


def _whole_file_rows(text: str, offset: int) -> str:
    """Return a message about a chunk with its row numbers counted from the file's first row."""
    return re.sub(r"\brow (\d+)", lambda m: f"row {int(m.group(1)) + offset}", text)


def write_predictions(fitted: FittedChain, data: str, out: str | None, *, id_column: str | None = None,
                      chunk_rows: int = 100_000, each_stage: bool = False, exposure: str | None = None) -> int:
    """Write the predictions of every row of ``data`` as CSV to ``out`` (stdout when None); return the row count.

    With ``each_stage``, the prediction after each stage and the residual are written too (see
    ``predict_chunk``). ``out`` is written to a temporary file beside it and renamed only when
    every row is done.
    """
    clashing = OUTPUT_COLUMNS + tuple(probability_columns(fitted.schema.classes) if fitted.task == "multiclass" else ())
    clashing += ((*(f"after_{k}" for k in range(1, len(fitted.stages) + 1)), "residual") if each_stage else ())
    if id_column in clashing:
        raise DataError(f"--id {id_column!r} would clash with an output column; the id must have another name")
    name = source_name(data)
    schema = fitted.schema
    wanted = [id_column] if id_column else []
    if each_stage and schema.target not in wanted:
        wanted.append(schema.target)  # read when the file has it, for the residual
    wanted += [c for c in (chain_exposure(fitted), exposure) if c is not None and c not in wanted]
    columns = schema.frame_columns + [c for c in wanted if c not in schema.frame_columns]
    text = [c.name for c in schema.columns if c.is_categorical] + ([id_column] if id_column else [])
    if each_stage and schema.task in ("binary", "multiclass"):
        text.append(schema.target)  # class labels compared as the chain wrote them
    threshold = float(fitted.meta.get("threshold", 0.5) or 0.5)
    filled: dict[str, int] = {}
    with _output(out) as handle:
        rows, unseen = 0, dict[str, int]()
        for chunk in iter_chunks(data, columns, text, chunk_rows):
            frame, found = predict_chunk(fitted, chunk, threshold=threshold, id_column=id_column,
                                         source=name, offset=rows, each_stage=each_stage, filled=filled,
                                         exposure=exposure)
            for column, count in found.items():
                unseen[column] = unseen.get(column, 0) + count
            if len(frame):
                frame.to_csv(handle, index=False, header=rows == 0, lineterminator="\n")
                rows += len(frame)
        if rows == 0:
            raise DataError(f"{name}: the file has a header but no rows")
    if unseen:
        detail = ", ".join(f"{column!r}: {count:,}" for column, count in unseen.items())
        warnings.warn(f"{name}: values the chain cannot use (category levels never seen in training, text, "
                      f"infinity or a value beyond ±3.4e38 in a numeric column) were treated as missing ({detail})",
                      UnseenLevelsWarning, stacklevel=2)
    if filled:
        warnings.warn(unseen_missing_message(name, filled, schema), UnseenMissingWarning, stacklevel=2)
    return rows


def _output(out: str | None) -> contextlib.AbstractContextManager[IO[str]]:
    """Return the handle predictions go to: stdout (``None`` or ``-``), or the one atomic writer's
    temporary file beside ``out``, which replaces ``out`` only when every row is written."""
    return atomic_output(out or STDOUT, text=True, what="predictions file")
