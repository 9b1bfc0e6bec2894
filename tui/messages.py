"""App-wide messages: what happened to the chain or to a fit, named in the past tense.

Workers post these to the screen that asked for the work (``post_message`` is thread-safe);
screens react by setting their widgets' attributes.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from textual.message import Message

if TYPE_CHECKING:
    import pandas as pd

    from stages import Chain, FittedChain
    from stages.decide.audition import Candidate

    from .view import ChainView


class ChainReady(Message):
    """A chain was built (setup screen, recipe) or resumed from its session; ``summary`` says how."""

    def __init__(self, chain: Chain, view: ChainView, summary: str = "", session_error: str = "",
                 ids: Any = None) -> None:
        self.chain = chain
        self.view = view
        self.summary = summary
        self.session_error = session_error
        self.ids = ids
        super().__init__()


class StageFitted(Message):
    """One stage of a longer job (a recipe) was fitted; more may follow."""

    def __init__(self, view: ChainView, summary: str) -> None:
        self.view = view
        self.summary = summary
        super().__init__()


class ChainChanged(Message):
    """An action on the chain completed: add, step back, drop, trim, undo, reveal, keep, grow or a recipe.

    ``session_error`` is why the session could not be saved afterwards (empty when it was).
    """

    def __init__(self, view: ChainView, action: str, summary: str, select: int | None = None,
                 session_error: str = "") -> None:
        self.view = view
        self.action = action
        self.summary = summary
        self.select = select
        self.session_error = session_error
        super().__init__()


class StageGrown(Message):
    """A grow committed another stage; a newer one replaces one still waiting."""

    def __init__(self, view: ChainView, summary: str) -> None:
        self.view = view
        self.summary = summary
        super().__init__()

    def can_replace(self, message: Message) -> bool:
        """Return True when ``message`` is a later grown stage that makes this one stale."""
        return isinstance(message, StageGrown)


class AuditionDone(Message):
    """Candidate next stages were fit side by side; ``choice`` is the one-standard-error pick (an index)."""

    def __init__(self, candidates: list[Candidate], choice: int, best: int) -> None:
        self.candidates = candidates
        self.choice = choice
        self.best = best
        super().__init__()


class ReferencesFitted(Message):
    """The reference models were fit on the chain's split: one row per model (stages.decide.references)."""

    def __init__(self, table: pd.DataFrame, with_test: bool) -> None:
        self.table = table
        self.with_test = with_test
        super().__init__()


class FitStarted(Message):
    """A job started in the fit worker; ``label`` says what it does."""

    def __init__(self, label: str, cancellable: bool) -> None:
        self.label = label
        self.cancellable = cancellable
        super().__init__()


class FitProgressed(Message):
    """A running job reported progress; a newer report replaces one still waiting."""

    def __init__(self, fraction: float, detail: str) -> None:
        self.fraction = fraction
        self.detail = detail
        super().__init__()

    def can_replace(self, message: Message) -> bool:
        """Return True when ``message`` is a later progress report that makes this one stale."""
        return isinstance(message, FitProgressed)


class FitFailed(Message):
    """A job ended without a result: it failed (``cancelled`` False) or the user cancelled it."""

    def __init__(self, label: str, reason: str, cancelled: bool) -> None:
        self.label = label
        self.reason = reason
        self.cancelled = cancelled
        super().__init__()


class FileWritten(Message):
    """A chain file or a recipe was written at ``path``."""

    def __init__(self, path: Path, what: str) -> None:
        self.path = path
        self.what = what
        super().__init__()


class ChainFileOpened(Message):
    """A saved chain file was read, for read-only inspection."""

    def __init__(self, fitted: FittedChain, path: Path) -> None:
        self.fitted = fitted
        self.path = path
        super().__init__()
