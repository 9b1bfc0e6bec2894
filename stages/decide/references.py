"""Reference models on the chain's own split, so a user can see whether the chain is competitive.

Two references: the linear model alone (the chain's start value plus one ``linear`` stage,
``logistic`` for binary and multiclass chains), and LightGBM with its default parameters, trained with
``lightgbm.train`` under the objective of the chain's loss and early-stopped on the chain's
validation part. With k-fold validation LightGBM is fit on each fold track, early-stopped on
that fold and scored out of fold; the full fit then runs the mean best iteration.
"""

from __future__ import annotations

import threading
import time
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .. import scoring
from ..chain_state import seeded_streams
from ..errors import FitCancelled, StageFitError
from ..fitting import FitContext, fit_stage
from ..kinds.base import ProgressFn
from ..loglink import is_log_link
from ..losses import HuberLoss
from ..outputs import block
from ..scoring import fold_spread
from ..spec import StageSpec

if TYPE_CHECKING:
    from ..chain import Chain

#: LightGBM's default number of rounds, used when there is no validation part to stop on
DEFAULT_ROUNDS = 100


def reference_scores(chain: Chain, *, lightgbm_params: dict[str, Any] | None = None, rounds: int = 1000,
                     early_stopping_rounds: int = 50, cancel: threading.Event | None = None,
                     progress: ProgressFn | None = None) -> pd.DataFrame:
    """Return one row per reference model: model, train / valid (and, once revealed, test) metric,
    fold spread (k-fold), best iteration and seconds.

    ``lightgbm_params`` overlays LightGBM's defaults (native names); ``rounds`` caps the
    boosting rounds and ``early_stopping_rounds`` is the patience on the validation part.
    ``progress(fraction, detail)`` hears of every LightGBM round; ``cancel`` stops between rounds.
    """
    if progress is not None:
        progress(0.0, "linear alone")
    linear = linear_reference(chain)
    rows = [linear, lightgbm_reference(chain, lightgbm_params, rounds, early_stopping_rounds, cancel, progress)]
    frame = pd.DataFrame(rows)
    if not chain.layout.is_kfold:
        frame = frame.drop(columns="fold_spread")
    return frame


def _row(chain: Chain, model: str, outputs: tuple[np.ndarray, ...], best: float, seconds: float) -> dict[str, Any]:
    metric = chain.metric
    scores = scoring.score_state(chain.loss, chain.layout, chain.y, outputs, chain.threshold, chain.weight)
    row = {"model": model, f"train_{metric}": scores.train[metric], f"valid_{metric}": scores.valid[metric],
           "fold_spread": fold_spread(scores.fold_valid)}
    if chain.test_revealed:
        test = scoring.test_scores(chain.loss, chain.layout, chain.y, outputs[0], chain.threshold, chain.weight)
        row[f"test_{metric}"] = test[metric]
    row["best_iteration"] = best
    row["seconds"] = seconds
    return row


def linear_reference(chain: Chain) -> dict[str, Any]:
    """Return the row of the linear model alone: the chain's start plus one linear (logistic) stage, or a
    glm on the log link (poisson, gamma, tweedie)."""
    kind = "logistic" if chain.task in ("binary", "multiclass") else "glm" if is_log_link(chain.loss) else "linear"
    rngs = seeded_streams(chain.seed, len(chain.layout.tracks))
    ctx = FitContext(chain.matrix, chain.y, chain.schema, chain.layout, chain.loss, rngs, chain.weight)
    stage = fit_stage(ctx, StageSpec(kind), chain.outputs(0), number=1)
    return _row(chain, "linear alone", stage.outputs, float("nan"), stage.fit_seconds)


def lightgbm_defaults(chain: Chain, user: dict[str, Any] | None = None) -> dict[str, Any]:
    """Return the parameters of the LightGBM reference: the objective of the chain's loss, its seed,
    quiet and deterministic (which change no model setting), overlaid with ``user``."""
    params: dict[str, Any] = {"objective": chain.loss.lightgbm_objective, "seed": chain.seed,
                              "verbosity": -1, "deterministic": True, "force_row_wise": True}
    if isinstance(chain.loss, HuberLoss):  # LightGBM's huber objective: its alpha is our delta
        fit = chain.layout.train
        params["alpha"] = chain.loss.delta(chain.y[fit], chain.outputs(0)[0][fit])
    if chain.loss.outputs > 1:
        params["num_class"] = chain.loss.outputs
    params.update(chain.loss.lightgbm_params())
    params.update(user or {})
    return params


def lightgbm_reference(chain: Chain, user: dict[str, Any] | None = None, rounds: int = 1000,
                       early_stopping_rounds: int = 50, cancel: threading.Event | None = None,
                       progress: ProgressFn | None = None) -> dict[str, Any]:
    """Return the row of LightGBM with default parameters, early-stopped on the validation part."""
    params = lightgbm_defaults(chain, user)
    layout = chain.layout
    started = time.perf_counter()
    fits = len(layout.tracks) if layout.is_kfold else 1
    fit = _Fitter(chain, params, cancel, progress, fits)
    if layout.is_kfold:
        outputs: list[np.ndarray] = [np.empty(0)]
        best = []
        for track in layout.tracks[1:]:
            booster = fit(track.fit_positions(), rounds, track.evaluate, early_stopping_rounds)
            best.append(booster.best_iteration)
            outputs.append(fit.predict(booster, slice(0, track.n_rows)))
        full_rounds = max(1, int(np.rint(np.mean(best))))
        outputs[0] = fit.predict(fit(layout.train, full_rounds), slice(None))
        best_iteration = float(np.mean(best))
    elif layout.n_valid:
        booster = fit(layout.train, rounds, layout.valid, early_stopping_rounds)
        outputs, best_iteration = [fit.predict(booster, slice(None))], float(booster.best_iteration)
    else:
        booster = fit(layout.train, DEFAULT_ROUNDS)
        outputs, best_iteration = [fit.predict(booster, slice(None))], float(DEFAULT_ROUNDS)
    return _row(chain, "LightGBM, default parameters", tuple(outputs), best_iteration, time.perf_counter() - started)


class _Fitter:
    """Trains LightGBM boosters on chosen rows of the chain's matrix and predicts raw scores."""

    def __init__(self, chain: Chain, params: dict[str, Any], cancel: threading.Event | None,
                 progress: ProgressFn | None = None, fits: int = 1) -> None:
        self.chain, self.params, self.cancel = chain, params, cancel
        self.categorical = [i for i, col in enumerate(chain.schema.columns) if col.is_categorical]
        self.progress, self.fits, self.done = progress, fits, 0

    def __call__(self, rows: Any, rounds: int, stop_rows: Any = None, patience: int = 0) -> Any:
        """Return a booster trained on ``rows``, early-stopped on ``stop_rows`` when given."""
        import lightgbm

        matrix, y = self.chain.matrix, self.chain.y
        train = lightgbm.Dataset(matrix[rows], label=y[rows], categorical_feature=self.categorical,
                                 weight=_at(self.chain.weight, rows), init_score=_at(self.chain.offset, rows))
        valid_sets, callbacks = [], [self._check_cancel]
        if self.progress is not None:
            callbacks.append(self._report)
        if stop_rows is not None:
            valid_sets.append(lightgbm.Dataset(matrix[stop_rows], label=y[stop_rows], reference=train,
                                               weight=_at(self.chain.weight, stop_rows),
                                               init_score=_at(self.chain.offset, stop_rows)))
            callbacks.append(lightgbm.early_stopping(patience, first_metric_only=True, verbose=False))
        try:
            return lightgbm.train(dict(self.params), train, num_boost_round=rounds, valid_sets=valid_sets,
                                  callbacks=callbacks)
        except lightgbm.basic.LightGBMError as exc:
            raise StageFitError(f"LightGBM reference: {exc}") from None
        finally:
            self.done += 1

    def _check_cancel(self, env: Any) -> None:
        if self.cancel is not None and self.cancel.is_set():
            raise FitCancelled("reference fit cancelled")

    def _report(self, env: Any) -> None:
        # early stopping may end a fit before its last round: the bar moves by rounds of the cap
        within = (env.iteration + 1) / env.end_iteration
        fit = f"fit {self.done + 1} of {self.fits}, " if self.fits > 1 else ""
        if self.progress is not None:  # the callback is only added with a progress function
            self.progress((self.done + within) / self.fits, f"LightGBM reference: {fit}round {env.iteration + 1}")

    def predict(self, booster: Any, rows: Any) -> np.ndarray:
        """Return the booster's raw score at its best iteration on ``rows`` of the chain's matrix."""
        best = booster.best_iteration or None
        matrix = self.chain.matrix[rows]
        raw = block(booster.predict(matrix, num_iteration=best, raw_score=True), len(matrix), self.chain.loss.outputs)
        offset = _at(self.chain.offset, rows)
        return raw if offset is None else raw + offset[:, None]  # log(exposure), as the chain's outputs hold it


def _at(values: np.ndarray | None, rows: Any) -> np.ndarray | None:
    """Return ``values[rows]``, or None when there are no such per-row values (weights, offsets)."""
    return None if values is None else values[rows]
