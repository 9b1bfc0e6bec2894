"""The jobs the workbench runs in the fit worker, one builder per action.

Each builder returns a ``FitJob`` whose ``run`` calls the engine (in the worker thread) and
returns the message to post; the snapshot of the chain is taken there too, while no other
thread holds the chain's lock.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
from textual.message_pump import MessagePump

import stages
from stages.spec import StageSpec

from .format import number
from .messages import ChainChanged, ChainFileOpened, ChainReady, FileWritten, StageFitted
from .view import ChainView, ImportanceCache, view_of_chain
from .worker import FitJob, JobContext


@dataclass(frozen=True)
class SetupChoices:
    """What the setup screen collected: data, target, excluded columns, loss, validation and seed."""

    frame: pd.DataFrame
    source: str
    data_path: str | None
    target: str
    ignore: tuple[str, ...]
    loss: str | None
    validation: Any
    seed: int


def _score_change(before: ChainView | None, after: ChainView) -> str:
    if before is None or not before.rows:
        return f"valid {after.metric} {number(after.rows[-1].valid)}"
    return f"valid {after.metric} {number(before.rows[-1].valid)} → {number(after.rows[-1].valid)}"


def build_chain(owner: MessagePump, choices: SetupChoices, cache: ImportanceCache) -> FitJob:
    """Return the job that builds a chain from the setup screen's choices."""

    def run(ctx: JobContext) -> ChainReady:
        ctx.progress(0.0, "preparing the data")
        chain = stages.Chain(choices.frame, choices.target, choices.validation, choices.loss, seed=choices.seed,
                             ignore=choices.ignore, source=choices.source)
        if choices.data_path:
            chain.data_path = choices.data_path
        return ChainReady(chain, view_of_chain(chain, cache))

    return FitJob("building the chain", run, owner, cancellable=False,
                  failure_note="nothing was built; change the choices and start again")


def fit_recipe(owner: MessagePump, recipe: Any, data: str | None, cache: ImportanceCache) -> FitJob:
    """Return the job that builds a recipe's chain and fits its stages one at a time."""
    from stages.recipe import build_chain
    from stages.recipe_steps import replay

    def run(ctx: JobContext) -> ChainChanged:
        ctx.progress(0.0, "reading the data")
        chain = build_chain(recipe, data)
        views = [view_of_chain(chain, cache)]
        ctx.post(ChainReady(chain, views[0]))

        def stage_done(chain: Any) -> None:
            before, after = views[-1], view_of_chain(chain, cache)
            views.append(after)
            kind = chain.stages[-1].kind
            ctx.post(StageFitted(after, f"fitted {kind} as stage {len(chain)}: {_score_change(before, after)}"))

        replay(chain, recipe, cancel=ctx.cancel, progress=ctx.progress, on_stage=stage_done)
        return ChainChanged(view_of_chain(chain, cache), "recipe", f"fitted the recipe {recipe.name}: {len(chain)} stages")

    return FitJob(f"fitting {recipe.name}", run, owner,
                  failure_note="the stages fitted before it are kept")


def add_stages(owner: MessagePump, chain: Any, cache: ImportanceCache, before: ChainView,
               spec: StageSpec, repeat: int) -> FitJob:
    """Return the job that fits ``repeat`` stages of ``spec`` after the last stage."""
    what = spec.kind if repeat == 1 else f"{repeat} × {spec.kind}"

    def run(ctx: JobContext) -> ChainChanged:
        new = chain.add_specs([spec] * repeat, cancel=ctx.cancel, progress=ctx.progress)
        view = view_of_chain(chain, cache)
        first = len(chain) - len(new) + 1
        where = f"stage {first}" if repeat == 1 else f"stages {first}-{len(chain)}"
        return ChainChanged(view, "add", f"added {what} as {where}: {_score_change(before, view)}", len(chain))

    return FitJob(f"adding {what}", run, owner)


def drop_stage(owner: MessagePump, chain: Any, cache: ImportanceCache, before: ChainView, row: int) -> FitJob:
    """Return the job that drops stage ``row`` and refits the stages after it."""
    kind = before.rows[row].kind

    def run(ctx: JobContext) -> ChainChanged:
        refits = chain.drop(row, cancel=ctx.cancel, progress=ctx.progress)
        view = view_of_chain(chain, cache)
        refit = f", refit {len(refits)} after it" if refits else ""
        return ChainChanged(view, "drop", f"dropped stage {row} ({kind}){refit}: {_score_change(before, view)}",
                            min(row, len(chain)))

    return FitJob(f"dropping stage {row}", run, owner)


def quick_change(owner: MessagePump, chain: Any, cache: ImportanceCache, before: ChainView, action: str) -> FitJob:
    """Return the job for an action that needs no fit: step back, trim, undo or reveal."""

    def run(ctx: JobContext) -> ChainChanged:
        if action == "step back":
            stage = chain.step_back()
            summary = f"stepped back: removed stage {len(chain) + 1} ({stage.kind})"
        elif action == "trim":
            removed = chain.trim()
            summary = f"trimmed to the best stage {len(chain)}: removed {len(removed)}"
        elif action == "undo":
            summary = f"undid the {chain.undo()}: {len(chain)} stages"
        else:
            chain.reveal_test()
            summary = (f"revealed the locked test part (reveal {chain.reveal_count}); choices made from "
                       "here on are biased by it")
        view = view_of_chain(chain, cache)
        if action != "reveal":
            summary += f"; {_score_change(before, view)}"
        return ChainChanged(view, action, summary, None if action == "reveal" else len(chain))

    return FitJob(action, run, owner, cancellable=False)


def write_text(path: Path, text: str) -> None:
    """Write ``text`` at ``path`` through a temporary file and a rename, so no half file is ever left."""
    folder = path.resolve().parent
    handle, temp = tempfile.mkstemp(dir=folder, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as out:
            out.write(text)
            out.flush()
            os.fsync(out.fileno())
        os.replace(temp, path)
    except BaseException:
        Path(temp).unlink(missing_ok=True)
        raise


def save_chain(owner: MessagePump, chain: Any, path: Path) -> FitJob:
    """Return the job that writes the chain file at ``path``."""

    def run(ctx: JobContext) -> FileWritten:
        chain.save(path)
        return FileWritten(path, "chain file")

    return FitJob(f"saving {path.name}", run, owner, cancellable=False, failure_note="nothing was written")


def export_recipe(owner: MessagePump, chain: Any, path: Path) -> FitJob:
    """Return the job that writes the chain's recipe at ``path`` (data path relative to it)."""
    from stages.recipe import chain_to_recipe

    def run(ctx: JobContext) -> FileWritten:
        text = chain_to_recipe(chain, base_dir=path.resolve().parent)
        try:
            write_text(path, text)
        except OSError as err:
            raise stages.RecipeError(f"cannot write recipe '{path}': {err.strerror or err}") from None
        return FileWritten(path, "recipe")

    return FitJob(f"exporting {path.name}", run, owner, cancellable=False, failure_note="nothing was written")


def open_chain_file(owner: MessagePump, path: Path) -> FitJob:
    """Return the job that reads a chain file for read-only inspection."""

    def run(ctx: JobContext) -> ChainFileOpened:
        return ChainFileOpened(stages.load(path), path)

    return FitJob(f"opening {path.name}", run, owner, cancellable=False, failure_note="nothing was opened")
