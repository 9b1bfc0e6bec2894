"""The ``lightgbm`` kind: a whole LightGBM booster as one stage, fit to the loss from the chain's offset.

The booster is trained on the target itself with the chain's current output as LightGBM's
``init_score``, under the objective of the chain's loss; so raw + output is exactly what
LightGBM would predict had it started from that offset, and the stage needs no line search.
A multiclass chain's booster uses LightGBM's ``multiclass`` objective (K trees a round) with the
chain's K raw scores as its (n, K) ``init_score``, and predicts K raw scores a row.
Categories go in as LightGBM's native categorical features and NaN as its missing values.

Parameters take LightGBM's names: those of its scikit-learn API (``n_estimators``,
``min_child_samples``, ...) or the native ones (``num_boost_round``, ``min_data_in_leaf``, ...);
the resolved parameters are the native names. This module also holds the fitting, saving and
loading shared with the ``hist_tree`` kind.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from ..errors import ChainFileError, StageFitError, StageSpecError
from ..lightgbm_text import check_model_text, quiet_native_log
from . import one_round, register
from .base import Artifact, FitRequest, StageKind, check_has_features
from .binned import BIN_SEED, binned

#: LightGBM's scikit-learn API names and the native parameter each one sets
SKLEARN_NAMES: dict[str, str] = {
    "n_estimators": "num_boost_round",
    "min_child_samples": "min_data_in_leaf",
    "min_child_weight": "min_sum_hessian_in_leaf",
    "subsample": "bagging_fraction",
    "subsample_freq": "bagging_freq",
    "colsample_bytree": "feature_fraction",
    "reg_alpha": "lambda_l1",
    "reg_lambda": "lambda_l2",
    "min_split_gain": "min_gain_to_split",
    "n_jobs": "num_threads",
    "boosting_type": "boosting",
    "subsample_for_bin": "bin_construct_sample_cnt",
}

#: the native LightGBM parameters a lightgbm stage accepts
NATIVE_NAMES: tuple[str, ...] = (
    "num_boost_round", "learning_rate", "num_leaves", "max_depth", "min_data_in_leaf",
    "min_sum_hessian_in_leaf", "bagging_fraction", "bagging_freq", "feature_fraction",
    "feature_fraction_bynode", "lambda_l1", "lambda_l2", "min_gain_to_split", "max_delta_step",
    "num_threads", "boosting", "bin_construct_sample_cnt", "max_bin", "min_data_in_bin",
    "cat_smooth", "cat_l2", "max_cat_to_onehot", "max_cat_threshold", "min_data_per_group",
    "extra_trees", "path_smooth", "linear_tree", "linear_lambda", "monotone_constraints",
    "use_missing", "zero_as_missing", "drop_rate", "max_drop", "skip_drop", "top_rate",
    "other_rate", "data_sample_strategy", "verbosity", "deterministic", "force_row_wise",
    "force_col_wise",
)

#: parameters that steer the stage rather than LightGBM; never passed to ``lightgbm.train``
STAGE_NAMES: tuple[str, ...] = ("early_stopping_rounds", "validation_fraction", "importance_type")

#: names LightGBM knows that a stage refuses, and why
REFUSED: dict[str, str] = {
    "objective": "the chain's loss sets the objective",
    "class_weight": "a stage fits the chain's loss on every row alike",
    "random_state": "the chain's seed sets it (the [chain] seed of a recipe)",
    "seed": "the chain's seed sets it (the [chain] seed of a recipe)",
}

IMPORTANCE_TYPES = ("gain", "split")
# LightGBM's upper limit on num_leaves
MAX_LEAVES = 131072
# how many progress reports a fit sends at most
PROGRESS_REPORTS = 50


@dataclass
class BoosterLearner:
    """A fitted LightGBM booster; ``predict`` returns its raw scores (log-odds for binary chains, (n, K)
    for a multiclass chain).

    ``held_out`` (indices into the fitting rows used for early stopping) and ``params`` (what
    was passed to ``lightgbm.train``) describe the fit; neither is saved. A learner made from its
    model text alone (``model_text``, the booster given as None) builds the booster from that
    text when first asked for it: a round grown on a kept booster (``one_round``) needs it only
    to be saved or asked about.
    """

    _booster: Any
    importance_type: str = "gain"
    held_out: np.ndarray | None = None
    params: dict[str, Any] = field(default_factory=dict)
    #: the booster's one tree read for predicting in numpy (``one_tree.OneTree``; the same bits), or None
    tree: Any = None
    #: the prediction on the rows it was fit on, known from the fit (read once by ``track_output``), or None
    fit_values: np.ndarray | None = None
    #: the prediction on the request's other rows (``FitRequest.others``), known from the fit, or None
    other_values: np.ndarray | None = None
    #: both of the above in one array (the fitting rows, then the other rows), or None
    track_values: np.ndarray | None = None
    #: LightGBM's model text the booster is built from when it was given as None, or None
    model_text: str | None = None

    @property
    def booster(self) -> Any:
        """Return the LightGBM booster, built from ``model_text`` on first use when not given."""
        if self._booster is None:
            import lightgbm

            self._booster = lightgbm.Booster(model_str=self.model_text)
        return self._booster

    @property
    def predicts_row_by_row(self) -> bool:
        """Return True when each row's prediction depends on that row alone, to the same bits in any
        block of rows (the one tree walked in numpy), so a rebuild may predict a block at a time
        (``stages.checkpoints``)."""
        return self.tree is not None

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return the booster's raw score for every row of ``X`` (its best iteration after early stopping)."""
        if self.tree is not None and isinstance(X, np.ndarray) and X.dtype == np.float64:
            return self.tree.predict(X)
        return np.asarray(self.booster.predict(X, raw_score=True), dtype=np.float64)

    @property
    def rounds(self) -> int:
        """Return the number of boosting rounds the predictions use."""
        return int(self.booster.best_iteration or self.booster.current_iteration())


def to_native(params: dict[str, Any], kind: str) -> dict[str, Any]:
    """Return ``params`` under LightGBM's native names; raise StageSpecError when two names set one parameter."""
    out: dict[str, Any] = {}
    given_as: dict[str, str] = {}
    for name, value in params.items():
        native = SKLEARN_NAMES.get(name, name)
        if native in out:
            raise StageSpecError(
                f"kind {kind!r}: {given_as[native]!r} and {name!r} set the same parameter; give only one"
            )
        out[native] = value
        given_as[native] = name
    return out


def check_stage_values(params: dict[str, Any], kind: str) -> None:
    """Raise StageSpecError when a stage-level parameter has a value the stage cannot use."""
    rounds = params.get("early_stopping_rounds")
    if rounds is not None and (isinstance(rounds, bool) or not isinstance(rounds, int) or rounds < 1):
        raise StageSpecError(f"kind {kind!r}: early_stopping_rounds must be a positive integer or unset, not {rounds!r}")
    fraction = params.get("validation_fraction", 0.1)
    if not isinstance(fraction, int | float) or not 0.0 < fraction < 1.0:
        raise StageSpecError(f"kind {kind!r}: validation_fraction must lie between 0 and 1, not {fraction!r}")
    importance = params.get("importance_type", "gain")
    if importance not in IMPORTANCE_TYPES:
        raise StageSpecError(f"kind {kind!r}: importance_type must be 'gain' or 'split', not {importance!r}")


def early_stopping_split(n_rows: int, fraction: float, random_state: np.random.RandomState) -> tuple[np.ndarray, np.ndarray]:
    """Return the sorted indices of the rows to train on and of the rows held out for early stopping."""
    n_held = min(n_rows - 1, max(1, int(round(fraction * n_rows))))
    order = random_state.permutation(n_rows)
    return np.sort(order[n_held:]), np.sort(order[:n_held])


def _round_callback(request: FitRequest, rounds: int):
    """Return a LightGBM callback that stops on cancel and reports progress at most PROGRESS_REPORTS times."""
    every = max(1, rounds // PROGRESS_REPORTS)

    def callback(env: Any) -> None:
        request.check_cancel()  # FitCancelled propagates out of lightgbm.train
        done = env.iteration - env.begin_iteration + 1
        if request.progress is not None and (done % every == 0 or done == rounds):
            request.progress(done / rounds, f"round {done}/{rounds}")

    return callback


def booster_params(request: FitRequest, params: dict[str, Any], seed: int) -> dict[str, Any]:
    """Return the parameters for ``lightgbm.train``: the stage's, the loss's objective, the seed, and the
    request's threads when the stage leaves ``num_threads`` unset."""
    out = {k: v for k, v in params.items() if k not in STAGE_NAMES and v is not None}
    out["objective"] = request.loss.lightgbm_objective
    out.update(request.loss.lightgbm_params())
    if out["objective"] == "huber":
        out["alpha"] = request.loss.delta(request.y, request.raw, request.weight)
    if request.outputs > 1:
        out["num_class"] = request.outputs
    if out.get("force_col_wise"):
        out["force_row_wise"] = False
    if out.get("num_threads") in (0, None):  # unset: the chain's threads, not every core of the machine
        out["num_threads"] = request.thread_count
    out["seed"] = seed
    return out


def train_booster(request: FitRequest, params: dict[str, Any], kind: str, *, reuse_bins: bool = False) -> BoosterLearner:
    """Return a booster trained on ``request.y`` from the offset ``request.raw``, with native ``params``.

    With ``reuse_bins`` (and no early stopping) the binned rows are kept for the next fit on
    the same rows (see ``binned.py``).
    """
    import lightgbm

    check_has_features(request.X, kind)
    request.check_cancel()
    seed = int(request.random_state.randint(0, 2**31 - 1))
    native = booster_params(request, params, seed)
    rounds = int(native.pop("num_boost_round", 100))
    categorical = [i for i, col in enumerate(request.columns) if col.is_categorical]
    stopping: int | None = params.get("early_stopping_rounds")
    fit_rows: Any = slice(None)
    held_out: np.ndarray | None = None
    if stopping is not None:
        fit_rows, held_out = early_stopping_split(len(request.y), params.get("validation_fraction", 0.1), request.random_state)

    def dataset(rows: Any, reference: Any = None) -> Any:
        return lightgbm.Dataset(
            request.X[rows], label=request.y[rows], init_score=request.raw[rows], reference=reference,
            weight=None if request.weight is None else request.weight[rows],
            categorical_feature=categorical, free_raw_data=True,
        )

    shared = None
    if reuse_bins and held_out is None:
        native.setdefault("data_random_seed", BIN_SEED)
        shared = binned(request.X, categorical, native)
    callbacks = [_round_callback(request, rounds)]
    with shared.lock if shared is not None else contextlib.nullcontext():
        if shared is not None and one_round.can_grow(request, native, rounds):
            grown = one_round.grow_round(shared, request, native)
            if grown is not None:
                return BoosterLearner(None, importance_type=params.get("importance_type", "gain"),
                                      params=native, tree=grown.tree, fit_values=grown.on_fit_rows,
                                      other_values=grown.on_other_rows, track_values=grown.on_track_rows,
                                      model_text=grown.text)
        if shared is None:
            train_set = dataset(fit_rows if request.in_bag is None else np.flatnonzero(request.in_bag))
        else:
            train_set = shared.with_target(request.y, request.raw, request.weight)
            if request.in_bag is not None:  # the drawn rows, binned as every stage bins them
                train_set = train_set.subset(np.flatnonzero(request.in_bag))
        valid_sets = []
        if held_out is not None and stopping is not None:  # a held-out part only with early stopping
            valid_sets.append(dataset(held_out, reference=train_set))
            callbacks.append(lightgbm.early_stopping(stopping, first_metric_only=True, verbose=False))
        if request.progress is not None:
            request.progress(0.0, f"round 0/{rounds}")
        try:
            booster = lightgbm.train(native, train_set, num_boost_round=rounds, valid_sets=valid_sets, callbacks=callbacks)
        except lightgbm.basic.LightGBMError as exc:
            raise StageFitError(f"kind {kind!r}: LightGBM failed: {exc}") from None
    best = booster.best_iteration
    if request.progress is not None and 0 < best < rounds:
        request.progress(1.0, f"stopped early: best round {best}/{rounds}")
    importance = params.get("importance_type", "gain")
    return BoosterLearner(booster, importance_type=importance, held_out=held_out, params=native)


class BoosterKind(StageKind):
    """Shared base of the LightGBM kinds: native parameter names, the lgb artifact, gain importance."""

    fits_loss: ClassVar[bool] = True

    def resolve_params(self, params: dict[str, Any] | None, task: str) -> dict[str, Any]:
        """Return the defaults overlaid with ``params``, under LightGBM's native names.

        Raise StageSpecError for an unknown or refused name, two names for one parameter, or
        a stage-level value that cannot be used.
        """
        given = dict(params or {})
        for name in given:
            if name in REFUSED:
                raise StageSpecError(f"kind {self.name!r} does not take {name!r}: {REFUSED[name]}")
        super().resolve_params(given, task)
        resolved = to_native(self.task_defaults(task), self.name)
        resolved.update(to_native(given, self.name))
        check_stage_values(resolved, self.name)
        return resolved

    def save(self, learner: BoosterLearner) -> Artifact:
        """Return the booster as LightGBM's own model text."""
        text = learner.booster.model_to_string()
        return Artifact("lgb", text.encode("utf-8"), meta={"importance_type": learner.importance_type})

    def load(self, artifact: Artifact) -> BoosterLearner:
        """Return the booster stored in ``artifact``; raise ChainFileError when LightGBM cannot read it."""
        import lightgbm

        importance = artifact.meta.get("importance_type", "gain")
        if importance not in IMPORTANCE_TYPES:
            raise ChainFileError(f"{self.name} stage artifact has an unknown importance type {str(importance)[:40]!r}")
        if artifact.fmt != "lgb":
            raise ChainFileError(f"{self.name} stage artifact must be LightGBM model text, not {artifact.fmt}")
        try:
            text = artifact.payload.decode("utf-8")
        except UnicodeDecodeError:
            raise ChainFileError(f"{self.name} stage artifact is not a LightGBM model (not UTF-8 text)") from None
        # LightGBM walks the text without bounds checks: every structure is checked first
        check_model_text(text, artifact.n_features, f"{self.name} stage artifact", n_classes=artifact.n_outputs)
        try:
            with quiet_native_log():
                booster = lightgbm.Booster(model_str=text)
        except lightgbm.basic.LightGBMError as exc:
            raise ChainFileError(f"{self.name} stage artifact is not a LightGBM model ({' '.join(str(exc).split())[:200]})") from None
        return BoosterLearner(booster, importance_type=importance)

    def importance(self, learner: BoosterLearner, columns) -> np.ndarray:
        """Return each feature's share of the booster's total gain (or split count), summing to 1."""
        values = np.asarray(learner.booster.feature_importance(importance_type=learner.importance_type), dtype=np.float64)
        total = values.sum()
        return values / total if total > 0 else values


class LightGBMKind(BoosterKind):
    """A whole LightGBM booster, fit to the chain's loss from its current output."""

    name: ClassVar[str] = "lightgbm"
    summary: ClassVar[str] = "a LightGBM booster started from the chain's output (native categories and NaN)"
    defaults: ClassVar[dict[str, Any]] = {
        "n_estimators": 100, "learning_rate": 0.1, "num_leaves": 31, "max_depth": -1,
        "min_child_samples": 20, "min_child_weight": 1e-3, "subsample": 1.0, "subsample_freq": 0,
        "colsample_bytree": 1.0, "reg_alpha": 0.0, "reg_lambda": 0.0, "min_split_gain": 0.0,
        "boosting_type": "gbdt", "subsample_for_bin": 200000, "n_jobs": 0,
        "importance_type": "gain", "early_stopping_rounds": None, "validation_fraction": 0.1,
        # deterministic and row-wise: the same fit every time, and no timing test to choose
        "verbosity": -1, "deterministic": True, "force_row_wise": True,
    }
    main_params: ClassVar[tuple[str, ...]] = ("n_estimators", "learning_rate", "num_leaves")
    extra_params: ClassVar[tuple[str, ...]] = NATIVE_NAMES

    def fit(self, request: FitRequest, params: dict[str, Any]) -> BoosterLearner:
        """Return the booster trained from the chain's output, early-stopped on held fitting rows when asked."""
        return train_booster(request, params, self.name)


register(LightGBMKind())
