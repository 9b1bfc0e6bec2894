"""Audition: several candidate next stages fit side by side on the chain's current residuals.

Every candidate is fit on every track from a copy of the chain's random streams as they
stand, so each sees the stream the next ``add`` would see and the chain itself is untouched.
Keeping a candidate commits its fitted stage as the next stage with no refit: the result is
bit for bit what ``chain.add`` of that spec would have given, streams included.

With k-fold validation candidates are compared on their out-of-fold scores, and each carries
its per-fold scores and their standard error, so that the one standard error rule (Breiman,
Friedman, Olshen & Stone 1984, Classification and Regression Trees; Hastie, Tibshirani &
Friedman 2009, The Elements of Statistical Learning, 2nd ed., section 7.10) can pick the
first candidate that is not really worse than the best.
"""

from __future__ import annotations

import dataclasses
import threading
from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .. import scoring
from ..errors import ChainStateError, FitCancelled, RemnantError, StageFitError, StageSpecError
from ..fitting import FitContext, Stage, fit_stage
from ..kinds import get_kind
from ..kinds.base import ProgressFn
from ..metrics import HIGHER_IS_BETTER
from ..parsing import MAX_CANDIDATES, expand_grid
from ..scoring import Scores, fold_spread
from ..spec import StageSpec
from ..threads import share

if TYPE_CHECKING:
    from ..chain import Chain
    from ..chain_state import ChainState

@dataclass(frozen=True, eq=False)
class Candidate:
    """One auditioned next stage: its spec, its fitted stage and scores, or the error that stopped it.

    ``delta`` is the change in the chain's validation metric the candidate would make (out of
    fold for k-fold chains); ``fold_scores`` the per-fold validation metric and ``spread``
    their standard error (NaN without folds). ``histogram`` holds the counts of its train and
    validation residuals over ``edges``, which every candidate of one audition shares.
    """

    spec: StageSpec
    metric: str
    stage: Stage | None = None
    scores: Scores | None = None
    delta: float = float("nan")
    seconds: float = 0.0
    histogram: dict[str, np.ndarray] = field(default_factory=dict)
    edges: np.ndarray = field(default_factory=lambda: np.zeros(0))
    error: str | None = None
    origin: tuple[Stage, ...] = ()
    chain_id: int = 0

    @property
    def ok(self) -> bool:
        """Return True when the candidate fitted and can be kept."""
        return self.stage is not None and self.error is None

    @property
    def valid(self) -> float:
        """Return the candidate's validation metric (NaN when it failed)."""
        return self.scores.valid[self.metric] if self.scores is not None else float("nan")

    @property
    def train(self) -> float:
        """Return the candidate's train metric (NaN when it failed)."""
        return self.scores.train[self.metric] if self.scores is not None else float("nan")

    @property
    def fold_scores(self) -> tuple[float, ...]:
        """Return the per-fold validation metric (empty without k-fold validation)."""
        return self.scores.fold_valid if self.scores is not None else ()

    @property
    def spread(self) -> float:
        """Return the standard error of the per-fold scores (NaN for fewer than two folds)."""
        return fold_spread(self.fold_scores)


def audition(chain: Chain, specs: Sequence[StageSpec | Mapping[str, Any]], *, cancel: threading.Event | None = None,
             progress: ProgressFn | None = None, workers: int = 2) -> list[Candidate]:
    """Return one Candidate per spec (grids expanded), each fit on the chain's current residuals.

    The fits run ``workers`` at a time in threads (never more than the chain's threads), each learner
    on its share of the chain's threads; ``progress`` may be called from any of them. A candidate that fails comes back with its one-line ``error``; when every one
    fails, StageFitError is raised. Cancelling raises FitCancelled. The chain is never changed.
    """
    expanded = [one for spec in specs for one in expand_grid(spec)]
    if not expanded:
        raise StageSpecError("an audition needs at least one candidate")
    if len(expanded) > MAX_CANDIDATES:
        raise StageSpecError(f"the audition has {len(expanded)} candidates; at most {MAX_CANDIDATES}")
    for spec in expanded:
        chain.check_spec(spec)
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise StageSpecError(f"workers must be a whole number of at least 1, not {workers!r}")
    state = chain.state()
    report = _Progress(progress, len(expanded))
    # workers times each learner's threads never above the chain's threads (the usable cores)
    workers, per_worker = share(chain.threads, min(workers, len(expanded)))

    def fit_one(i: int) -> Stage | str:
        return _fit_candidate(chain, expanded[i], state, per_worker, cancel, report.part(i, expanded[i].kind))

    with ThreadPoolExecutor(max_workers=workers, thread_name_prefix="audition") as pool:
        futures = [pool.submit(fit_one, i) for i in range(len(expanded))]
        outcomes = [_outcome(future) for future in futures]
    if any(isinstance(o, FitCancelled) for o in outcomes) or (cancel is not None and cancel.is_set()):
        raise FitCancelled("audition cancelled; the chain is as it was")
    if not any(isinstance(o, Stage) for o in outcomes):
        raise StageFitError(f"every candidate failed; the first: {outcomes[0]}")
    return _candidates(chain, expanded, outcomes, state.scores, state.stages)


def _fit_candidate(chain: Chain, spec: StageSpec, state: ChainState, threads: int, cancel: threading.Event | None,
                   progress: ProgressFn | None) -> Stage | str:
    """Return ``spec`` fit on ``threads`` threads from copies of the random streams of ``state``, or
    its one-line error; FitCancelled propagates."""
    ctx = FitContext(chain.matrix, chain.y, chain.schema, chain.layout, chain.loss, state.new_streams(), chain.weight,
                     threads)
    try:
        stage = fit_stage(ctx, _within_share(spec, chain.task, threads), state.outputs,
                          number=len(state.stages) + 1, cancel=cancel, progress=progress)
    except FitCancelled:
        raise
    except RemnantError as exc:
        return str(exc)
    # the thread share is not part of what the user asked for, nor of the fitted model
    return dataclasses.replace(stage, spec=spec, params=get_kind(spec.kind).resolve_params(spec.params, chain.task))


#: each kind's thread parameter, by the name its resolved parameters use
_THREAD_PARAMS = {"lightgbm": "num_threads", "hist_tree": "num_threads", "forest": "n_jobs", "extra_trees": "n_jobs"}


def _within_share(spec: StageSpec, task: str, per_worker: int) -> StageSpec:
    """Return ``spec`` with a thread count the user set above ``per_worker`` (or all cores, -1) lowered to it.

    A learner whose threads are unset takes the candidate's share through its fit context; one the
    user gave more threads would make the candidates together oversubscribe the cores. LightGBM
    with ``deterministic`` and scikit-learn's forests (whose trees' seeds are drawn before any is
    grown) fit the same model on any thread count, so the kept stage equals one ``chain.add`` fits.
    """
    name = _THREAD_PARAMS.get(spec.kind)
    if name is None:
        return spec
    value = get_kind(spec.kind).resolve_params(spec.params, task).get(name)
    if value in (None, 0) or (isinstance(value, int) and 0 < value <= per_worker):
        return spec
    params = {k: v for k, v in spec.params.items() if k not in ("n_jobs", "num_threads")}
    params[name] = per_worker
    return dataclasses.replace(spec, params=params)


def _outcome(future: Any) -> Stage | str | FitCancelled:
    try:
        return future.result()
    except FitCancelled as exc:
        return exc


def _candidates(chain: Chain, specs: list[StageSpec], outcomes: list[Any], base: Scores,
                origin: tuple[Stage, ...]) -> list[Candidate]:
    """Return the candidates with their scores and residual histograms over shared edges."""
    metric = chain.metric
    scored = {i: scoring.score_state(chain.loss, chain.layout, chain.y, o.outputs, chain.threshold, chain.weight)
              for i, o in enumerate(outcomes) if isinstance(o, Stage)}
    residuals = {i: _residuals(chain, outcomes[i].outputs) for i in scored}
    pooled = [r for i in scored for r in residuals[i].values()]
    _, edges = scoring.histogram(pooled)
    out = []
    for i, spec in enumerate(specs):
        if i not in scored:
            out.append(Candidate(spec, metric, error=outcomes[i], origin=origin, chain_id=id(chain)))
            continue
        stage, scores = outcomes[i], scored[i]
        counts, _ = scoring.histogram(list(residuals[i].values()), bins=edges)
        out.append(Candidate(
            spec, metric, stage=stage, scores=scores, delta=scores.valid[metric] - base.valid[metric],
            seconds=stage.fit_seconds, histogram=dict(zip(residuals[i], counts, strict=True)), edges=edges,
            origin=origin, chain_id=id(chain),
        ))
    return out


def _residuals(chain: Chain, outputs: tuple[np.ndarray, ...]) -> dict[str, np.ndarray]:
    """Return the displayed train and validation residuals of a state with ``outputs`` (``scoring.shown_residual``)."""
    layout, y = chain.layout, chain.y
    out = {"train": scoring.shown_residual(chain.loss, y[layout.train], outputs[0][layout.train])}
    valid_y = scoring.validation_y(layout, y)
    if len(valid_y):
        out["valid"] = scoring.shown_residual(chain.loss, valid_y, scoring.validation_raw(layout, outputs))
    return out


def keep(chain: Chain, candidate: Candidate) -> Stage:
    """Commit ``candidate``'s fitted stage as the chain's next stage, with no refit, and return it.

    Raises StageSpecError when the candidate failed, and ChainStateError when the chain has
    changed since the audition (another stage added, removed or undone).
    """
    if not candidate.ok or candidate.stage is None:
        raise StageSpecError(f"candidate {candidate.spec.kind!r} failed ({candidate.error}); there is nothing to keep")
    changed = ChainStateError("the chain changed since this audition; audition again")
    if candidate.chain_id != id(chain):
        raise changed
    try:
        chain.commit(candidate.stage, after=candidate.origin)
    except ChainStateError:
        raise changed from None
    return candidate.stage


def best_candidate(candidates: list[Candidate]) -> Candidate:
    """Return the fitted candidate with the best validation metric (the first on ties).

    Raises StageSpecError when no candidate fitted.
    """
    fitted = [c for c in candidates if c.ok]
    if not fitted:
        raise StageSpecError("no candidate fitted; there is nothing to choose")
    best = fitted[0]
    for c in fitted[1:]:
        if scoring.better(c.metric, c.valid, best.valid):
            best = c
    return best


def one_standard_error_choice(candidates: list[Candidate]) -> Candidate:
    """Return the first candidate whose validation metric is within one standard error of the best.

    The standard error is the best candidate's fold spread; candidates are taken in the order
    given, which should put the simplest first (Breiman et al. 1984; Hastie, Tibshirani &
    Friedman 2009, section 7.10). Without fold scores the spread is unknown and the best
    candidate is returned. Raises StageSpecError when no candidate fitted.
    """
    best = best_candidate(candidates)
    se = best.spread
    if not np.isfinite(se):
        return best
    higher = HIGHER_IS_BETTER.get(best.metric, False)
    for c in candidates:
        if c.ok and ((c.valid >= best.valid - se) if higher else (c.valid <= best.valid + se)):
            return c
    return best


#: the rules a recipe or a screen can name to pick the candidate to keep
CHOICE_RULES = {"best": best_candidate, "one_standard_error": one_standard_error_choice}


def audition_table(candidates: list[Candidate]) -> pd.DataFrame:
    """Return one row per candidate: kind, shrinkage, params, train and validation metric,
    change, fold spread (k-fold only), seconds and error."""
    if not candidates:
        return pd.DataFrame()
    metric = candidates[0].metric
    folds = any(c.fold_scores for c in candidates)
    rows = []
    for i, c in enumerate(candidates, start=1):
        row = {
            "candidate": i, "kind": c.spec.kind, "shrinkage": c.spec.shrinkage,
            "params": ", ".join(f"{k}={v!r}" for k, v in c.spec.params.items()),
            f"train_{metric}": c.train, f"valid_{metric}": c.valid, "change": c.delta,
        }
        if folds:
            row["fold_spread"] = c.spread
        row["seconds"] = c.seconds
        row["error"] = c.error or ""
        rows.append(row)
    return pd.DataFrame(rows)


class _Progress:
    """Merges the progress of concurrent candidates into one fraction and message."""

    def __init__(self, progress: ProgressFn | None, n: int) -> None:
        self.progress = progress
        self.done = [0.0] * n
        self.lock = threading.Lock()

    def part(self, i: int, kind: str) -> ProgressFn | None:
        """Return the progress function of candidate ``i`` (None when nobody listens)."""
        progress = self.progress
        if progress is None:
            return None

        def report(fraction: float, message: str = "") -> None:
            with self.lock:
                self.done[i] = min(max(fraction, 0.0), 1.0)
                overall = sum(self.done) / len(self.done)
                progress(overall, f"candidate {i + 1} of {len(self.done)} ({kind}): {message}")

        return report
