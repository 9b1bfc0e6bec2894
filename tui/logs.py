"""Where remnant's log goes: every logger is under ``logging.getLogger("remnant")``.

The engine's loggers are ``remnant.stages.*`` and the workbench's ``remnant.tui.*``; the engine
only adds a ``NullHandler``, so a program that uses it decides where its records go. The
workbench writes its log to a file in the platform's log folder (``log_path``; it is named on the
help screen), so a fault's traceback is kept while the screen shows one line. ``remnant
--verbose`` logs to standard error as well.
"""

from __future__ import annotations

import logging
import logging.handlers
import os
import sys
from pathlib import Path
from typing import TypeVar

ROOT = "remnant"
FILE_NAME = "remnant.log"
FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"
#: a log file is rotated at this size, keeping this many older files
MAX_BYTES, BACKUPS = 1_000_000, 3

Attached = TypeVar("Attached", bound=logging.Handler)


def logger(module: str) -> logging.Logger:
    """Return the logger of ``module`` (its ``__name__``) in the ``remnant`` hierarchy."""
    return logging.getLogger(f"{ROOT}.{module}")


def log_path() -> Path:
    """Return the workbench's log file: ``$REMNANT_HOME/logs/remnant.log``, or in the platform's
    log folder (``platformdirs.user_log_dir("remnant")``)."""
    from stages.files.session import HOME_VARIABLE

    home = os.environ.get(HOME_VARIABLE)
    if home:
        return Path(home) / "logs" / FILE_NAME
    import platformdirs

    return Path(platformdirs.user_log_dir("remnant")) / FILE_NAME


def log_to_file(path: Path | None = None) -> logging.FileHandler | None:
    """Send the ``remnant`` records of level INFO and above to the log file (``log_path()``) and
    return the handler (its ``baseFilename`` is the file), or None when the file cannot be opened:
    the workbench then runs without it."""
    path = log_path() if path is None else path
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        handler = logging.handlers.RotatingFileHandler(path, maxBytes=MAX_BYTES, backupCount=BACKUPS,
                                                       encoding="utf-8")
    except OSError:
        return None
    return _attach(handler, logging.INFO)


def log_to_stderr() -> logging.StreamHandler:
    """Send every ``remnant`` record (DEBUG and above) to standard error, as ``remnant --verbose``
    does, and return the handler."""
    return _attach(logging.StreamHandler(sys.stderr), logging.DEBUG)


def stop_logging(handler: logging.Handler | None) -> None:
    """Detach and close a handler that ``log_to_file`` or ``log_to_stderr`` attached."""
    if handler is None:
        return
    root = logging.getLogger(ROOT)
    root.removeHandler(handler)
    handler.close()
    levels = [h.level for h in root.handlers if not isinstance(h, logging.NullHandler)]
    root.setLevel(min(levels) if levels else logging.NOTSET)


def _attach(handler: Attached, level: int) -> Attached:
    handler.setLevel(level)
    handler.setFormatter(logging.Formatter(FORMAT))
    root = logging.getLogger(ROOT)
    root.addHandler(handler)
    if root.level == logging.NOTSET or root.level > level:  # let the most talkative handler hear
        root.setLevel(level)
    return handler
