"""Error classes: every failure a user can act on is one of these, with a one-line message."""

from __future__ import annotations


class RemnantError(Exception):
    """Base of every error the user can act on; ``str(err)`` is the one-line message."""


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


class FitCancelled(RemnantError):
    """A fit was cancelled by the user; the chain was left exactly as it was."""


class RecipeError(RemnantError):
    """A recipe file cannot be read or replayed (unknown key, kind or parameter)."""


class ChainFileError(RemnantError):
    """A chain file is damaged, untrusted, from a newer format, or cannot be written."""


class SchemaError(RemnantError):
    """Data given for prediction does not match the schema the chain was fit on."""


class OutputError(RemnantError):
    """An output file cannot be written: not a regular file, another writer holds it, or a full disk."""


class ExportError(RemnantError):
    """A chain cannot be exported as asked (a stage that does not convert, a missing extra, a model
    that would predict differently); nothing was written."""
