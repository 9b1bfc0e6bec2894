"""Work the panes ask for, done off the event loop: one question at a time in a thread worker.

A ``Question`` says what it asks (``key``: the question and the chain state it is about) and
how to compute the answer (``compute``, run in the worker: pure engine calls, no widgets).
``ask`` returns an answer already known at once; otherwise the question waits its turn.
Questions wait in channels (``residuals``, ``details``, ``setup``): a newer question replaces
one still waiting in its channel, so a cursor held down never piles up work. The answer (or
the one-line reason it could not be given) comes back to the asker as an ``Answered`` message,
and is kept for the next time the same key is asked (the last ``KEEP`` answers).

A question about a live chain names the stages it is about; when the chain no longer has them
(a fit changed it meanwhile), the answer is dropped, and the pane asks again about the chain
as it is now.
"""

from __future__ import annotations

from collections import OrderedDict
from collections.abc import Callable, Hashable, Sequence
from dataclasses import dataclass
from typing import Any

from textual.message import Message
from textual.message_pump import MessagePump
from textual.worker import Worker, WorkerState

from .worker import one_line

#: answers kept for asking again (a few kilobytes each: bins, tables of a few dozen rows)
KEEP = 256


class Stale(Exception):
    """The chain changed while the question was being answered: the answer is about nothing shown."""


@dataclass(frozen=True, eq=False)
class Question:
    """What a pane asks: ``key`` identifies it, ``compute()`` answers it in the worker thread.

    ``lane`` is "chain" when the answer reads the live chain (it waits while a fit holds the
    chain), "view" when it reads only a snapshot; each lane answers one question at a time, so
    a histogram never waits for a scan that waits for a fit.
    """

    key: Hashable
    compute: Callable[[], Any]
    owner: MessagePump
    channel: str
    lane: str = "view"


class Answered(Message):
    """The answer to a question (``error`` is its one-line reason when there is none)."""

    def __init__(self, key: Hashable, answer: Any, error: str = "") -> None:
        self.key = key
        self.answer = answer
        self.error = error
        super().__init__()


def stage_key(stages: Sequence[Any]) -> tuple[int, ...]:
    """Return the key part naming a chain state: the identity of each stage in it."""
    return tuple(id(s) for s in stages)


def on_state(chain: Any, stages: Sequence[Any], compute: Callable[[], Any]) -> Any:
    """Return ``compute()`` when ``chain`` holds exactly ``stages`` first, before and after; raise Stale otherwise."""

    def same() -> bool:
        now = chain.stages
        return len(now) >= len(stages) and all(a is b for a, b in zip(now, stages, strict=False))

    if not same():
        raise Stale()
    answer = compute()
    if not same():
        raise Stale()
    return answer


class BackgroundRunner:
    """Mixin for the App: answers the panes' questions in thread workers, one per lane at a time."""

    _answers: OrderedDict | None = None
    _asking: dict[str, Question] | None = None
    _waiting: dict[str, dict[str, Question]] | None = None

    def _answer_store(self) -> OrderedDict:
        if self._answers is None:
            self._answers, self._asking, self._waiting = OrderedDict(), {}, {"view": {}, "chain": {}}
        return self._answers

    def known(self, key: Hashable) -> tuple[bool, Any]:
        """Return (True, answer) when ``key`` was answered before, else (False, None)."""
        answers = self._answer_store()
        if key in answers:
            answers.move_to_end(key)
            return True, answers[key]
        return False, None

    def ask(self, question: Question) -> tuple[bool, Any]:
        """Return (True, answer) when the answer is known; otherwise queue the question and return (False, None)."""
        found = self.known(question.key)
        if found[0]:
            return found
        assert self._asking is not None and self._waiting is not None
        running = self._asking.get(question.lane)
        waiting = self._waiting[question.lane]
        if running is not None and running.key == question.key:
            waiting.pop(question.channel, None)  # what is asked now is already being answered
            return False, None
        waiting.pop(question.channel, None)
        waiting[question.channel] = question
        if running is None:
            self._next_question(question.lane)
        return False, None

    @property
    def answering(self) -> bool:
        """Return True while a question is being answered or waits."""
        self._answer_store()
        return bool(self._asking) or any(self._waiting.values())

    def _next_question(self, lane: str) -> None:
        waiting = self._waiting[lane]
        if not waiting:
            self._asking.pop(lane, None)
            return
        question = waiting.pop(next(iter(waiting)))
        self._asking[lane] = question
        self._answer(question)

    def _answer(self, question: Question) -> None:
        self.run_worker(question.compute, name=_name(question), group="answers", thread=True, exit_on_error=False)

    def answer_finished(self, event: Worker.StateChanged) -> bool:
        """Deliver a finished answer; return True when ``event`` was about an answer (the App calls it)."""
        if event.worker.group != "answers":
            return False
        if event.state not in (WorkerState.SUCCESS, WorkerState.ERROR, WorkerState.CANCELLED):
            return True
        question = next((q for q in self._asking.values() if event.worker.name == _name(q)), None)
        if question is None:
            return True
        del self._asking[question.lane]
        if event.state == WorkerState.SUCCESS:
            answers = self._answer_store()
            answer = event.worker.result
            answers[question.key] = answer
            while len(answers) > KEEP:
                answers.popitem(last=False)
            question.owner.post_message(Answered(question.key, answer))
        elif not isinstance(event.worker.error, Stale):
            error = event.worker.error
            question.owner.post_message(Answered(question.key, None, one_line(error) if error is not None else "stopped"))
        self._next_question(question.lane)
        return True


def _name(question: Question) -> str:
    return f"answer-{id(question)}"
