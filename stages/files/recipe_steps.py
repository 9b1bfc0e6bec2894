"""The steps of a recipe beyond plain stages: growing with ``patience`` and ``[[audition]]`` tables.

A ``[[stage]]`` entry with ``repeat = N`` and ``patience = P`` grows up to N stages and stops
when the validation score has not improved for P stages, then trims back to the best.

An ``[[audition]]`` table fits candidate stages side by side on the residuals at that point and
keeps one::

    [[audition]]
    after = 1                 # after the first [[stage]] entry; default: after the last one
    choose = "best"           # best | one_standard_error
    [[audition.candidate]]
    kind = "forest"
    params = { max_features = [0.33, 0.5, 1.0] }   # a list is a grid: three candidates
    [[audition.candidate]]
    kind = "lightgbm"
    params = { num_leaves = [15, 63] }
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from .. import parsing
from ..errors import RecipeError, StageSpecError
from ..kinds.base import ProgressFn
from ..spec import StageSpec

if TYPE_CHECKING:
    from ..chain import Chain
    from .recipe import Recipe

AUDITION_KEYS = ("after", "choose", "candidate")


@dataclass(frozen=True)
class Audition:
    """Candidates to fit side by side after ``after`` stage entries, and the rule that keeps one."""

    after: int | None
    candidates: tuple[StageSpec, ...]
    choose: str = "best"

    def to_dict(self) -> dict[str, Any]:
        """Return the audition as a TOML-ready dict (candidates as a list of stage dicts)."""
        out: dict[str, Any] = {"choose": self.choose}
        if self.after is not None:
            out["after"] = self.after
        out["candidate"] = [parsing.as_candidate(spec) for spec in self.candidates]
        return out


def parse_auditions(entries: Any, where: Callable[[int, str | None], str], n_stage_entries: int,
                    task: str | None) -> tuple[Audition, ...]:
    """Return the checked ``[[audition]]`` tables; ``where(i, key)`` names the recipe line for messages."""
    from ..decide.audition import CHOICE_RULES

    if entries is None:
        return ()
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
        raise RecipeError(f"{where(0, None)}: auditions must be written [[audition]], one table each")
    found = []
    for i, entry in enumerate(entries):
        try:
            parsing.check_keys(entry, AUDITION_KEYS, "[[audition]]")
        except StageSpecError as err:
            raise RecipeError(f"{where(i, err.key)}: {err}") from None
        after = entry.get("after")
        if after is not None and (isinstance(after, bool) or not isinstance(after, int) or not 0 <= after <= n_stage_entries):
            raise RecipeError(f"{where(i, 'after')}: after must be a whole number from 0 to {n_stage_entries}, not {after!r}")
        choose = entry.get("choose", "best")
        if choose not in CHOICE_RULES:
            raise RecipeError(f"{where(i, 'choose')}: choose must be one of {', '.join(CHOICE_RULES)}, not {choose!r}")
        candidates = entry.get("candidate")
        if not isinstance(candidates, list) or not candidates or not all(isinstance(c, dict) for c in candidates):
            raise RecipeError(f"{where(i, 'candidate')}: [[audition]] needs at least one [[audition.candidate]]")
        specs: list[StageSpec] = []
        for candidate in candidates:
            try:
                specs += parsing.expand_grid(candidate, task or "regression", where="[[audition.candidate]]",
                                             toml=True)
            except StageSpecError as err:
                raise RecipeError(f"{where(i, 'candidate')}: {err}") from None
        found.append(Audition(after, tuple(specs), choose))
    return tuple(found)


def replay(chain: Chain, recipe: Recipe, *, cancel: threading.Event | None = None,
           progress: ProgressFn | None = None, on_stage: Callable[[Chain], None] | None = None) -> None:
    """Fit the recipe's stage entries in order on ``chain``: plain repeats, grows with patience, auditions.

    ``on_stage(chain)`` is called after every committed stage; a plain ``repeat`` is then fit one
    stage at a time (the same stages: each is fit on the residuals of the one before).
    """
    from ..decide.audition import CHOICE_RULES
    from ..decide.grow import grow_spec

    entries = list(recipe.stages)
    steps = len(entries) + len(recipe.auditions)
    done = 0

    def step_progress(fraction: float, message: str = "") -> None:
        if progress is not None:
            progress((done + fraction) / steps, message)

    def run_auditions(position: int) -> None:
        nonlocal done
        for audition in recipe.auditions:
            at = len(entries) if audition.after is None else audition.after
            if at == position:
                # each candidate as a table that is that one candidate (its grid is expanded already)
                tables = [parsing.as_candidate(spec) for spec in audition.candidates]
                candidates = chain.audition(tables, cancel=cancel, progress=step_progress)
                chain.keep(CHOICE_RULES[audition.choose](candidates))
                done += 1
                if on_stage is not None:
                    on_stage(chain)

    for i, (spec, repeat) in enumerate(entries):
        run_auditions(i)
        patience = recipe.patience.get(i)
        if patience is None and on_stage is None:
            chain.add_specs([spec] * repeat, cancel=cancel, progress=step_progress)
        elif patience is None and on_stage is not None:
            for _ in range(repeat):
                chain.add_specs([spec], cancel=cancel, progress=step_progress)
                on_stage(chain)
        else:
            try:
                grow_spec(chain, spec, max_stages=repeat, patience=patience, cancel=cancel, progress=step_progress,
                          on_stage=on_stage)
            except StageSpecError as err:
                raise RecipeError(f"{recipe.where('stage', i, 'patience')}: {err}") from None
        done += 1
    run_auditions(len(entries))
