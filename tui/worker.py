"""The one path every fit takes: a thread worker, a cancel event, progress and results as messages.

A job is a plain function of a ``JobContext`` that calls the engine and returns the message
to post when it succeeds. It touches no widget. The app runs one job at a time; its single
``Worker.StateChanged`` handler turns an error into a one-line message in a modal.

A job that changes the chain saves the session with ``ctx.save(chain)`` once the action is
done (in the worker, where the chain's lock is free). A save that fails never fails the
action: its one-line reason rides on the result message (``session_error``) and the screen
that shows the result calls ``session_not_saved`` (after any change of screen it makes);
the chain in memory is untouched.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, cast

from textual import work
from textual.message import Message
from textual.message_pump import MessagePump
from textual.worker import Worker, WorkerState

from stages.errors import Cancelled, FitCancelled, RemnantError
from stages.files import session as sessions

from .logs import logger
from .messages import FitFailed, FitProgressed, FitStarted

if TYPE_CHECKING:
    from textual.app import App as _App

    from stages.chain import Chain
else:
    _App = object  # a mixin at run time; mypy checks it as the App it is mixed into

log = logger(__name__)

SESSION_NOTE = ("the chain in memory is as the action left it; s saves it as a chain file. "
                "The previous session file is intact.")


def _no_save(chain: Chain) -> str:
    return ""


@dataclass(frozen=True)
class JobContext:
    """What a running job may use: the cancel event, a progress callback, a way to post, and
    ``save(chain)``, which saves the chain's session and returns "" or why it could not."""

    cancel: threading.Event
    progress: Callable[[float, str], None]
    post: Callable[[Message], object]
    save: Callable[[Any], str] = _no_save


@dataclass(frozen=True)
class FitJob:
    """One piece of engine work: ``run`` returns the message for ``owner`` when it succeeds."""

    label: str
    run: Callable[[JobContext], Message]
    owner: MessagePump
    cancellable: bool = True
    failure_note: str = "the chain is as it was"


def one_line(error: BaseException) -> str:
    """Return the one-line reason for ``error``: the engine's own message, or the error's first line."""
    text = str(error).strip()
    first = text.splitlines()[0] if text else ""
    if isinstance(error, RemnantError | Cancelled):
        return first or type(error).__name__
    return f"{type(error).__name__}: {first}" if first else type(error).__name__


class FitRunner(_App):
    """Mixin for the App: runs one ``FitJob`` at a time in a thread worker."""

    _job: FitJob | None = None
    _cancel: threading.Event | None = None
    #: save the session after every completed action (off for screenshots)
    sessions: bool = True
    _session_failures = 0

    @property
    def fitting(self) -> bool:
        """Return True while a job runs."""
        return self._job is not None

    @property
    def job_label(self) -> str:
        """Return what the running job does ("" when none runs)."""
        return self._job.label if self._job is not None else ""

    @property
    def job_cancellable(self) -> bool:
        """Return True while a job that can be cancelled runs."""
        return self._job is not None and self._job.cancellable

    def start_job(self, job: FitJob) -> bool:
        """Start ``job`` in the fit worker; return False when another job is still running."""
        if self._job is not None:
            return False
        self._job = job
        self._cancel = threading.Event()
        log.info("%s", job.label)
        job.owner.post_message(FitStarted(job.label, job.cancellable))
        self._run_job(job, self._cancel)
        return True

    def cancel_job(self) -> None:
        """Ask the running job to stop; the engine checks the event between rounds."""
        if self._cancel is not None:
            self._cancel.set()

    @work(thread=True, exclusive=True, group="fit", exit_on_error=False)
    def _run_job(self, job: FitJob, cancel: threading.Event) -> Message:
        def progress(fraction: float, detail: str = "") -> None:
            job.owner.post_message(FitProgressed(fraction, detail))

        return job.run(JobContext(cancel, progress, job.owner.post_message, self.save_session))

    def save_session(self, chain: Chain) -> str:
        """Save ``chain``'s session (keyed by its data file); return "" or the one-line reason it failed.

        Runs in the worker thread. A chain not read from a file has no session.
        """
        if not self.sessions or chain.data_path is None:
            return ""
        try:
            sessions.save_session(chain)
        except Exception as err:  # a save must never undo the action it follows
            log.warning("the session was not saved: %s", one_line(err), exc_info=err)
            return one_line(err)
        return ""

    def session_not_saved(self, reason: str) -> None:
        """Say the session was not saved: a modal the first time, a notice after that."""
        self._session_failures += 1
        if self._session_failures == 1:
            self.show_failure("the session was not saved", reason, SESSION_NOTE)
        else:
            self.notify(f"the session was not saved: {reason}", severity="warning", timeout=6)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """Deliver a finished job's result, or show why it failed; the only place fit errors reach the user."""
        if event.worker.group != "fit" or event.state not in (
            WorkerState.SUCCESS, WorkerState.ERROR, WorkerState.CANCELLED
        ):
            return
        job, self._job, self._cancel = self._job, None, None
        if job is None:
            return
        if event.state == WorkerState.SUCCESS:
            log.info("%s: done", job.label)
            job.owner.post_message(cast(Message, event.worker.result))
            return
        error = event.worker.error
        if event.state == WorkerState.CANCELLED or isinstance(error, FitCancelled):
            reason = one_line(error) if isinstance(error, FitCancelled) else "cancelled"
            log.info("%s: %s", job.label, reason)
            job.owner.post_message(FitFailed(job.label, reason, cancelled=True))
            return
        reason = one_line(error) if error is not None else "stopped"
        # a mistake the user can fix is a warning; anything else is a fault, its traceback kept here
        level = logging.WARNING if isinstance(error, RemnantError) else logging.ERROR
        log.log(level, "%s failed: %s", job.label, reason, exc_info=error)
        job.owner.post_message(FitFailed(job.label, reason, cancelled=False))
        self.show_failure(f"{job.label} failed", reason, job.failure_note)

    def show_failure(self, title: str, reason: str, note: str = "") -> None:
        """Show ``reason`` in a modal with ``title``; the App implements it."""
        raise NotImplementedError
