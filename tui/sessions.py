"""Resuming a saved session: the offer shown when a data file with a session is opened, and the job.

The offer is read before the first screen (it hashes the data file to tell whether it
changed); resuming loads the session in the fit worker, refitting its stages only when the
user chose to resume on changed data.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from textual.message_pump import MessagePump

from stages.errors import RemnantError
from stages.files import session as sessions

from .messages import ChainReady
from .view import ImportanceCache, view_of_chain
from .worker import FitJob, JobContext, one_line


@dataclass(frozen=True)
class ResumeOffer:
    """A saved session of a data file: what it holds, what changed in the data, or why it cannot be read."""

    path: Path
    summary: dict[str, Any] = field(default_factory=dict)
    changes: tuple[str, ...] = ()
    problem: str = ""
    data_path: str | None = None  # the file the user opened: the session is resumed on it, never on its stored path

    @property
    def changed(self) -> bool:
        """Return True when the data file differs from the one the session was fit on."""
        return bool(self.changes)

    @property
    def stages(self) -> list[str]:
        """Return the kinds of the session's stages, in order."""
        return list(self.summary.get("stages", ()))


def resume_offer(data_path: str | Path | None) -> ResumeOffer | None:
    """Return the offer for the session of ``data_path``, or None when it has none."""
    if data_path is None:
        return None
    path = sessions.session_path(data_path)
    if not path.is_file():
        return None
    try:
        summary = sessions.session_summary(path)
        changes = tuple(sessions.data_changes(path, data_path))
    except RemnantError as err:
        return ResumeOffer(path, problem=one_line(err), data_path=str(data_path))
    return ResumeOffer(path, summary, changes, data_path=str(data_path))


def saved_when(summary: dict[str, Any]) -> str:
    """Return when a session was saved, in local time (``2025-03-01 14:05``), or as stored."""
    text = str(summary.get("saved", ""))
    try:
        return datetime.fromisoformat(text).astimezone().strftime("%Y-%m-%d %H:%M")
    except ValueError:
        return text or "at an unknown time"


def kinds_text(kinds: list[str]) -> str:
    """Return stage kinds with runs folded: ``linear, tree, 75 × tree`` becomes ``linear, 76 × tree``."""
    runs: list[list] = []
    for kind in kinds:
        if runs and runs[-1][0] == kind:
            runs[-1][1] += 1
        else:
            runs.append([kind, 1])
    return ", ".join(kind if n == 1 else f"{n} × {kind}" for kind, n in runs)


def describe_offer(offer: ResumeOffer) -> str:
    """Return one line saying what the session holds: data, target, stages, removals to undo."""
    summary = offer.summary
    kinds = offer.stages
    stages = f"{len(kinds)} stage{'s' if len(kinds) != 1 else ''}" + (f": {kinds_text(kinds)}" if kinds else "")
    removals = int(summary.get("removals", 0))
    undo = f" · {removals} removal{'s' if removals != 1 else ''} to undo" if removals else ""
    return f"{summary.get('data', '?')} → {summary.get('target', '?')} · {stages}{undo}"


def resume_job(owner: MessagePump, offer: ResumeOffer, cache: ImportanceCache) -> FitJob:
    """Return the job that loads the offered session (refitting its stages when the data changed)."""
    refit = offer.changed

    def run(ctx: JobContext) -> ChainReady:
        ctx.progress(0.0, "refitting on the changed data" if refit else "reading the session")
        chain = sessions.load_session(offer.path, offer.data_path, allow_changed=refit, cancel=ctx.cancel,
                                      progress=ctx.progress)
        view = view_of_chain(chain, cache)
        n = len(chain)
        if refit:
            summary = f"resumed on the changed data: refit {n} stage{'s' if n != 1 else ''} from the session's specs"
            return ChainReady(chain, view, summary, session_error=ctx.save(chain))
        undo = " · u undoes the last removal" if chain.can_undo() else ""
        return ChainReady(chain, view, f"resumed the session saved {saved_when(offer.summary)}: "
                                       f"{n} stage{'s' if n != 1 else ''}{undo}")

    label = "resuming on the changed data" if refit else "resuming the session"
    # refitting every stage can take as long as fitting them did: it can be cancelled like a fit
    return FitJob(label, run, owner, cancellable=refit,
                  failure_note="nothing was resumed; the session file is untouched")
