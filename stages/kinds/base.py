"""What a stage kind is: its defaults, how it fits, and how its fitted state becomes a safe artifact.

A kind never imports the store: it turns a fitted learner into an ``Artifact`` (bytes plus a
format tag) and back. The formats are data only: JSON, ``.npz`` read with
``allow_pickle=False``, LightGBM's model text, or skops with an explicit list of trusted types.
"""

from __future__ import annotations

import threading
from abc import ABC, abstractmethod
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from ..errors import StageSpecError
from ..schema import ColumnInfo

ProgressFn = Callable[[float, str], None]


@dataclass
class FitRequest:
    """Everything a kind needs to fit one stage on one track of the chain.

    ``X`` holds the fitting rows and only the stage's features, as the schema's float64
    matrix (category codes, NaN for missing). ``residual`` is the loss's negative gradient at
    ``raw``, the chain's current output on those rows (log-odds for binary chains). With one
    output per row (regression, binary) both are vectors; a multiclass chain's are (n, K), one
    column per class, and ``y`` holds the class codes. ``weight`` is each fitting row's weight
    (None: every row counts once). A kind that fits one output at a time fits output k through
    ``for_output(k)``.
    """

    X: np.ndarray
    columns: tuple[ColumnInfo, ...]
    residual: np.ndarray
    y: np.ndarray
    raw: np.ndarray
    loss: Any
    task: str
    random_state: np.random.RandomState
    cancel: threading.Event | None = None
    progress: ProgressFn | None = None
    #: the rows drawn for this stage when it subsamples (True in bag), None when every row fits
    in_bag: np.ndarray | None = None
    #: what the fit found worth telling the user (e.g. separation), one line each
    notes: list[str] = field(default_factory=list)
    #: each fitting row's weight, None when every row counts once
    weight: np.ndarray | None = None
    #: the threads the learner may use when its own thread parameter is unset (None: the usable cores)
    threads: int | None = None
    #: the track's other rows (its validation and test rows, the stage's features), which the stage
    #: predicts once fit; a learner may tell its values there from the fit (``other_values``). None
    #: when they are not one block of the matrix
    others: np.ndarray | None = None

    @property
    def thread_count(self) -> int:
        """Return the threads the learner uses when its parameters leave them unset (``stages.threads``)."""
        from ..threads import resolve

        return resolve(self.threads)

    @property
    def outputs(self) -> int:
        """Return K, the number of outputs per row the learner must predict (1 unless multiclass)."""
        return 1 if self.residual.ndim == 1 else int(self.residual.shape[1])

    def check_cancel(self) -> None:
        """Raise FitCancelled when the user asked to stop."""
        if self.cancel is not None and self.cancel.is_set():
            from ..errors import FitCancelled

            raise FitCancelled("fit cancelled")

    def note(self, text: str) -> None:
        """Record one line the stage's details will show; return None."""
        if text not in self.notes:
            self.notes.append(text)

    def subset(self, rows: np.ndarray) -> FitRequest:
        """Return the request restricted to ``rows`` (a mask or positions), on the same random stream.

        A cross-fit fits each fold through such a request; it reports no progress and keeps no notes.
        """
        return FitRequest(
            X=self.X[rows], columns=self.columns, residual=self.residual[rows], y=self.y[rows],
            raw=self.raw[rows], loss=self.loss, task=self.task, random_state=self.random_state,
            cancel=self.cancel, weight=None if self.weight is None else self.weight[rows], threads=self.threads,
        )

    def for_output(self, k: int) -> FitRequest:
        """Return the request of output ``k`` alone (the same request when there is one output).

        Its ``y`` is 1 for class k and 0 otherwise, its residual and raw output class k's, its loss
        the one class k's leaves take (``Loss.for_output``); it shares the rows drawn, the random
        stream and the notes.
        """
        if self.outputs == 1:
            return self
        return FitRequest(
            X=self.X, columns=self.columns, residual=np.ascontiguousarray(self.residual[:, k]),
            y=(np.asarray(self.y) == k).astype(np.float64), raw=np.ascontiguousarray(self.raw[:, k]),
            loss=self.loss.for_output(k), task=self.task, random_state=self.random_state, cancel=self.cancel,
            progress=None, in_bag=self.in_bag, notes=self.notes, weight=self.weight, threads=self.threads,
        )


@dataclass(frozen=True)
class Artifact:
    """A fitted learner in a safe, data-only form: ``fmt`` is one of json, npz, lgb, skops.

    ``n_features`` is set when an artifact is read back from a file: the number of feature
    columns the stage reads, so that ``load`` can refuse a learner built for another width;
    ``n_outputs`` the number of outputs per row it must predict (the chain's K).
    """

    fmt: str
    payload: bytes
    meta: dict[str, Any] = field(default_factory=dict)
    n_features: int | None = field(default=None, compare=False)
    n_outputs: int = field(default=1, compare=False)

    SUFFIX: ClassVar[dict[str, str]] = {"json": ".json", "npz": ".npz", "lgb": ".txt", "skops": ".skops"}

    @property
    def suffix(self) -> str:
        """Return the file suffix of this artifact inside a chain file."""
        return self.SUFFIX[self.fmt]


class StageKind(ABC):
    """One kind of stage. Subclasses set the class attributes and implement fit/save/load.

    ``fit`` returns a learner: any object with ``predict(X) -> ndarray`` giving the stage's
    output before shrinkage, on the same feature columns it was fit on: n values for a request
    with one output, an (n, K) array for K outputs (``FitRequest.outputs``).
    """

    name: ClassVar[str]
    summary: ClassVar[str]
    defaults: ClassVar[dict[str, Any]] = {}
    main_params: ClassVar[tuple[str, ...]] = ()
    #: True when the kind fits the loss itself from ``y`` and ``raw`` (an offset), rather than
    #: regressing the residuals; such a stage needs no line search.
    fits_loss: ClassVar[bool] = False
    #: True when the learner's leaves take loss-specific values after the fit (tree kinds).
    refines_leaves: ClassVar[bool] = False
    #: Parameter names accepted besides the underlying estimator's own.
    extra_params: ClassVar[tuple[str, ...]] = ()
    #: True when the kind takes ``subsample``: each stage fits a fraction of the fitting rows,
    #: drawn without replacement from the chain's stream (``FitRequest.in_bag``)
    subsamples: ClassVar[bool] = False
    #: True when the kind's learner counts each row by its weight (scikit-learn's sample_weight)
    takes_weights: ClassVar[bool] = True

    def accepts_weights(self, params: dict[str, Any]) -> bool:
        """Return True when the learner counts fitting rows by their weights (else a weighted chain refuses it)."""
        return self.takes_weights

    def step_source(self, params: dict[str, Any]) -> str:
        """Return where the stage's step comes from: one of the sources in ``stages.steps``.

        A kind that fits the loss needs no step, tree kinds set their leaves; any other learner
        is taken to be able to interpolate its fitting rows, so its step is cross-fit.
        """
        from .. import steps

        if self.fits_loss:
            return steps.FITS_LOSS
        if self.refines_leaves:
            return steps.LEAVES
        return steps.CROSS_FIT

    def leaf_rule(self, loss: Any) -> str:
        """Return how the leaves of this kind take their values under ``loss`` (kinds that refine leaves)."""
        return loss.leaf_rule

    def out_of_bag(self, learner: Any, request: FitRequest) -> tuple[np.ndarray, np.ndarray]:
        """Return the learner's out-of-bag predictions on the fitting rows and the mask of rows that have one."""
        raise NotImplementedError(f"kind {self.name!r} has no out-of-bag predictions")

    def accepted_params(self) -> set[str] | None:
        """Return the parameter names this kind accepts, or None when any name is accepted."""
        return set(self.defaults) | set(self.extra_params)

    def resolve_params(self, params: dict[str, Any] | None, task: str) -> dict[str, Any]:
        """Return the defaults overlaid with ``params``; raise StageSpecError for an unknown name."""
        params = dict(params or {})
        accepted = self.accepted_params()
        if accepted is not None:
            unknown = sorted(set(params) - accepted)
            if unknown:
                known = ", ".join(sorted(accepted)) or "none"
                raise StageSpecError(
                    f"kind {self.name!r} has no parameter {unknown[0]!r} (it takes: {known})"
                )
        resolved = {**self.task_defaults(task), **params}
        return resolved

    def task_defaults(self, task: str) -> dict[str, Any]:
        """Return the default parameters for ``task`` (regression or binary)."""
        return dict(self.defaults)

    @abstractmethod
    def fit(self, request: FitRequest, params: dict[str, Any]) -> Any:
        """Return a fitted learner for ``request`` with the resolved ``params``."""

    def refine(self, learner: Any, request: FitRequest) -> None:
        """Set loss-specific leaf values on ``learner`` (only for kinds that refine leaves)."""
        return None

    @abstractmethod
    def save(self, learner: Any) -> Artifact:
        """Return the learner as a safe artifact."""

    @abstractmethod
    def load(self, artifact: Artifact) -> Any:
        """Return the learner stored in ``artifact``; raise ChainFileError if it is not acceptable."""

    def importance(self, learner: Any, columns: tuple[ColumnInfo, ...]) -> np.ndarray | None:
        """Return one non-negative importance per feature column, or None when the learner has none."""
        return None


def check_subsample(value: Any, kind: str) -> float:
    """Return ``subsample`` as a float; raise StageSpecError unless it lies in (0, 1]."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not 0.0 < float(value) <= 1.0:
        raise StageSpecError(f"kind {kind!r}: subsample must be a fraction in (0, 1], not {value!r}")
    return float(value)


def check_has_features(X: np.ndarray, kind: str) -> None:
    """Raise StageSpecError when ``X`` has no feature columns (a stage must use at least one)."""
    if X.ndim != 2 or X.shape[1] == 0:
        raise StageSpecError(f"kind {kind!r} needs at least one feature column")
