"""A fitted chain reduced to what predicting needs: schema, loss, start value and stages."""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .errors import UnseenLevelsWarning, UnseenMissingWarning
from .loglink import is_log_link
from .losses import Loss
from .metrics import predicted_classes
from .outputs import block, squeeze, start_block
from .row_weights import check_exposure, read_values
from .schema import Schema, Task
from .spec import StageSpec


def unseen_missing_message(source: str, counts: dict[str, int], schema: Schema) -> str:
    """Return the one-line warning for missing values in columns whose fitting rows had none."""
    fills = {c.name: c.fill for c in schema.columns}
    detail = ", ".join(f"{name!r}: {count:,} (given {fills[name]:.6g})" for name, count in counts.items())
    return (f"{source}: missing values in columns that had none in the fitting rows were given the "
            f"fitting rows' median ({detail})")


class _Inputs:
    """The schema matrix a prediction runs on, and its float32 copy made once for all the
    scikit-learn trees and forests among the stages.

    Those learners cast every matrix they are given to float32 before they route a row, so one
    cast shared by their stages gives the same values as each stage's own cast, without a copy of
    the matrix per stage.
    """

    def __init__(self, matrix: np.ndarray) -> None:
        self.matrix = matrix
        self._single: np.ndarray | None = None

    def for_learner(self, learner: Any) -> np.ndarray:
        """Return the matrix as ``learner`` reads it: the shared float32 copy for a scikit-learn tree
        or forest (or one per class of them), the matrix itself otherwise."""
        if not _reads_float32(learner):
            return self.matrix
        if self._single is None:
            self._single = self.matrix.astype(np.float32)
        return self._single


def _reads_float32(learner: Any) -> bool:
    from sklearn.ensemble._forest import BaseForest
    from sklearn.tree import BaseDecisionTree

    from .kinds.per_class import PerClass
    if isinstance(learner, PerClass):
        return all(_reads_float32(one) for one in learner.learners)
    return isinstance(learner, (BaseDecisionTree, BaseForest))


@dataclass(frozen=True, eq=False)
class FittedStage:
    """One stage of a fitted chain: its learner, the scale of its output, and its columns."""

    spec: StageSpec
    params: dict[str, Any]
    learner: Any
    scale: float
    feature_index: tuple[int, ...]
    scores: dict[str, Any] = field(default_factory=dict)
    fit_seconds: float = 0.0
    step_rule: str = ""                           # how the step was chosen (``stages.steps``)
    oob_loss: tuple[float, float] | None = None   # subsampled stages: loss on the rows left out, before and after
    notes: tuple[str, ...] = ()

    @property
    def kind(self) -> str:
        """Return the stage's kind name."""
        return self.spec.kind

    @property
    def step(self) -> float:
        """Return the stage's step: its scale over its shrinkage."""
        return self.scale / self.spec.shrinkage if self.spec.shrinkage else float("nan")

    @property
    def oob_improvement(self) -> float:
        """Return how much the stage lowered the loss on the rows its subsample left out (NaN without one)."""
        return self.oob_loss[0] - self.oob_loss[1] if self.oob_loss is not None else float("nan")


@dataclass(eq=False)
class FittedChain:
    """A chain ready to predict: ``predict`` and, for binary and multiclass chains, ``predict_proba``.

    ``start`` holds the start value of each of the K raw scores (one for regression and binary).
    """

    schema: Schema
    loss: Loss
    start: np.ndarray
    stages: list[FittedStage]
    meta: dict[str, Any] = field(default_factory=dict)
    start_scores: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.start = np.asarray(self.start, dtype=np.float64).reshape(-1)

    @property
    def task(self) -> Task:
        """Return "regression", "binary" or "multiclass"."""
        return self.schema.task

    @property
    def classes(self) -> tuple[str, ...]:
        """Return the classes (as text): negative then positive for binary chains, the stored order for
        multiclass chains (the columns of ``predict_proba``); empty for regression."""
        return self.schema.classes

    @property
    def outputs(self) -> int:
        """Return K, the raw scores per row (the number of classes of a multiclass chain, else 1)."""
        return self.loss.outputs

    def _stage_output(self, stage: FittedStage, inputs: _Inputs) -> np.ndarray:
        n_all = len(self.schema.columns)
        cols = stage.feature_index
        matrix = inputs.for_learner(stage.learner)
        X = matrix if cols == tuple(range(n_all)) else matrix[:, list(cols)]
        return block(stage.learner.predict(X), matrix.shape[0], self.outputs)

    def raw_from_matrix(self, matrix: np.ndarray, upto: int | None = None,
                        offset: np.ndarray | None = None) -> np.ndarray:
        """Return the (n, K) raw output (log-odds for binary) of the first ``upto`` stages on a schema
        matrix, from the start value plus each row's ``offset`` (on the raw scale; None: none)."""
        raw = start_block(self.start, matrix.shape[0], offset)
        inputs = _Inputs(matrix)
        for stage in self.stages[:upto]:
            raw += stage.scale * self._stage_output(stage, inputs)
        return raw

    def raw_after_each_stage(self, matrix: np.ndarray, offset: np.ndarray | None = None) -> np.ndarray:
        """Return the raw output after the start value and after each stage on a schema matrix, as an
        (n, 1 + number of stages, K) array (the last of axis 1 is ``raw_from_matrix``'s)."""
        out = np.empty((matrix.shape[0], len(self.stages) + 1, self.outputs), dtype=np.float64)
        raw = start_block(self.start, matrix.shape[0], offset)
        out[:, 0] = raw
        inputs = _Inputs(matrix)
        for k, stage in enumerate(self.stages, start=1):
            raw += stage.scale * self._stage_output(stage, inputs)
            out[:, k] = raw
        return out

    def encode(self, frame: pd.DataFrame, *, source: str = "data") -> np.ndarray:
        """Return the schema matrix of ``frame`` (column-major, as ``DataFrame.to_numpy`` lays it out),
        with missing values the fitting rows never had given their median (``Schema.fill_missing``);
        warn once with the count of unseen levels, and once naming the columns so filled."""
        matrix, unseen = self.schema.encode(frame, source=source, order="F")
        if unseen:
            detail = ", ".join(f"{name!r}: {count:,}" for name, count in unseen.items())
            warnings.warn(f"{source}: values the chain cannot use (category levels never seen in training, "
                          f"text, infinity or a value beyond ±3.4e38 in a numeric column) were treated as "
                          f"missing ({detail})",
                          UnseenLevelsWarning, stacklevel=3)
        matrix, filled = self.schema.fill_missing(matrix)
        if filled:
            warnings.warn(unseen_missing_message(source, filled, self.schema), UnseenMissingWarning, stacklevel=3)
        return matrix

    def predict_raw(self, frame: pd.DataFrame, *, source: str = "data") -> np.ndarray:
        """Return the raw output for every row of ``frame``, in its order: n values (one output per
        row), or an (n, K) array of a multiclass chain's scores."""
        return squeeze(self.raw_from_matrix(self.encode(frame, source=source)))

    @property
    def threshold(self) -> float:
        """Return the probability at or above which a binary chain predicts the positive class."""
        return float(self.meta.get("threshold", 0.5))

    @property
    def exposure_column(self) -> str | None:
        """Return the exposure column the chain was fit with (log-link losses), or None."""
        return self.meta.get("exposure")

    @property
    def weight_column(self) -> str | None:
        """Return the weight column the chain was fit with, or None."""
        return self.meta.get("weight")

    def predict(self, frame: pd.DataFrame, *, threshold: float | None = None, source: str = "data",
                exposure: Any = None) -> np.ndarray:
        """Return predictions: values for regression, class labels for binary chains (positive at ``threshold``,
        by default the chain's own) and multiclass chains (the most probable class).

        A log-link chain predicts the mean per unit of exposure, exp(raw); ``exposure`` (a column of
        ``frame``, or one positive value per row) multiplies it back to each row's expected total.
        """
        raw = self.predict_raw(frame, source=source)
        if is_log_link(self.loss):
            mean = self.loss.link(raw)
            if exposure is None:
                return mean
            values, name = read_values(frame, exposure, "exposure", source)
            return mean * check_exposure(values, name, source)
        if exposure is not None:
            raise TypeError(f"exposure is for log-link chains (poisson, gamma, tweedie); this chain's loss is {self.loss.name}")
        if self.task == "multiclass":
            labels = np.array([class_label(c) for c in self.schema.classes], dtype=object)
            return _plain(labels[predicted_classes(self.loss.link(raw))])
        if self.task != "binary":
            return raw
        threshold = self.threshold if threshold is None else threshold
        positive = self.loss.link(raw) >= threshold
        return np.where(positive, class_label(self.schema.classes[1]), class_label(self.schema.classes[0]))

    def predict_proba(self, frame: pd.DataFrame, *, source: str = "data") -> np.ndarray:
        """Return class probabilities: (n, 2), negative class first, for binary chains; (n, K) with the
        columns in ``classes`` order for multiclass chains."""
        if self.task == "multiclass":
            return self.loss.link(self.raw_from_matrix(self.encode(frame, source=source)))
        if self.task != "binary":
            raise TypeError("predict_proba is for classification chains; this chain is a regression")
        p = self.loss.link(self.predict_raw(frame, source=source))
        return np.column_stack([1.0 - p, p])

    def to_onnx(self, path: Any, *, rows: pd.DataFrame | None = None) -> Any:
        """Write the chain as one ONNX model at ``path`` (and its probe file beside it), checked against
        ``predict`` first on the chain file's probe rows and ``rows``; return the report
        (``stages.bridges.onnx.OnnxReport``). Needs ``remnant[onnx]``."""
        from .bridges.onnx import export_onnx
        from .files import store

        return export_onnx(self, path, stored_rows=store.stored_probe(self), rows=rows)

    def as_estimator(self):
        """Return this chain as a fitted scikit-learn estimator (regressor or classifier)."""
        from .bridges.estimator import wrap_fitted

        return wrap_fitted(self)

    # ----- understanding a loaded chain: stages.understand (rows come from ``frame``) ---------
    def coefficients(self, stage: int, **options: Any) -> pd.DataFrame:
        """Return the terms of a linear, ridge, lasso or logistic stage on the features' own scale
        (without standard errors: a chain file holds no fitting rows)."""
        from .understand import fitted_coefficients

        return fitted_coefficients(self, stage, **options)

    def curves(self, stage: int, **options: Any) -> pd.DataFrame:
        """Return a spline stage's fitted curve of each feature on a grid."""
        from .understand import fitted_curves

        return fitted_curves(self, stage, **options)

    def partial_dependence(self, frame: pd.DataFrame, feature: str | list[str], upto: int | None = None,
                           stage: int | None = None, grid: Any = None, sample: int | None = None,
                           **options: Any) -> pd.DataFrame:
        """Return the partial dependence of ``feature`` over the rows of ``frame``."""
        from .understand import fitted_partial_dependence

        return fitted_partial_dependence(self, frame, feature, upto, stage, grid, sample, **options)

    def largest_residuals(self, frame: pd.DataFrame, n: int = 20, upto: int | None = None,
                          **options: Any) -> pd.DataFrame:
        """Return the ``n`` rows of ``frame`` (which holds the target) with the largest absolute residual."""
        from .understand import fitted_largest_residuals

        return fitted_largest_residuals(self, frame, n, upto, **options)

    def calibration(self, frame: pd.DataFrame, bins: int = 10, **options: Any) -> pd.DataFrame:
        """Return predicted probability in bins against the observed rate on ``frame`` (binary chains)."""
        from .understand import fitted_calibration

        return fitted_calibration(self, frame, bins, **options)


def class_label(text: str) -> Any:
    """Return a class label as an int when it is written as one, else as the text."""
    try:
        number = float(text)
    except ValueError:
        return text
    return int(number) if number.is_integer() else number


def class_text(value: Any) -> str:
    """Return a class label as the schema writes it: whole floats lose their ``.0`` (so 1.0 is "1")."""
    if isinstance(value, float | np.floating) and float(value).is_integer():
        return str(int(value))
    if isinstance(value, np.integer | np.bool_):
        return str(value.item())
    return str(value)


def header_safe(text: str) -> str:
    """Return ``text`` with every character but ASCII letters, digits and ``_`` made ``_`` (never empty)."""
    return re.sub(r"[^A-Za-z0-9_]", "_", text) or "_"


def probability_columns(classes: tuple[str, ...] | list[str]) -> list[str]:
    """Return the ``probability_<class>`` column names of a multiclass chain's predictions, in class order.

    Each class is made safe for a CSV header (``header_safe``: "late delivery" gives
    ``probability_late_delivery``); classes that become the same name get ``_2``, ``_3`` ... after
    the first, in class order.
    """
    names: list[str] = []
    taken: set[str] = set()
    for label in classes:
        base = f"probability_{header_safe(label)}"
        name, count = base, 1
        while name in taken:
            count += 1
            name = f"{base}_{count}"
        taken.add(name)
        names.append(name)
    return names


def _plain(labels: np.ndarray) -> np.ndarray:
    """Return an object array of labels as numbers when every label is one (else as it is)."""
    if all(isinstance(v, int) for v in labels.tolist()):
        return labels.astype(np.int64)
    if all(isinstance(v, int | float) for v in labels.tolist()):
        return labels.astype(np.float64)
    return labels
