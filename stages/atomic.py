"""The one way remnant writes a file: a temporary file beside it, renamed over it only when complete.

Every output (chain files, session files, predictions, recipes) goes through ``write_atomic``
or ``atomic_output``:

* ``-`` means standard output; nothing is renamed.
* An existing output must be a regular file, or a symbolic link to one (the link is kept and
  its target replaced). A folder, device, named pipe (FIFO), socket or dangling link is
  refused: renaming over it would replace the node itself.
* A new file gets the mode the user's umask gives (``0o666`` less the umask, applied by the
  system when the temporary file is created); a replaced file keeps its mode.
* One writer at a time per output: a lock file ``.NAME.lock`` beside it, held with ``flock``.
  A second process is refused with a message naming the first (``OutputLock`` lets a command
  hold the lock for its whole run, so that a second ``remnant fit`` to the same ``--out`` is
  refused before it fits anything); threads of one process take turns.
* Temporary files ``.NAME.*.tmp`` left by a killed writer of the same output are removed when
  the next write of that output starts (under the lock, so never another writer's).

A failure leaves an existing output untouched and removes the temporary file.
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import secrets
import stat
import sys
import threading
import time
from collections.abc import Callable, Iterator
from typing import IO, Any

from .errors import OutputError

#: the output name that means standard output
STDOUT = "-"
#: how long a write waits for another process's lock on the same output before refusing
LOCK_WAIT_SECONDS = 5.0

_REASONS = {
    errno.ENOSPC: "the disk is full", errno.EACCES: "permission denied", errno.EPERM: "permission denied",
    errno.EROFS: "the file system is read-only", errno.ENOENT: "its folder does not exist",
    errno.EDQUOT: "the disk quota is exceeded", errno.EISDIR: "it is a folder",
}
_KINDS = ((stat.S_ISDIR, "a folder"), (stat.S_ISFIFO, "a named pipe (FIFO)"), (stat.S_ISCHR, "a character device"),
          (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"))


def node_kind(mode: int) -> str:
    """Return what a file mode describes in words: ``a regular file``, ``a named pipe (FIFO)`` ..."""
    if stat.S_ISREG(mode):
        return "a regular file"
    return next((words for test, words in _KINDS if test(mode)), "not a regular file")


def output_target(path: str | os.PathLike, what: str = "file", error: type[Exception] = OutputError) -> str:
    """Return the path a write of ``path`` replaces: ``path`` itself, or the regular file a link names.

    Raise ``error`` naming ``path`` when it exists and is not a regular file (or a link to one),
    or when its folder does not exist. ``-`` (standard output) is returned as it is.
    """
    name = os.fspath(path)
    if name == STDOUT:
        return name
    try:
        info = os.lstat(name)
    except FileNotFoundError:
        info = None
    except OSError as exc:
        raise _error(error, what, name, exc) from None
    target = name
    if info is not None and stat.S_ISLNK(info.st_mode):
        target = os.path.realpath(name)
        try:
            info = os.stat(target)
        except OSError:
            raise error(f"cannot write {what} '{name}': it is a symbolic link to nothing ({target})") from None
    if info is not None and not stat.S_ISREG(info.st_mode):
        raise error(f"cannot write {what} '{name}': it is {node_kind(info.st_mode)}, not a regular file "
                    f"(remnant replaces only regular files; '-' writes to standard output)")
    folder = os.path.dirname(os.path.abspath(target))
    if not os.path.isdir(folder):
        raise error(f"cannot write {what} '{name}': folder '{folder}' does not exist")
    return target


def write_atomic(path: str | os.PathLike, write: Callable[[IO[bytes]], None], *, what: str = "file",
                 error: type[Exception] = OutputError) -> None:
    """Write the bytes ``write(handle)`` produces to ``path`` (``-``: standard output), atomically; return None.

    Raise ``error`` naming ``path`` and the reason when it cannot be written; an existing file
    is then untouched.
    """
    with atomic_output(path, what=what, error=error) as handle:
        write(handle)


@contextlib.contextmanager
def atomic_output(path: str | os.PathLike, *, text: bool = False, what: str = "file",
                  error: type[Exception] = OutputError) -> Iterator[Any]:
    """Yield a handle whose content replaces ``path`` when the block ends without an exception.

    ``text`` gives a UTF-8 text handle (newlines as written), else a binary one. ``-`` yields
    standard output. Raise ``error`` as ``output_target`` does, or when writing fails.
    """
    name = os.fspath(path)
    if name == STDOUT:
        stream = sys.stdout if text else sys.stdout.buffer
        yield stream
        stream.flush()
        return
    target = output_target(name, what, error)
    with OutputLock(target, what=what, error=error, wait=LOCK_WAIT_SECONDS):
        remove_stale_temporaries(target)
        yield from _write_replacing(name, target, text, what, error)


def _write_replacing(name: str, target: str, text: bool, what: str, error: type[Exception]) -> Iterator[Any]:
    folder, base = os.path.split(os.path.abspath(target))
    temp = os.path.join(folder, f".{base}.{secrets.token_hex(6)}.tmp")
    try:
        existing = os.stat(target)
    except OSError:
        existing = None
    try:
        # created 0o666: the system applies the umask, so no process-wide umask is ever changed
        fd = os.open(temp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0)
                     | getattr(os, "O_CLOEXEC", 0), 0o666)
    except OSError as exc:
        raise _error(error, what, name, exc) from None
    try:
        opened: IO[Any] = os.fdopen(fd, "w", encoding="utf-8", newline="") if text else os.fdopen(fd, "wb")
        with opened as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        if existing is not None:
            os.chmod(temp, stat.S_IMODE(existing.st_mode))
        output_target(target, what, error)  # still a regular file (or absent) just before the rename
        os.replace(temp, target)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            os.unlink(temp)
        if isinstance(exc, OSError):
            raise _error(error, what, name, exc) from None
        raise
    _sync_folder(folder)


def remove_stale_temporaries(target: str) -> int:
    """Remove the temporary files ``.NAME.*.tmp`` a killed writer of ``target`` left; return how many.

    Call it while holding the output's lock, so that no live writer's file is removed.
    """
    folder, base = os.path.split(os.path.abspath(target))
    pattern = re.compile(rf"\.{re.escape(base)}\.[A-Za-z0-9_]{{6,32}}\.tmp")
    removed = 0
    with contextlib.suppress(OSError), os.scandir(folder) as entries:
        for entry in entries:
            if pattern.fullmatch(entry.name) and entry.is_file(follow_symlinks=False):
                with contextlib.suppress(OSError):
                    os.unlink(entry.path)
                    removed += 1
    return removed


def _sync_folder(folder: str) -> None:
    with contextlib.suppress(OSError):  # flush the rename itself, where a folder can be opened
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _error(error: type[Exception], what: str, name: str, exc: OSError) -> Exception:
    reason = _REASONS.get(exc.errno or 0) or exc.strerror or " ".join(str(exc).split()) or type(exc).__name__
    return error(f"cannot write {what} '{name}': {reason}")


# ----------------------------------------------------------------------------- the lock
class _Held:
    """One output locked by this process: the thread lock, and the lock file while held."""

    def __init__(self) -> None:
        self.thread_lock = threading.RLock()
        self.depth = 0
        self.fd: int | None = None


_HELD: dict[str, _Held] = {}
_HELD_GUARD = threading.Lock()


class OutputLock:
    """Hold the one-writer lock of an output for a ``with`` block; re-entrant within a thread.

    Another process holding it makes ``__enter__`` wait up to ``wait`` seconds, then raise
    ``error`` naming the output and that process. Threads of this process wait for each other.
    ``-`` (standard output) is never locked.
    """

    def __init__(self, path: str | os.PathLike, *, what: str = "file", error: type[Exception] = OutputError,
                 wait: float = 0.0) -> None:
        self.name = os.fspath(path)
        self.key = os.path.realpath(self.name)
        self.what, self.error, self.wait = what, error, wait
        self.held: _Held | None = None

    def __enter__(self) -> OutputLock:
        if self.name == STDOUT:
            return self
        with _HELD_GUARD:
            held = _HELD.setdefault(self.key, _Held())
        held.thread_lock.acquire()
        try:
            if held.depth == 0:
                held.fd = self._take_file_lock()
            held.depth += 1
        except BaseException:
            held.thread_lock.release()
            raise
        self.held = held
        return self

    def __exit__(self, *exc: object) -> None:
        held, self.held = self.held, None
        if held is None:
            return
        held.depth -= 1
        if held.depth == 0 and held.fd is not None:
            fd, held.fd = held.fd, None
            with contextlib.suppress(OSError):
                os.unlink(lock_path(self.key))  # unlinked while still locked: see _take_file_lock
            os.close(fd)
        held.thread_lock.release()

    def _take_file_lock(self) -> int | None:
        try:
            import fcntl
        except ImportError:  # no flock on this platform: one writer per process only
            return None
        path = lock_path(self.key)
        deadline = time.monotonic() + self.wait
        while True:
            try:
                fd = os.open(path, os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0), 0o666)
            except OSError as exc:
                raise _error(self.error, self.what, self.name, exc) from None
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                owner = _owner(fd)
                os.close(fd)
                if time.monotonic() >= deadline:
                    raise self.error(f"cannot write {self.what} '{self.name}': another remnant{owner} is writing "
                                     "it now; wait for it to finish, or choose another file") from None
                time.sleep(0.05)
                continue
            # the holder before us unlinks the lock file while still holding it; if we locked that
            # unlinked file, the path now names another one (or none): start again
            if _same_file(fd, path):
                os.ftruncate(fd, 0)
                os.write(fd, str(os.getpid()).encode())
                return fd
            os.close(fd)


def lock_path(target: str) -> str:
    """Return the lock file of an output: ``.NAME.lock`` in the same folder."""
    folder, base = os.path.split(os.path.abspath(target))
    return os.path.join(folder, f".{base}.lock")


def _same_file(fd: int, path: str) -> bool:
    try:
        mine, there = os.fstat(fd), os.stat(path)
    except OSError:
        return False
    return (mine.st_dev, mine.st_ino) == (there.st_dev, there.st_ino)


def _owner(fd: int) -> str:
    with contextlib.suppress(OSError, ValueError):
        text = os.pread(fd, 32, 0).decode("ascii").strip()
        if text.isdigit():
            return f" (process {int(text)})"
    return ""
