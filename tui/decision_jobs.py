"""The jobs that decide the next stage: audition and keep, grow, the reference models and the reveal.

Like ``jobs``, each builder returns a ``FitJob`` whose ``run`` calls the engine in the worker
and returns the message to post; the jobs that change the chain save its session after.
"""

from __future__ import annotations

import time
from typing import TYPE_CHECKING, Any

from textual.message_pump import MessagePump

from stages.decide.audition import best_candidate, one_standard_error_choice
from stages.decide.grow import GrowResult, grow_spec
from stages.errors import FitCancelled, RemnantError
from stages.spec import StageSpec

from .format import spec_text
from .jobs import SessionSaver, score_change
from .messages import AuditionDone, ChainChanged, ReferencesFitted, StageGrown
from .view import ChainView, ImportanceCache, view_of_chain
from .worker import FitJob, JobContext

if TYPE_CHECKING:
    from stages.chain import Chain
    from stages.decide.audition import Candidate

#: a grow shows the chain it has grown so far at most this often, in seconds: fast stages would
#: otherwise flood the screen with snapshots it cannot draw in time (and delay the cancel key)
LIVE_EVERY = 0.25


def audition(owner: MessagePump, chain: Chain, tables: list[dict[str, Any]], count: int) -> FitJob:
    """Return the job that fits the candidate ``tables`` (grids expanded) side by side."""

    def run(ctx: JobContext) -> AuditionDone:
        candidates = chain.audition(tables, cancel=ctx.cancel, progress=ctx.progress)
        choice = candidates.index(one_standard_error_choice(candidates))
        return AuditionDone(candidates, choice, candidates.index(best_candidate(candidates)))

    return FitJob(f"auditioning {count} candidate{'s' if count != 1 else ''}", run, owner)


def keep(owner: MessagePump, chain: Chain, cache: ImportanceCache, before: ChainView, candidate: Candidate,
         number: int) -> FitJob:
    """Return the job that commits an auditioned candidate as the next stage, with no refit."""
    what = f"candidate {number} ({candidate.spec.kind}, {spec_text(candidate.spec)})"

    def run(ctx: JobContext) -> ChainChanged:
        chain.keep(candidate)
        view = view_of_chain(chain, cache)
        summary = f"kept {what} as stage {len(chain)}, no refit: {score_change(before, view)}"
        return ChainChanged(view, "keep", summary, len(chain), session_error=ctx.save(chain))

    return FitJob(f"keeping candidate {number}", run, owner, cancellable=False)


def grow_summary(result: GrowResult, kind: str, start: int, patience: int | None) -> str:
    """Return the status line after a grow: the trim first (it is what the table shows), then why it stopped."""
    plural = "s" if result.grown != 1 else ""
    if result.cancelled:
        return f"grow cancelled: kept the {result.grown} {kind} stage{plural} grown (no trim)"
    why = (f"no better validation for {patience} in a row" if result.stopped == "patience"
           else "the most stages asked for")
    if result.kept == result.grown:
        return f"grew {result.grown} {kind} stage{plural}, the last is the best ({why})"
    if result.kept:
        return (f"trimmed to the best, stage {result.best_row}: kept {result.kept} of {result.grown} {kind} "
                f"stages grown ({why}; u undoes)")
    return f"none of the {result.grown} {kind} stage{plural} grown beat stage {start}: none kept ({why}; u undoes)"


def grow(owner: MessagePump, chain: Chain, cache: ImportanceCache, before: ChainView, spec: StageSpec,
         max_stages: int, patience: int | None) -> FitJob:
    """Return the job that grows stages of ``spec``; each committed stage is posted as it comes."""

    def run(ctx: JobContext) -> ChainChanged:
        saver = SessionSaver(ctx)
        start = len(chain)
        shown = [0.0]

        def stage_done(chain: Chain) -> None:
            if time.monotonic() - shown[0] >= LIVE_EVERY:
                view = view_of_chain(chain, cache)
                ctx.post(StageGrown(view, f"growing {spec.kind}: {len(chain) - start} grown, "
                                          f"{score_change(before, view)}"))
                shown[0] = time.monotonic()
            saver.after_stage(chain)

        try:
            result = grow_spec(chain, spec, max_stages=max_stages, patience=patience, cancel=ctx.cancel,
                               progress=ctx.progress, on_stage=stage_done)
        except BaseException:
            saver.now(chain)  # the stages grown before a failure are kept: so is their session
            raise
        view = view_of_chain(chain, cache)
        return ChainChanged(view, "grow", grow_summary(result, spec.kind, start, patience), len(chain),
                            session_error=saver.now(chain))

    return FitJob(f"growing {spec.kind}", run, owner, failure_note="the stages grown before it are kept")


def references(owner: MessagePump, chain: Chain) -> FitJob:
    """Return the job that fits the reference models on the chain's split."""

    def run(ctx: JobContext) -> ReferencesFitted:
        ctx.progress(0.0, "linear alone, then LightGBM with early stopping")
        return ReferencesFitted(chain.references(cancel=ctx.cancel, progress=ctx.progress), chain.test_revealed)

    return FitJob("fitting the reference models", run, owner, failure_note="the chain is as it was")


def reveal(owner: MessagePump, chain: Chain, cache: ImportanceCache) -> FitJob:
    """Return the job that reveals the locked test part and scores the reference models on it too."""

    def run(ctx: JobContext) -> ChainChanged:
        chain.reveal_test()
        view = view_of_chain(chain, cache)
        summary = (f"revealed the locked test part (reveal {chain.reveal_count} of this chain); choices "
                   "made from here on are biased by it")
        ctx.progress(0.3, "scoring the reference models on the test part")
        try:
            ctx.post(ReferencesFitted(chain.references(cancel=ctx.cancel), True))
        except FitCancelled:
            summary += " · references not fitted (cancelled)"
        except RemnantError as err:
            summary += f" · references failed: {err}"
        return ChainChanged(view, "reveal", summary, None, session_error=ctx.save(chain))

    return FitJob("revealing the test part", run, owner)
