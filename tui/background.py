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
from typing import TYPE_CHECKING, Any

from textual.message import Message
from textual.message_pump import MessagePump
from textual.worker import Worker, WorkerState

from .worker import one_line

if TYPE_CHECKING:
    from textual.app import App as _App
else:
    _App = object  # a mixin at run time; mypy checks it as the App it is mixed into

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


class _Lanes:
    """The answers kept, the question each lane is answering, and the questions waiting per lane and channel."""

    def __init__(self) -> None:
        self.answers: OrderedDict[Hashable, Any] = OrderedDict()
        self.asking: dict[str, Question] = {}
        self.waiting: dict[str, dict[str, Question]] = {"view": {}, "chain": {}}


class BackgroundRunner(_App):
    """Mixin for the App: answers the panes' questions in thread workers, one per lane at a time."""

    _lanes: _Lanes | None = None

    @property
    def lanes(self) -> _Lanes:
        """Return the answers and the questions in hand (made on first use)."""
        if self._lanes is None:
            self._lanes = _Lanes()
        return self._lanes

    def known(self, key: Hashable) -> tuple[bool, Any]:
        """Return (True, answer) when ``key`` was answered before, else (False, None)."""
        answers = self.lanes.answers
        if key in answers:
            answers.move_to_end(key)
            return True, answers[key]
        return False, None

    def ask(self, question: Question) -> tuple[bool, Any]:
        """Return (True, answer) when the answer is known; otherwise queue the question and return (False, None)."""
        found = self.known(question.key)
        if found[0]:
            return found
        lanes = self.lanes
        running = lanes.asking.get(question.lane)
        waiting = lanes.waiting[question.lane]
        waiting.pop(question.channel, None)
        if running is not None and running.key == question.key:
            return False, None  # what is asked now is already being answered
        waiting[question.channel] = question
        if running is None:
            self._next_question(question.lane)
        return False, None

    @property
    def answering(self) -> bool:
        """Return True while a question is being answered or waits."""
        lanes = self.lanes
        return bool(lanes.asking) or any(lanes.waiting.values())

    def _next_question(self, lane: str) -> None:
        lanes = self.lanes
        waiting = lanes.waiting[lane]
        if not waiting:
            lanes.asking.pop(lane, None)
            return
        question = waiting.pop(next(iter(waiting)))
        lanes.asking[lane] = question
        self.run_worker(question.compute, name=_name(question), group="answers", thread=True, exit_on_error=False)

    def answer_finished(self, event: Worker.StateChanged) -> bool:
        """Deliver a finished answer; return True when ``event`` was about an answer (the App calls it)."""
        if event.worker.group != "answers":
            return False
        if event.state not in (WorkerState.SUCCESS, WorkerState.ERROR, WorkerState.CANCELLED):
            return True
        lanes = self.lanes
        question = next((q for q in lanes.asking.values() if event.worker.name == _name(q)), None)
        if question is None:
            return True
        del lanes.asking[question.lane]
        if event.state == WorkerState.SUCCESS:
            answer = event.worker.result
            lanes.answers[question.key] = answer
            while len(lanes.answers) > KEEP:
                lanes.answers.popitem(last=False)
            question.owner.post_message(Answered(question.key, answer))
        elif not isinstance(event.worker.error, Stale):
            error = event.worker.error
            question.owner.post_message(Answered(question.key, None, one_line(error) if error is not None else "stopped"))
        self._next_question(question.lane)
        return True


def _name(question: Question) -> str:
    return f"answer-{id(question)}"
