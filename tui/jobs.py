"""The jobs the workbench runs in the fit worker, one builder per action.

Each builder returns a ``FitJob`` whose ``run`` calls the engine (in the worker thread) and
returns the message to post; the snapshot of the chain is taken there too, while no other
thread holds the chain's lock. Every job that changes the chain then saves its session
(``ctx.save``); the jobs that decide the next stage (audition, grow, references) are in
``decision_jobs``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Literal, get_args

import pandas as pd
from textual.message_pump import MessagePump

import stages
from stages.spec import StageSpec

from .answers import compact_ids
from .format import number, pair_text
from .messages import ChainChanged, ChainFileOpened, ChainReady, FileWritten, StageFitted
from .view import ChainView, ImportanceCache, view_of_chain
from .worker import FitJob, JobContext

if TYPE_CHECKING:
    from stages.chain import Chain
    from stages.files.recipe import Recipe
    from stages.validation import ValidationSpec


@dataclass(frozen=True)
class SetupChoices:
    """What the setup screen collected: data, target, excluded columns, loss, validation and seed, and the
    weight and exposure columns and tweedie power when set."""

    frame: pd.DataFrame
    source: str
    data_path: str | None
    target: str
    ignore: tuple[str, ...]
    loss: str | None
    validation: ValidationSpec
    seed: int
    dates: dict[str, tuple[str, ...]] | None = None
    weight: str | None = None       # the column of row weights
    exposure: str | None = None     # the column of exposures (log-link losses)
    power: float | None = None      # the tweedie loss's power
    features: tuple[str, ...] | None = None  # set when the user made an id column a feature


#: during a long job (a recipe, a grow) the session is saved after a stage at most this often, in seconds
SAVE_EVERY = 5.0


class SessionSaver:
    """Saves a chain's session during a long job: after a stage once SAVE_EVERY seconds have passed."""

    def __init__(self, ctx: JobContext) -> None:
        self.ctx = ctx
        self.last = time.monotonic()
        self.problem = ""

    def after_stage(self, chain: Chain) -> None:
        """Save when the last save is SAVE_EVERY seconds old."""
        if time.monotonic() - self.last >= SAVE_EVERY:
            self.now(chain)

    def now(self, chain: Chain) -> str:
        """Save now and return "" or why the session could not be saved."""
        self.problem = self.ctx.save(chain)
        self.last = time.monotonic()
        return self.problem


def score_change(before: ChainView | None, after: ChainView) -> str:
    """Return the change in the last row's validation metric, as the status line says it (both
    numbers in one style, so the digits that changed show)."""
    if before is None or not before.rows:
        return f"valid {after.metric} {number(after.rows[-1].valid)}"
    old, new = pair_text(before.rows[-1].valid, after.rows[-1].valid)
    return f"valid {after.metric} {old} → {new}"


def new_chain(owner: MessagePump, choices: SetupChoices, cache: ImportanceCache) -> FitJob:
    """Return the job that builds a chain from the setup screen's choices."""

    # a finished worker outlives its job (Textual keeps it in the worker thread's context), so
    # the job hands the choices, and the frame in them, over instead of holding them
    held = [choices]

    def run(ctx: JobContext) -> ChainReady:
        ctx.progress(0.0, "preparing the data")
        choices = held.pop()
        chain = stages.Chain(choices.frame, choices.target, choices.validation, choices.loss, seed=choices.seed,
                             ignore=choices.ignore, source=choices.source, data_path=choices.data_path or None,
                             features=None if choices.features is None else list(choices.features),
                             dates={k: list(v) for k, v in (choices.dates or {}).items()},
                             weight=choices.weight, exposure=choices.exposure, power=choices.power)
        id_column = chain.schema.id_column
        ids = compact_ids(choices.frame[id_column]) if id_column else None
        view = view_of_chain(chain, cache)
        return ChainReady(chain, view, session_error=ctx.save(chain), ids=ids)

    return FitJob("building the chain", run, owner, cancellable=False,
                  failure_note="nothing was built; change the choices and start again")


def replay_recipe(owner: MessagePump, recipe: Recipe, data: str | None, cache: ImportanceCache) -> FitJob:
    """Return the job that builds a recipe's chain and fits its stages one at a time."""
    from stages.files.recipe import build_chain
    from stages.files.recipe_steps import replay

    def run(ctx: JobContext) -> ChainChanged:
        ctx.progress(0.0, "reading the data")
        chain = build_chain(recipe, data)
        views = [view_of_chain(chain, cache)]
        ctx.post(ChainReady(chain, views[0]))
        saver = SessionSaver(ctx)

        def stage_done(chain: Chain) -> None:
            before, after = views[-1], view_of_chain(chain, cache)
            views.append(after)
            kind = chain.stages[-1].kind
            ctx.post(StageFitted(after, f"fitted {kind} as stage {len(chain)}: {score_change(before, after)}"))
            saver.after_stage(chain)

        try:
            replay(chain, recipe, cancel=ctx.cancel, progress=ctx.progress, on_stage=stage_done)
        except BaseException:
            saver.now(chain)  # the stages fitted before the failure are kept: so is their session
            raise
        return ChainChanged(view_of_chain(chain, cache), "recipe", f"fitted the recipe {recipe.name}: {len(chain)} stages",
                            session_error=saver.now(chain))

    return FitJob(f"fitting {recipe.name}", run, owner,
                  failure_note="the stages fitted before it are kept")


def add_stages(owner: MessagePump, chain: Chain, cache: ImportanceCache, before: ChainView,
               spec: StageSpec, repeat: int) -> FitJob:
    """Return the job that fits ``repeat`` stages of ``spec`` after the last stage."""
    what = spec.kind if repeat == 1 else f"{repeat} × {spec.kind}"

    def run(ctx: JobContext) -> ChainChanged:
        new = chain.add_specs([spec] * repeat, cancel=ctx.cancel, progress=ctx.progress)
        view = view_of_chain(chain, cache)
        first = len(chain) - len(new) + 1
        where = f"stage {first}" if repeat == 1 else f"stages {first}-{len(chain)}"
        return ChainChanged(view, "add", f"added {what} as {where}: {score_change(before, view)}", len(chain),
                            session_error=ctx.save(chain))

    return FitJob(f"adding {what}", run, owner)


def drop_stage(owner: MessagePump, chain: Chain, cache: ImportanceCache, before: ChainView, row: int) -> FitJob:
    """Return the job that drops stage ``row`` and refits the stages after it."""
    kind = before.rows[row].kind

    def run(ctx: JobContext) -> ChainChanged:
        refits = chain.drop(row, cancel=ctx.cancel, progress=ctx.progress)
        view = view_of_chain(chain, cache)
        refit = f", refit {len(refits)} after it" if refits else ""
        return ChainChanged(view, "drop", f"dropped stage {row} ({kind}){refit}: {score_change(before, view)}",
                            min(row, len(chain)), session_error=ctx.save(chain))

    return FitJob(f"dropping stage {row}", run, owner)


#: the changes that need no fit
QuickChange = Literal["step back", "trim", "undo"]


def quick_change(owner: MessagePump, chain: Chain, cache: ImportanceCache, before: ChainView,
                 action: QuickChange) -> FitJob:
    """Return the job for an action that needs no fit: step back, trim or undo (anything else raises
    ValueError)."""
    if action not in get_args(QuickChange):
        raise ValueError(f"no quick change {action!r} (one of {', '.join(get_args(QuickChange))})")

    def run(ctx: JobContext) -> ChainChanged:
        if action == "step back":
            stage = chain.step_back()
            summary = f"stepped back: removed stage {len(chain) + 1} ({stage.kind})"
        elif action == "trim":
            removed = chain.trim()
            summary = f"trimmed to the best stage {len(chain)}: removed {len(removed)}"
        elif action == "undo":
            summary = f"undid the {chain.undo()}: {len(chain)} stages"
        view = view_of_chain(chain, cache)
        summary += f"; {score_change(before, view)}"
        return ChainChanged(view, action, summary, len(chain), session_error=ctx.save(chain))

    return FitJob(action, run, owner, cancellable=False)


def write_text(path: Path, text: str, what: str = "recipe") -> None:
    """Write ``text`` at ``path`` with the one atomic writer, so no half file is ever left; raise
    RecipeError naming the file when it cannot be written (not a regular file, a full disk ...)."""
    from stages.atomic import atomic_output

    with atomic_output(path, text=True, what=what, error=stages.RecipeError) as out:
        out.write(text)


def save_chain(owner: MessagePump, chain: Chain, path: Path) -> FitJob:
    """Return the job that writes the chain file at ``path``."""

    def run(ctx: JobContext) -> FileWritten:
        chain.save(path)
        return FileWritten(path, "chain file")

    return FitJob(f"saving {path.name}", run, owner, cancellable=False, failure_note="nothing was written")


def export_recipe(owner: MessagePump, chain: Chain, path: Path) -> FitJob:
    """Return the job that writes the chain's recipe at ``path`` (data path relative to it)."""
    from stages.files.recipe import chain_to_recipe

    def run(ctx: JobContext) -> FileWritten:
        text = chain_to_recipe(chain, base_dir=path.resolve().parent)
        write_text(path, text)
        return FileWritten(path, "recipe")

    return FitJob(f"exporting {path.name}", run, owner, cancellable=False, failure_note="nothing was written")


def open_chain_file(owner: MessagePump, path: Path) -> FitJob:
    """Return the job that reads a chain file for read-only inspection."""

    def run(ctx: JobContext) -> ChainFileOpened:
        return ChainFileOpened(stages.load(path), path)

    return FitJob(f"opening {path.name}", run, owner, cancellable=False, failure_note="nothing was opened")
