"""Reading data files: CSV (delimiter sniffed, UTF-8, compressed) and Parquet, with clear errors.

``read_table`` reads CSV (``.csv``, ``.tsv``, ``.txt``, ``.csv.gz``/``.bz2``/``.xz`` and any unknown
extension) and Parquet (``.parquet``, ``.pq``). The CSV delimiter is sniffed among
``, ; TAB |``; text must be UTF-8 (a byte-order mark is removed). Every problem a user
can fix is a ``DataError`` whose one-line message names the file, the column and the value.
"""

from __future__ import annotations

import bz2
import codecs
import csv
import gzip
import io
import lzma
import os
import re
import stat
import warnings
from collections import Counter
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from .errors import DataError
from .limits import MAX_NAME_LENGTH

_PARQUET_SUFFIXES = (".parquet", ".pq")
_COMPRESSION = {".gz": ("gzip", gzip.open), ".bz2": ("bz2", bz2.open), ".xz": ("xz", lzma.open)}
_DELIMITERS = ",;\t|"
_SNIFF_BYTES = 64 * 1024
_MAX_HEADER_BYTES = 64 * 1024 * 1024



def source_name(path: str | os.PathLike) -> str:
    """Return the name used for ``path`` in messages: the file's name, never an absolute path."""
    text = os.fspath(path)
    return Path(text).name or text


def load_frame(source: str | os.PathLike | pd.DataFrame) -> tuple[pd.DataFrame, str]:
    """Return the frame of ``source`` (a file or a DataFrame) and the name to use in messages."""
    if isinstance(source, pd.DataFrame):
        return source, "frame"
    return read_table(source), source_name(source)


def read_table(path: str | os.PathLike) -> pd.DataFrame:
    """Return the table in a CSV or Parquet file; raise DataError for anything unusable.

    Parquet is chosen by extension (``.parquet``, ``.pq``) or by its magic bytes; every
    other file is read as delimited text.
    """
    name = source_name(path)
    file = Path(os.fspath(path))
    head = _check_readable(file, name)
    if file.suffix.lower() in _PARQUET_SUFFIXES or head == b"PAR1":
        frame = _read_parquet(file, name)
        kind = "column names"
    else:
        frame = _read_csv(file, name)
        kind = "a header"
    if frame.shape[1] == 0:
        raise DataError(f"{name}: the file has no columns")
    if len(frame) == 0:
        raise DataError(f"{name}: the file has {kind} but no rows")
    return frame


def _check_readable(file: Path, name: str) -> bytes:
    """Return the first four bytes of ``file``, raising DataError if it cannot be read.

    Only regular files are read: a named pipe would block until someone writes to it, and a
    device such as ``/dev/zero`` never ends.
    """
    try:
        if not file.exists():
            raise DataError(f"{name}: no such file")
        if file.is_dir():
            raise DataError(f"{name}: is a folder, not a data file")
        mode = file.stat().st_mode
        if not stat.S_ISREG(mode):
            from .atomic import node_kind

            raise DataError(f"{name}: is {node_kind(mode)}, not a regular file (remnant reads data only from "
                            "regular files: a pipe or device could be read for ever)")
        with open(file, "rb") as handle:
            head = handle.read(4)
    except PermissionError:
        raise DataError(f"{name}: permission denied (the file cannot be read)") from None
    except OSError as err:
        raise DataError(f"{name}: cannot be read ({err.strerror or err})") from None
    if not head:
        raise DataError(f"{name}: the file is empty")
    return head


def _read_parquet(file: Path, name: str) -> pd.DataFrame:
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        schema = pq.read_schema(file)
    except (pa.ArrowException, OSError, ValueError):
        raise DataError(f"{name}: is not a valid Parquet file") from None
    for field in schema:
        if pa.types.is_nested(field.type):
            raise DataError(f"{name}: column {field.name!r} holds nested values ({field.type}); "
                            "each cell must be one plain value")
    check_names(schema.names, name)
    check_duplicates(schema.names, name)
    try:
        handle = open_parquet(file)
        frame = index_as_columns(_parquet_frame(handle, schema))
    except (pa.ArrowException, OSError, ValueError) as err:
        raise DataError(f"{name}: cannot read the Parquet file ({_first_line(err)})") from None
    check_statistics(handle, frame, name)
    return frame


def open_parquet(path: str | os.PathLike) -> Any:
    """Return a ``pyarrow.parquet.ParquetFile`` that checks each page's checksum where the file has one."""
    import pyarrow.parquet as pq

    return pq.ParquetFile(path, page_checksum_verification=True)


def index_as_columns(frame: pd.DataFrame) -> pd.DataFrame:
    """Return ``frame`` with a stored named index as ordinary columns (an unnamed one dropped), as fit and
    predict both read a Parquet file."""
    if isinstance(frame.index, pd.RangeIndex):
        return frame
    return frame.reset_index(drop=all(n is None for n in frame.index.names))


def column_ranges(handle: Any) -> dict[str, tuple[float, float]]:
    """Return, per numeric column, the smallest and largest value the file's row-group statistics record
    (columns without statistics in every row group are left out)."""
    import pyarrow as pa

    metadata, schema = handle.metadata, handle.schema_arrow
    ranges: dict[str, tuple[float, float]] = {}
    for j in range(metadata.num_columns):
        path = metadata.row_group(0).column(j).path_in_schema if metadata.num_row_groups else None
        if path is None or path not in schema.names:
            continue
        kind = schema.field(path).type
        if not (pa.types.is_integer(kind) or pa.types.is_floating(kind)):
            continue
        lows, highs = [], []
        for g in range(metadata.num_row_groups):
            stats = metadata.row_group(g).column(j).statistics
            if stats is None or not stats.has_min_max:
                break
            lows.append(float(stats.min))
            highs.append(float(stats.max))
        else:
            if lows:
                ranges[path] = (min(lows), max(highs))
    return ranges


def check_statistics(handle: Any, frame: pd.DataFrame, name: str, ranges: dict | None = None) -> None:
    """Raise DataError when a numeric column holds a value outside the range the file's statistics record
    for it: the pages were damaged (a page read as garbage can hold values near 1e182)."""
    import numpy as np

    ranges = column_ranges(handle) if ranges is None else ranges
    for column, (low, high) in ranges.items():
        if column not in frame.columns or frame[column].dtype.kind not in "fiu":
            continue
        values = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)
        with np.errstate(invalid="ignore"):
            outside = (values < low) | (values > high)
        if outside.any():
            row = int(np.flatnonzero(outside)[0])
            raise DataError(f"{name}: column {column!r} holds {values[row]:g} in row {row + 1}, outside the range "
                            f"{low:g} to {high:g} the file records for it: the file is damaged")


def _parquet_frame(handle: Any, schema: Any) -> pd.DataFrame:
    """Return the file's table as a DataFrame, read one column at a time when no index is stored.

    Reading the whole table holds Arrow's decoded copy beside the frame (about 2.8 x the data at
    its peak); a column at a time the peak is the frame and one column. A file with a stored
    index is read whole, so that pandas rebuilds the index from its metadata.
    """
    metadata = schema.pandas_metadata or {}
    if any(isinstance(column, str) for column in metadata.get("index_columns", ())):
        return handle.read(use_pandas_metadata=True).to_pandas()
    columns = {c: handle.read(columns=[c]).to_pandas(self_destruct=True)[c] for c in schema.names}
    if not columns:
        return handle.read().to_pandas()
    return pd.DataFrame(columns, copy=False)


def _read_csv(file: Path, name: str) -> pd.DataFrame:
    compression, opener = _COMPRESSION.get(file.suffix.lower(), (None, open))
    sample = _text_sample(file, name, opener)
    if not sample.strip():
        raise DataError(f"{name}: the file is empty")
    delimiter = _sniff_delimiter(sample, default="\t" if ".tsv" in file.suffixes else ",")
    check_duplicates(read_header(sample, delimiter, name), name)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", pd.errors.ParserWarning)
            frame = pd.read_csv(file, sep=delimiter, encoding="utf-8-sig", compression=compression,
                                low_memory=False, index_col=False)
    except UnicodeDecodeError:
        raise DataError(_not_utf8_message(file, name, opener)) from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{name}: the file is empty") from None
    except pd.errors.ParserError as err:
        raise DataError(f"{name}: {_parser_problem(str(err))}") from None
    except (OSError, ValueError, EOFError) as err:
        raise DataError(f"{name}: cannot be read as CSV ({_first_line(err)})") from None
    if any("Length of header" in str(w.message) for w in caught):
        raise DataError(f"{name}: the rows have more fields than the header ({frame.shape[1]} names)")
    return frame


def _text_sample(file: Path, name: str, opener) -> str:
    """Return the decoded start of the file: at least 64 KiB, and at least two whole lines."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    parts: list[str] = []
    offset = 0
    try:
        with opener(file, "rb") as handle:
            while offset < _MAX_HEADER_BYTES:
                block = handle.read(_SNIFF_BYTES)
                if not block:
                    break
                try:
                    parts.append(decoder.decode(block, final=False))
                except UnicodeDecodeError as err:
                    raise DataError(_utf8_error(name, block, offset + err.start, err.start)) from None
                offset += len(block)
                if sum(p.count("\n") for p in parts) >= 2 or sum(p.count("\r") for p in parts) >= 2:
                    break
    except (OSError, EOFError) as err:
        raise DataError(f"{name}: cannot be read ({_first_line(err)})") from None
    return "".join(parts).removeprefix("\ufeff")


def _not_utf8_message(file: Path, name: str, opener) -> str:
    """Return the message naming the byte offset of the first byte that is not UTF-8."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    offset = 0
    with opener(file, "rb") as handle:
        while block := handle.read(1 << 20):
            try:
                decoder.decode(block, final=False)
            except UnicodeDecodeError as err:
                return _utf8_error(name, block, offset + err.start, err.start)
            offset += len(block)
    return f"{name}: the text is not UTF-8 (it ends inside a character); save it as UTF-8"


def _utf8_error(name: str, block: bytes, offset: int, start: int) -> str:
    return f"{name}: the text is not UTF-8 (byte 0x{block[start]:02x} at offset {offset}); save it as UTF-8"


def _sniff_delimiter(sample: str, default: str) -> str:
    """Return the delimiter csv.Sniffer finds among ``, ; TAB |``, or ``default``."""
    cut = max(sample.rfind("\n"), sample.rfind("\r"))
    text = sample[:cut] if cut > 0 else sample
    try:
        found = csv.Sniffer().sniff(text, delimiters=_DELIMITERS).delimiter
    except csv.Error:
        return default
    first_line = text.splitlines()[0] if text else ""
    if found not in first_line and default in first_line:
        return default
    return found


def read_header(sample: str, delimiter: str, name: str) -> list[str]:
    """Return the column names on the first line of ``sample``; raise DataError for a name longer than
    MAX_NAME_LENGTH characters (or one the csv module cannot read)."""
    try:
        header = next(csv.reader(io.StringIO(sample, newline=""), delimiter=delimiter), [])
    except csv.Error as err:
        if "field larger than field limit" in str(err):
            raise DataError(f"{name}: a column name in the header is longer than {csv.field_size_limit():,} "
                            f"characters (at most {MAX_NAME_LENGTH:,} are read)") from None
        raise DataError(f"{name}: the header cannot be read as CSV ({_first_line(err)})") from None
    check_names(header, name)
    return header


def check_names(names: Sequence[object], source: str) -> None:
    """Raise DataError when a column name is longer than MAX_NAME_LENGTH characters."""
    for number, column in enumerate(names, 1):
        if len(str(column)) > MAX_NAME_LENGTH:
            raise DataError(f"{source}: the name of column {number} is {len(str(column)):,} characters long "
                            f"(at most {MAX_NAME_LENGTH:,} are read)")


def check_duplicates(names: Sequence[object], source: str) -> None:
    counts = Counter(str(n) for n in names)
    for column in counts:
        if counts[column] > 1 and column.strip():
            raise DataError(f"{source}: column {column!r} appears twice in the header")


def _parser_problem(message: str) -> str:
    """Return a short phrase for a pandas parser error, naming the line."""
    fields = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", message)
    if fields:
        expected, line, saw = fields.groups()
        return f"line {line} has {saw} fields, but the header has {expected}"
    quote = re.search(r"EOF inside string starting at row (\d+)", message)
    if quote:
        return f"a quote opened on line {int(quote.group(1)) + 1} is never closed"
    line = re.search(r"line (\d+)", message)
    where = f" near line {line.group(1)}" if line else ""
    return f"cannot be parsed as CSV{where} ({_first_line(message)})"


def _first_line(err: object) -> str:
    lines = str(err).strip().splitlines()
    return lines[-1] if lines else type(err).__name__


def read_options(path: str | os.PathLike) -> tuple[str, dict[str, object]]:
    """Return how ``read_table`` reads ``path``: ``("parquet", {})``, or ``("csv", options)`` with the
    ``pandas.read_csv`` options it uses (sep, encoding, compression, index_col), for reading in chunks.

    Raise DataError for a missing, empty or unreadable file, or a header naming a column twice.
    """
    name = source_name(path)
    file = Path(os.fspath(path))
    head = _check_readable(file, name)
    if file.suffix.lower() in _PARQUET_SUFFIXES or head == b"PAR1":
        return "parquet", {}
    compression, opener = _COMPRESSION.get(file.suffix.lower(), (None, open))
    sample = _text_sample(file, name, opener)
    if not sample.strip():
        raise DataError(f"{name}: the file is empty")
    delimiter = _sniff_delimiter(sample, default="\t" if ".tsv" in file.suffixes else ",")
    check_duplicates(read_header(sample, delimiter, name), name)
    return "csv", {"sep": delimiter, "encoding": "utf-8-sig", "compression": compression, "index_col": False}
