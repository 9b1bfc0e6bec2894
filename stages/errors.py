"""Every error and warning class of the engine, and the built-in errors that damaged files raise.

A failure the user can act on is a ``RemnantError`` with a one-line message; a cancellation the
user asked for is a ``Cancelled``, which is not a mistake and so not a ``RemnantError``.
"""

from __future__ import annotations

import json
import zipfile
import zlib


class RemnantError(Exception):
    """Base of every error the user can act on; ``str(err)`` is the one-line message.

    ``key``, when given, names the entry key or setting at fault (``shrinkage``, ``params``,
    ``fraction``), so that a recipe can point at that key's line and a form at that field.
    """

    def __init__(self, *args: object, key: str | None = None) -> None:
        super().__init__(*args)
        self.key = key


class DataError(RemnantError):
    """A data file or frame cannot be used as given (missing column, bad target, unreadable file)."""


class ValidationSpecError(RemnantError):
    """A validation scheme cannot be applied to the data (too few rows, missing column)."""


class StageSpecError(RemnantError):
    """A stage spec is wrong: unknown kind, unknown parameter, bad shrinkage or feature."""


class ChainStateError(StageSpecError):
    """The chain's state does not allow the action now: no stage to step back from, nothing to
    undo, the test part locked (or absent), or the chain changed since an audition.

    A subclass of StageSpecError, which these were before the class existed, so that code
    catching StageSpecError still catches them.
    """


class StageFitError(RemnantError):
    """A stage failed while fitting; the chain was left exactly as it was."""


class RecipeError(RemnantError):
    """A recipe file cannot be read or replayed (unknown key, kind or parameter)."""


class ChainFileError(RemnantError):
    """A chain file is damaged, untrusted, from a newer format, or cannot be written."""


class SchemaError(RemnantError):
    """Data given for prediction does not match the schema the chain was fit on."""


class SignatureError(ChainFileError):
    """A chain file is not signed, is signed with another key, or no usable key was given."""


class ManifestMismatch(ValueError):
    """A manifest value does not fit its schema; ``str(err)`` names the key path and the value.

    A ValueError, not a RemnantError: the loaders turn it into their own file error, naming the file.
    """


class OutputError(RemnantError):
    """An output file cannot be written: not a regular file, another writer holds it, or a full disk."""


class ExportError(RemnantError):
    """A chain cannot be exported as asked (a stage that does not convert, a missing extra, a model
    that would predict differently); nothing was written."""


class SessionError(RemnantError):
    """A session file is damaged, from a newer format, or cannot be read or written."""


class SessionSaveError(SessionError):
    """A session could not be saved (full disk, unwritable folder); the previous file is intact."""


class SessionDataChanged(SessionError):
    """The data file changed since the session was saved; ``changes`` says how, one line each."""

    def __init__(self, name: str, changes: list[str]) -> None:
        self.changes = list(changes)
        super().__init__(f"{name}: the data changed since the session was saved ({'; '.join(changes)})")


class Cancelled(Exception):
    """Base of every cancellation the user asked for; the chain was left exactly as it was."""


class FitCancelled(Cancelled):
    """A fit, an audition, a grow or a refit was cancelled by the user; the chain is as it was."""


class VersionDriftWarning(UserWarning):
    """A chain file was saved with other library versions than the ones installed."""


class UnseenLevelsWarning(UserWarning):
    """Category levels never seen in training reached a prediction (handled as missing)."""


class UnseenMissingWarning(UserWarning):
    """Missing values reached a prediction in columns whose fitting rows had none (given the fitting median)."""


#: what reading a damaged or hostile file can raise inside the standard library and numpy (a key or
#: an index that is not there, a value of the wrong type, a broken zip or deflate stream, JSON that
#: does not parse, nesting too deep); any other exception is a fault of remnant, not of the file
DAMAGED_FILE_ERRORS: tuple[type[BaseException], ...] = (
    KeyError, IndexError, TypeError, ValueError, AttributeError, OverflowError, RecursionError, EOFError,
    zipfile.BadZipFile, zlib.error, json.JSONDecodeError,
)
