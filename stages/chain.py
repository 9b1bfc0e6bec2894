"""The chain: a start value and stages, each fit to the residuals of the ones before it.

Every stage's cumulative output on every row is cached (the last stages' and every tenth's
held, the others rebuilt to the same bits when read: ``stages.checkpoints``), so stepping back
is a pop and costs no refit; dropping a middle stage refits the stages after it. All mutations are
all-or-nothing: a failed or cancelled fit leaves the chain exactly as it was.
"""

from __future__ import annotations

import logging
import os
import threading
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from . import checkpoints, parts, scoring
from .chain_questions import ChainQuestions
from .chain_state import ChainState, Removal, StreamState, same_stream, seeded_streams, stream_state
from .data import Prepared, Task, load_frame, prepare
from .errors import ChainStateError, RemnantError, StageSpecError
from .fitting import FitContext, Stage, check_weights_taken, fit_stage
from .kinds import get_kind
from .kinds.base import ProgressFn
from .limits import MAX_REPEAT, MAX_SEED, MAX_STAGES
from .loglink import LogLinkLoss
from .losses import LOG_LINK_NAMES, Loss, default_loss, get_loss
from .outputs import start_block
from .parsing import whole_value
from .predictor import FittedChain, FittedStage
from .row_weights import column_name, read_row_values
from .scoring import Scores
from .spec import StageSpec
from .threads import check_threads
from .threads import resolve as resolve_threads
from .tracks import build_layout, check_classes_fit
from .validation import Holdout, Part, TimeOrder, ValidationSpec

log = logging.getLogger(f"remnant.{__name__}")


class Chain(ChainQuestions):
    """A residual chain over one data set, one validation scheme and one loss.

    Parameters
    ----------
    frame : pandas.DataFrame
        The data, one row per example.
    target : str
        The column to predict.
    validation : ValidationSpec
        Holdout, KFold, TimeOrder, GroupHoldout or SplitColumn.
    loss : str, optional
        squared, absolute, huber or logloss; poisson, gamma or tweedie (on the log link, for counts
        and positive amounts); defaults to squared, or logloss for binary and multiclass targets
        (for multiclass, the multinomial log loss).
    seed : int
        Seeds the chain's one random stream.
    data_path : str or path, optional
        The data file the frame was read from (``from_file`` sets it); sessions and recipes refer to it.
    dates : dict, optional
        Date columns and the parts of them that become features, such as ``{"placed_at": ["hour"]}``
        (parts: year, month, day_of_week, hour, day_of_year).
    weight : str or array-like, optional
        A column of row weights (or one weight per row): every loss, start value, leaf, step, metric
        and histogram counts each row in proportion to it. Zero or more, not all zero.
    exposure : str or array-like, optional
        A column of exposures (or one per row), positive, for the log-link losses: log(exposure)
        enters each row's raw score, so the chain models the target per unit of exposure.
    power : float, optional
        The tweedie loss's power, strictly between 1 and 2 (default 1.5).
    threads : int, optional
        The threads a learner uses when its own ``n_jobs`` / ``num_threads`` is unset; default the
        cores this process may use (``stages.threads.usable_cores``: CPU affinity and cgroup quota).
        The fitted stages do not depend on it.

    State
    -----
    ``stages`` (a tuple: the chain changes only through its methods), one score per row, the undo
    stack of removals, one random stream per track, and the test part's reveal. ``state()`` reads
    them together; ``commit`` and ``restore`` put back stages fitted elsewhere. A lock guards them,
    so a fit in one thread and a read in another never see half a change.
    """

    def __init__(
        self,
        frame: pd.DataFrame,
        target: str,
        validation: ValidationSpec | None = None,
        loss: str | None = None,
        *,
        seed: int = 0,
        ignore: tuple[str, ...] | list[str] = (),
        features: list[str] | None = None,
        task: str | None = None,
        positive: str | None = None,
        threshold: float = 0.5,
        source: str = "frame",
        data_path: str | os.PathLike | None = None,
        dates: dict[str, list[str]] | None = None,
        weight: Any = None,
        exposure: Any = None,
        power: float | None = None,
        threads: int | None = None,
    ) -> None:
        seed = whole_value({"seed": seed}, "seed", 0, minimum=0, maximum=MAX_SEED)
        self.threads = check_threads(threads)
        #: a stage's outputs are kept when its position is a multiple of this (``stages.checkpoints``)
        self.checkpoint_every = checkpoints.CHECKPOINT_EVERY
        #: and at least this many last stages' outputs are kept (``stages.checkpoints``)
        self.checkpoint_tail = checkpoints.TAIL
        self._rebuilt = checkpoints.RebuiltCache()
        self.validation = validation if validation is not None else Holdout()
        ignore = tuple(ignore) + tuple(c for c in self.validation.columns_used if c not in ignore)
        ignore = ignore + tuple(c for c in (column_name(weight), column_name(exposure)) if c and c not in ignore)
        if task is None and loss in LOG_LINK_NAMES:
            task = "regression"  # a count of 0/1 values is still a count
        if isinstance(self.validation, TimeOrder):
            ignore = tuple(c for c in ignore if c != self.validation.column)
        self.prepared: Prepared = prepare(frame, target, ignore=ignore, features=features, task=task,
                                          positive=positive, source=source, encode=False, dates=dates)
        self.schema = self.prepared.schema
        self.loss: Loss = get_loss(loss or default_loss(self.schema.task), self.schema.task,
                                   n_classes=len(self.schema.classes), power=power)
        if isinstance(self.loss, LogLinkLoss):
            self.loss.check_target(self.prepared.y, target, source)
        rows = read_row_values(frame, self.prepared.rows, weight, exposure, self.loss, source)
        self.weight_column, self.exposure_column = rows.weight_column, rows.exposure_column
        self.split = self.validation.split(self.prepared.frame, self.prepared.y, self.schema.task,
                                           classes=self.schema.classes)
        self.layout = build_layout(self.split)
        # the one copy of the features, its rows gathered into chain order as it is filled
        self.matrix = self.prepared.encode(self.layout.order)
        self.y = self.prepared.y[self.layout.order]
        if self.schema.task == "multiclass":
            check_classes_fit(self.layout, self.y, self.schema, source)
        # row weights and the offset on the raw scale (log(exposure)), in chain order: None when every
        # row counts once and there is no exposure
        self.weight, self.offset = rows.in_order(self.layout.order)
        # a missing value the fitting rows never had takes their median, here as in predict
        self.schema = self.schema.with_fills(self.matrix[: self.layout.n_train])
        self.prepared.schema = self.schema
        self.matrix, _ = self.schema.fill_missing(self.matrix)
        # the matrix holds what the stages need; keeping the frame's rows too would double the data
        self.prepared.frame = self.prepared.frame.iloc[:0].copy()
        self.seed = int(seed)
        self.threshold = float(threshold)
        self.source = source
        self.ignore = tuple(ignore)
        self.data_path = None if data_path is None else os.fspath(data_path)
        self._stages: tuple[Stage, ...] = ()
        self._scores: list[Scores] = []
        self._removals: list[Removal] = []
        # the scores of stages fitted by the sequence in progress, by id, until they are committed
        self._fresh_scores: dict[int, Scores] = {}
        # the target's spread on each part, for R², computed once (the target never changes)
        self._spreads = scoring.TargetSpreads()
        self._rngs = seeded_streams(self.seed, len(self.layout.tracks))
        self._lock = threading.RLock()
        self.starts = tuple(
            self.loss.start(self.y[: track.n_rows][track.fit], _rows(self.weight, track.n_rows, track.fit),
                            _rows(self.offset, track.n_rows, track.fit))
            for track in self.layout.tracks
        )
        self._start_outputs = tuple(
            start_block(start, track.n_rows, _rows(self.offset, track.n_rows))
            for track, start in zip(self.layout.tracks, self.starts, strict=True)
        )
        self._start_scores = self._score(self._start_outputs)
        self.test_revealed = False
        self.reveal_count = 0
        self._test: dict[int, dict[str, float]] = {}

    @classmethod
    def from_file(cls, path: str | os.PathLike, target: str, validation: ValidationSpec | None = None,
                  loss: str | None = None, **kwargs: Any) -> Chain:
        """Return a chain over the CSV or Parquet file at ``path``."""
        frame, name = load_frame(path)
        chain = cls(frame, target, validation, loss, source=name, data_path=path, **kwargs)
        del frame  # the chain holds its own matrix; with the frame gone Arrow's pages can go back
        _release_arrow_pages()
        return chain

    @classmethod
    def from_dask(cls, frame: Any, target: str, validation: ValidationSpec | None = None, client: Any = None,
                  loss: str | None = None, **kwargs: Any) -> Chain:
        """Return a chain over the Dask DataFrame ``frame`` whose rows and cached outputs stay on the
        cluster of ``client`` (default: Dask's current client); see stages.bridges.cluster_chain."""
        from .bridges.cluster_chain import ClusterChain

        return ClusterChain(frame, target, validation, loss, client=client, **kwargs)

    # ----- reading ----------------------------------------------------------------------
    @property
    def task(self) -> Task:
        """Return "regression", "binary" or "multiclass"."""
        return self.schema.task

    @property
    def classes(self) -> tuple[str, ...]:
        """Return the classes of a binary (negative, positive) or multiclass (stored order) chain, as text."""
        return self.schema.classes

    @property
    def metric(self) -> str:
        """Return the name of the metric the chain is judged by (lower is better)."""
        return self.loss.primary

    @property
    def notes(self) -> tuple[str, ...]:
        """Return what the data preparation decided on the user's behalf, one line each."""
        return self.prepared.notes

    @property
    def stages(self) -> tuple[Stage, ...]:
        """Return the fitted stages in order (a tuple: change the chain through its methods)."""
        return self._stages

    def __len__(self) -> int:
        return len(self._stages)

    def state(self) -> ChainState:
        """Return the chain's stages, last outputs and scores, random streams, undo stack and test
        reveal, read together under the chain's lock (so a fit in progress is waited for)."""
        with self._lock:
            return ChainState(
                stages=self._stages, outputs=self.outputs(), scores=self.scores()[-1],
                streams=tuple(stream_state(rng) for rng in self._rngs), removals=tuple(self._removals),
                test_revealed=self.test_revealed, reveal_count=self.reveal_count,
            )

    def scores(self) -> list[Scores]:
        """Return the scores of every row: the start value, then each stage."""
        with self._lock:
            rows = [self._start_scores, *self._scores]
            if self.test_revealed:
                rows = [Scores(s.train, s.valid, s.fold_valid, self._test.get(i, {})) for i, s in enumerate(rows)]
            return rows

    def outputs(self, row: int | None = None) -> tuple[np.ndarray, ...]:
        """Return each track's raw output after row ``row`` (0 is the start value; default the last)."""
        with self._lock:
            row = len(self._stages) if row is None else row
            if not 0 <= row <= len(self._stages):
                raise StageSpecError(f"there is no stage {row}; the chain has {len(self._stages)}")
            return self._start_outputs if row == 0 else self._stages[row - 1].outputs

    def best_row(self) -> int:
        """Return the row with the best validation score (0 is the start value)."""
        return scoring.best_row(self.metric, self.scores())

    def table(self) -> pd.DataFrame:
        """Return one row per stage (row 0 is the start value) with its scores and flags."""
        from .report.table import stage_table

        with self._lock:  # the stages and their scores read together
            return stage_table(self)

    def residuals(self, part: Part = "valid", row: int | None = None, of_class: object = None) -> np.ndarray:
        """Return target minus prediction (y - p for binary) on ``part`` after row ``row``.

        For a multiclass chain the pseudo-residuals 1[y = k] - p_k: an (n, K) array, one column per
        class in ``classes`` order, or the column of the class ``of_class`` names.
        """
        return parts.residuals(self, part, row, of_class)

    def fitted_values(self, part: Part = "valid", row: int | None = None) -> np.ndarray:
        """Return the predictions (probabilities for binary, (n, K) class probabilities for multiclass)
        on ``part`` after row ``row``."""
        return parts.fitted_values(self, part, row)

    def class_index(self, of_class: object) -> int:
        """Return the position of class ``of_class`` in ``classes``; raise StageSpecError when it is not one."""
        return parts.class_index(self, of_class)

    def part_targets(self, part: Part) -> np.ndarray:
        """Return the targets of ``part`` in the order residuals and fitted values use."""
        return parts.targets(self, part)

    def histogram(self, row: int | None = None, parts: tuple[Part, ...] = ("train", "valid"),
                  bins: int | str = "auto", max_bins: int = 60, of_class: object = None,
                  ) -> tuple[dict[str, np.ndarray], np.ndarray]:
        """Return residual counts per part over shared bin edges, and the edges. For a multiclass chain,
        of the pseudo-residuals of class ``of_class``; without one, of each row's own class (1 - p_y)."""
        from . import parts as rows

        return rows.histogram(self, row, parts, bins, max_bins, of_class)

    def confusion(self, part: Part = "valid", row: int | None = None) -> pd.DataFrame:
        """Return the confusion matrix of ``part`` after row ``row`` (see stages.report.confusion):
        one row per true class, one column per predicted class, counts of rows."""
        from .report.confusion import confusion_table

        return confusion_table(self, part, row)

    def importance(self, row: int) -> dict[str, float]:
        """Return the importance of each feature a stage uses (native, or permutation on validation rows)."""
        from .understand.importance import stage_importance

        return stage_importance(self, row)

    def fitted(self) -> FittedChain:
        """Return the main chain as a FittedChain, ready to predict and to save."""
        with self._lock:
            scores = self.scores()
            stages = [
                FittedStage(s.spec, s.params, s.learners[0], s.scale, s.feature_index, scores[i + 1].to_dict(),
                            s.fit_seconds, s.step_rule, s.oob_loss, s.notes)
                for i, s in enumerate(self._stages)
            ]
            return FittedChain(self.schema, self.loss, np.array(self.starts[0]), stages, meta=self.describe(),
                               start_scores=scores[0].to_dict())

    def describe(self) -> dict[str, Any]:
        """Return the chain's settings as a JSON-ready dict (validation, seed, loss, split sizes)."""
        return {
            "validation": self.validation.to_dict(), "seed": self.seed, "loss": self.loss.name,
            "threshold": self.threshold, "rows": {"train": self.layout.n_train, "valid": self.layout.n_valid,
                                                  "test": self.layout.n_test},
            "test_revealed": self.test_revealed, "test_reveals": self.reveal_count, "source": self.source, "ignore": list(self.ignore),
            **self.row_settings(),
        }

    def row_settings(self) -> dict[str, Any]:
        """Return the weight and exposure columns and the tweedie power, each only when the chain has it."""
        out: dict[str, Any] = {}
        if self.weight_column is not None:
            out["weight"] = self.weight_column
        if self.exposure_column is not None:
            out["exposure"] = self.exposure_column
        power = getattr(self.loss, "power", None)
        if self.loss.name == "tweedie" and power is not None:
            out["power"] = float(power)
        return out

    def predict(self, frame: pd.DataFrame) -> np.ndarray:
        """Return predictions of the chain as it stands for a new frame."""
        return self.fitted().predict(frame)

    def predict_proba(self, frame: pd.DataFrame) -> np.ndarray:
        """Return class probabilities for a new frame: (n, 2), negative class first, for binary chains;
        (n, K) in ``classes`` order for multiclass chains."""
        return self.fitted().predict_proba(frame)

    def specs(self) -> list[StageSpec]:
        """Return the spec of every stage, in order."""
        return [s.spec for s in self._stages]

    # ----- changing -------------------------------------------------------------------------
    def _context(self) -> FitContext:
        # the usable cores read once a fit, not once a stage
        return FitContext(self.matrix, self.y, self.schema, self.layout, self.loss, self._rngs, self.weight,
                          resolve_threads(self.threads))

    def _score(self, outputs: tuple[np.ndarray, ...]) -> Scores:
        return scoring.score_state(self.loss, self.layout, self.y, outputs, self.threshold, self.weight, self._spreads)

    def _fit_sequence(self, specs: list[StageSpec], previous: tuple[np.ndarray, ...], first_number: int,
                      cancel: threading.Event | None, progress: ProgressFn | None) -> list[Stage]:
        self._rebuilt.stop()  # a fit has the cores to itself
        ctx = self._context()
        fitted: list[Stage] = []
        state = [rng.get_state() for rng in self._rngs]
        try:
            prefix = self._stages[: first_number - 1]
            for i, spec in enumerate(specs):
                stage = fit_stage(ctx, spec, previous, number=first_number + i, cancel=cancel,
                                  progress=_sub_progress(progress, i, len(specs)))
                fitted.append(stage)
                previous = stage.outputs
                # scored and thinned as they come, so a long sequence never holds every stage's outputs
                self._fresh_scores[id(stage)] = self._score(stage.outputs)
                self._thin((*prefix, *fitted))
        except BaseException:
            for rng, saved in zip(self._rngs, state, strict=True):
                rng.set_state(saved)
            self._fresh_scores.clear()
            raise
        return fitted

    def _commit(self, stages: list[Stage]) -> None:
        self._stages = (*self._stages, *stages)
        for stage in stages:
            fresh = self._fresh_scores.pop(id(stage), None)
            self._scores.append(fresh if fresh is not None else self._score(stage.outputs))
        self._fresh_scores.clear()
        self._thin()
        self._relock()

    def _thin(self, stages: tuple[Stage, ...] | None = None, ahead: bool = False) -> None:
        """Keep the outputs of the last stages and of every checkpoint of ``stages`` (default: the
        chain's), with ``ahead`` also of the segment a run of step backs reaches next; the others
        are rebuilt when read (``stages.checkpoints``). For the chain's own stages, start the
        background rebuild of the kept outputs it lacks; return None."""
        whole = stages is None
        chosen = self._stages if stages is None else stages
        missing = checkpoints.thin(chosen, self._start_outputs, self.matrix, self.layout,
                                   len(self.schema.columns), self.loss.outputs, self.checkpoint_every, self._rebuilt,
                                   tail=self.checkpoint_tail, ahead=ahead,
                                   removed=[r.stages for r in self._removals] if whole else ())
        if whole:
            self._rebuilt.refill(missing)

    def wait_for_rebuilds(self, timeout: float | None = None) -> bool:
        """Wait until the background rebuild of the outputs a run of step backs reads next is done
        (``stages.checkpoints``); return True when it is (False when ``timeout`` seconds passed first)."""
        rebuilt = getattr(self, "_rebuilt", None)   # a ClusterChain rebuilds nothing
        return rebuilt is None or rebuilt.join(timeout)

    def _truncate(self, keep: int) -> None:
        """Keep the first ``keep`` stages and their scores."""
        self._stages = self._stages[:keep]
        del self._scores[keep:]

    def _relock(self) -> None:
        """Lock the test part again: a reveal holds for one chain state only."""
        self._test.clear()
        self.test_revealed = False

    def add(self, kind: str, shrinkage: float = 1.0, *, features: list[str] | tuple[str, ...] = (),
            params: dict[str, Any] | None = None, repeat: int = 1, cancel: threading.Event | None = None,
            progress: ProgressFn | None = None) -> list[Stage]:
        """Fit ``repeat`` stages of ``kind``, each on the residuals of the one before, and return them.

        All or nothing: when any fit fails or is cancelled, the chain is left as it was.
        """
        repeat = whole_value({"repeat": repeat}, "repeat", 1, minimum=1, maximum=MAX_REPEAT)
        spec = StageSpec(kind, shrinkage, tuple(features or ()), dict(params or {}))
        return self.add_specs([spec] * repeat, cancel=cancel, progress=progress)

    def add_specs(self, specs: list[StageSpec], *, cancel: threading.Event | None = None,
                  progress: ProgressFn | None = None) -> list[Stage]:
        """Fit ``specs`` in order after the last stage and return the new stages (all or nothing)."""
        if len(self.stages) + len(specs) > MAX_STAGES:
            raise StageSpecError(f"a chain holds at most {MAX_STAGES:,} stages; it has {len(self.stages):,} "
                                 f"and {len(specs):,} more were asked for")
        for spec in specs:
            self.check_spec(spec)
        with self._lock:
            new = self._fit_sequence(list(specs), self.outputs(), len(self._stages) + 1, cancel, progress)
            self._commit(new)
            self._removals.clear()
            log.info("added %d stage(s) (%s): the chain has %d", len(new), _kinds(new), len(self._stages))
            return new

    def check_spec(self, spec: StageSpec) -> None:
        """Raise StageSpecError when ``spec`` names an unknown kind, parameter or feature."""
        kind = get_kind(spec.kind)
        check_weights_taken(kind, kind.resolve_params(spec.params, self.task), spec, self.weight is not None)
        if spec.features:
            try:
                self.schema.index_of(spec.features)
            except RemnantError as exc:
                raise StageSpecError(f"stage {spec.kind!r}: {exc}") from None

    def commit(self, stage: Stage, *, after: tuple[Stage, ...]) -> None:
        """Append ``stage``, fitted elsewhere from the chain as it was with the stages ``after`` (an
        audition's candidate), as the next stage with no refit; return None.

        The random streams move on as that fit moved them and the undo stack is cleared, exactly as
        ``add`` of the stage's spec would have left the chain. Raise ChainStateError when the chain
        has changed since: other stages, or random streams other than the ones the stage drew from.
        """
        with self._lock:
            same = (len(self._stages) == len(after) and all(a is b for a, b in zip(self._stages, after, strict=True))
                    and all(same_stream(stream_state(r), s) for r, s in zip(self._rngs, stage.rng_before, strict=True)))
            if not same:
                raise ChainStateError("the chain changed since this stage was fit")
            self._commit([stage])
            self._removals.clear()
            self._restore_streams(stage.rng_after)
            log.info("kept a %s stage fit elsewhere as stage %d, no refit", stage.kind, len(self._stages))

    def _remember(self, action: str) -> None:
        self._removals.append(Removal(action, self._stages, tuple(self._scores)))

    def _restore_streams(self, states: tuple[Any, ...]) -> None:
        for rng, state in zip(self._rngs, states, strict=True):
            rng.set_state(state)

    def step_back(self) -> Stage:
        """Remove the last stage without any refit and return it; the random stream rewinds with it."""
        with self._lock:
            if not self._stages:
                raise ChainStateError("the chain has no stage to step back from")
            self._remember("step back")
            stage = self._stages[-1]
            self._truncate(len(self._stages) - 1)
            self._thin(ahead=True)
            self._restore_streams(stage.rng_before)
            self._relock()
            log.info("stepped back from stage %d (%s)", len(self._stages) + 1, stage.kind)
            return stage

    def drop(self, index: int, *, cancel: threading.Event | None = None, progress: ProgressFn | None = None) -> list[Stage]:
        """Remove stage ``index`` (1-based) and refit the stages after it on the new residuals; return the refits."""
        with self._lock:
            if not 1 <= index <= len(self._stages):
                raise StageSpecError(f"there is no stage {index}; the chain has {len(self._stages)}")
            if index == len(self._stages):
                self.step_back()
                last = self._removals[-1]
                self._removals[-1] = Removal("drop", last.stages, last.scores)
                return []
            saved = [rng.get_state() for rng in self._rngs]
            self._restore_streams(self._stages[index - 1].rng_before)
            later = [s.spec for s in self._stages[index:]]
            try:
                refits = self._fit_sequence(later, self.outputs(index - 1), index, cancel, progress)
            except BaseException:
                self._restore_streams(tuple(saved))
                raise
            self._remember("drop")
            self._truncate(index - 1)
            self._commit(refits)
            log.info("dropped stage %d, refit the %d after it", index, len(refits))
            return refits

    def trim(self, row: int | None = None) -> list[Stage]:
        """Remove the stages after row ``row`` (default: the best validation score) and return them."""
        with self._lock:
            best = self.best_row() if row is None else row
            if not 0 <= best <= len(self._stages):
                raise StageSpecError(f"there is no stage {best}; the chain has {len(self._stages)}")
            if best == len(self._stages):
                return []
            self._remember("trim")
            removed = list(self._stages[best:])
            self._restore_streams(removed[0].rng_before)
            self._truncate(best)
            self._thin(ahead=True)
            self._relock()
            log.info("trimmed to stage %d: removed %d", best, len(removed))
            return removed

    def can_undo(self) -> bool:
        """Return True when there is a removal to undo."""
        return bool(self._removals)

    def undo(self) -> str:
        """Undo the last step back, drop or trim, restoring the exact earlier state; return what was undone."""
        with self._lock:
            if not self._removals:
                raise ChainStateError("there is no removal to undo")
            removal = self._removals.pop()
            self._stages = removal.stages
            self._scores = list(removal.scores)
            self._thin(ahead=True)
            if self._stages:
                self._restore_streams(self._stages[-1].rng_after)
            else:
                self._rngs = seeded_streams(self.seed, len(self.layout.tracks))
            self._relock()
            log.info("undid the %s: the chain has %d stages", removal.action, len(self._stages))
            return removal.action

    def reveal_test(self) -> list[dict[str, float]]:
        """Score every row on the locked test part and return the scores; the reveal is recorded."""
        with self._lock:
            if self.layout.n_test == 0:
                raise ChainStateError("this chain has no locked test part (set test_fraction when choosing validation)")
            rows = [self._start_outputs[0], *(s.outputs[0] for s in self._stages)]
            self._test = {i: scoring.test_scores(self.loss, self.layout, self.y, out, self.threshold, self.weight)
                          for i, out in enumerate(rows)}
            self.test_revealed = True
            self.reveal_count += 1
            log.info("revealed the locked test part (reveal %d)", self.reveal_count)
            return [self._test[i] for i in range(len(rows))]

    def save(self, path: str | os.PathLike) -> None:
        """Write the chain file at ``path`` (atomically)."""
        from .files.store import save

        save(self, path)

    def to_recipe(self) -> str:
        """Return the TOML recipe that refits this chain from its data."""
        from .files.recipe import chain_to_recipe

        return chain_to_recipe(self)

    # ----- deciding the next stage (the rest, and the questions about the chain: chain_questions.py) -------
    def audition(self, specs: Sequence[StageSpec | Mapping[str, Any]], *, cancel: threading.Event | None = None,
                 progress: ProgressFn | None = None, workers: int = 2) -> list[Any]:
        """Return a stages.decide.audition.Candidate per spec (grids expanded), fit side by side; the chain is unchanged."""
        from .decide.audition import audition

        self._rebuilt.stop()  # the candidates' fits have the cores to themselves
        return audition(self, specs, cancel=cancel, progress=progress, workers=workers)

    def restore(self, stages: list[Stage], removals: list[tuple[str, list[Stage]]], streams: tuple[StreamState, ...],
                *, revealed: bool = False, reveals: int = 0) -> None:
        """Put back stages fitted earlier on this chain's data (a restored session), with no refit:
        rescore them, set the undo stack (``(action, stages)`` pairs, oldest first), the random
        streams and the test reveals; return None."""
        with self._lock:
            scored: dict[int, Scores] = {}

            def score(stage: Stage) -> Scores:
                if id(stage) not in scored:
                    scored[id(stage)] = self._score(stage.outputs)
                return scored[id(stage)]

            self._stages = tuple(stages)
            self._scores = [score(s) for s in self._stages]
            self._removals = [Removal(action, tuple(kept), tuple(score(s) for s in kept)) for action, kept in removals]
            self._thin()
            self._restore_streams(streams)
            self._relock()
            if revealed and self.layout.n_test:
                self.reveal_test()
            self.reveal_count = int(reveals)


def _kinds(stages: list[Stage]) -> str:
    """Return the kinds of ``stages`` for the log: ``tree``, ``40 × tree`` or ``linear, tree``."""
    kinds = [s.kind for s in stages]
    if len(set(kinds)) == 1 and len(kinds) > 1:
        return f"{len(kinds)} × {kinds[0]}"
    return ", ".join(kinds) or "none"
def _rows(values: np.ndarray | None, n_rows: int, fit: slice | np.ndarray | None = None) -> np.ndarray | None:
    """Return a per-row array's first ``n_rows`` rows (a track's), or those of them at ``fit``; None stays None."""
    if values is None:
        return None
    rows = values[:n_rows]
    return rows if fit is None else rows[fit]


def _release_arrow_pages() -> None:
    """Give memory pages Arrow kept after reading a Parquet file back to the system."""
    import sys

    if "pyarrow" in sys.modules:
        sys.modules["pyarrow"].default_memory_pool().release_unused()


def _sub_progress(progress: ProgressFn | None, i: int, n: int) -> ProgressFn | None:
    if progress is None:
        return None
    if n == 1:
        return progress

    def report(fraction: float, message: str = "") -> None:
        progress((i + fraction) / n, f"stage {i + 1} of {n}: {message}")

    return report
