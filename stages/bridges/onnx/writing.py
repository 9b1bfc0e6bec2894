"""Writing the model and its probe file atomically: each to a temporary file beside it, then renamed.

Both files are written in full before either is renamed into place, and the model is renamed
last: a failure leaves the model that was there before (and removes the temporary files); when
only the probe file was replaced, it no longer matches that model, so a check against it fails
rather than passes.
"""

from __future__ import annotations

import contextlib
import os
import stat
import tempfile

from ...errors import ExportError


def check_target(path: str, what: str) -> None:
    """Raise ExportError when ``path`` cannot be written: its folder is missing, or it is not a regular file."""
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise ExportError(f"cannot write {what} '{path}': the folder '{os.path.dirname(path) or folder}' "
                          "does not exist (nothing was written)")
    if os.path.lexists(path) and not os.path.isfile(path):
        raise ExportError(f"cannot write {what} '{path}': it exists and is not a regular file (nothing was written)")


def write_files(contents: dict[str, bytes]) -> None:
    """Write each path's bytes atomically: all to temporary files first, then renamed in order.

    Raise ExportError naming the path and the reason when one cannot be written.
    """
    written: list[tuple[str, str]] = []
    path = ""
    try:
        for path, data in contents.items():
            written.append((_temporary(path, data), path))
        for temp, path in written:
            os.replace(temp, path)
    except OSError as exc:
        for temp, _target in written:
            with contextlib.suppress(OSError):
                os.unlink(temp)
        raise ExportError(f"cannot write '{path}': {exc.strerror or exc}") from None


def _temporary(path: str, data: bytes) -> str:
    folder = os.path.dirname(os.path.abspath(path))
    mode = stat.S_IMODE(os.stat(path).st_mode) if os.path.isfile(path) else None
    fd, temp = tempfile.mkstemp(dir=folder, prefix=f".{os.path.basename(path)}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        if mode is not None:
            os.chmod(temp, mode)
        else:
            umask = os.umask(0)
            os.umask(umask)
            os.chmod(temp, 0o666 & ~umask)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(temp)
        raise
    return temp
