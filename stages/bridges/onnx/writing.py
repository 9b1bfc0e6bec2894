"""Writing the model and its probe file through the one atomic writer (``stages.atomic``).

Each file goes to a temporary file beside it and is renamed over it only when complete; the probe
file is written first and the model last, so a failure leaves the model that was there before
(when only the probe file was replaced, it no longer matches that model, so a check against it
fails rather than passes).
"""

from __future__ import annotations

import functools
import os
from typing import IO

from ...atomic import STDOUT, output_target, write_atomic
from ...errors import ExportError


def check_target(path: str, what: str) -> None:
    """Raise ExportError when ``path`` cannot be written: standard output, a folder that does not
    exist, or something that is not a regular file."""
    if os.fspath(path) == STDOUT:
        raise ExportError(f"{what} needs a file name ('-' is standard output): the model is written "
                          "with its probe file beside it")
    output_target(path, what, error=ExportError)


def write_files(contents: dict[str, tuple[str, bytes]]) -> None:
    """Write each path's bytes atomically, in order (``contents`` maps path -> (what it is, bytes)).

    Raise ExportError naming the path and the reason when one cannot be written.
    """
    for path, (what, data) in contents.items():
        write_atomic(path, functools.partial(_write, data=data), what=what, error=ExportError)


def _write(handle: IO[bytes], data: bytes) -> None:
    handle.write(data)
