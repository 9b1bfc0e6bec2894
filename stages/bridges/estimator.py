"""scikit-learn estimators that fit a residual chain: ``ChainRegressor`` and ``ChainClassifier``.

Both follow scikit-learn's conventions, so a chain works inside ``Pipeline``,
``cross_val_score``, ``GridSearchCV`` and ``clone``. ``__init__`` stores its arguments as
given; ``fit`` validates the data, builds a DataFrame (the column names of a DataFrame, or
``x0, x1, ...`` for an array), fits a ``Chain`` and keeps it as ``chain_``.

A DataFrame keeps its column types: text and category columns reach the chain as
categories, which each stage kind encodes its own way. An array must be numeric. NaN is
accepted everywhere (each kind handles missing values); infinite values are refused.

``wrap_fitted`` turns an existing ``FittedChain`` (for instance one loaded from a chain
file) into a fitted estimator.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from numbers import Integral
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils import check_random_state
from sklearn.utils.multiclass import check_classification_targets, type_of_target
from sklearn.utils.validation import check_is_fitted, validate_data

from ..chain import Chain
from ..errors import RemnantError
from ..parsing import STAGE_KEYS, stage_entry
from ..predictor import FittedChain, class_label
from ..report.table import fitted_rows
from ..spec import StageSpec
from ..validation import AllRows, spec_from_dict

#: LightGBM settings of the default second stage: small, and one thread, since scikit-learn's
#: model selection tools parallelise over fits rather than inside them
DEFAULT_BOOSTER_PARAMS: dict[str, Any] = {
    "n_estimators": 50, "num_leaves": 15, "min_child_samples": 5, "n_jobs": 1,
}
#: the largest seed numpy's RandomState accepts, plus one
SEED_LIMIT = 2**32
#: the keys of a stage given as a dict: a stage's, and how many times
ESTIMATOR_KEYS = (*STAGE_KEYS, "repeat")


def default_stages(first_kind: str) -> list[dict[str, Any]]:
    """Return the default stage list: ``first_kind`` then a small LightGBM stage."""
    return [
        {"kind": first_kind},
        {"kind": "lightgbm", "shrinkage": 1.0, "params": dict(DEFAULT_BOOSTER_PARAMS)},
    ]


def stage_specs(stages: Sequence[Any] | None, first_kind: str = "linear") -> list[StageSpec]:
    """Return the StageSpec list that ``stages`` describes, with every ``repeat`` expanded.

    Each item is a StageSpec, a kind name, or a dict with ``kind`` and optionally
    ``shrinkage``, ``features``, ``params`` and ``repeat``, read as a recipe's [[stage]] is
    (StageSpecError names what is wrong). None means ``default_stages``.
    """
    items = default_stages(first_kind) if stages is None else stages
    if isinstance(items, str | Mapping | StageSpec) or not isinstance(items, Sequence):
        raise TypeError(f"stages must be a list of stage specs, not {type(items).__name__}")
    specs: list[StageSpec] = []
    for item in items:
        if isinstance(item, StageSpec):
            specs.append(item)
        elif isinstance(item, str):
            specs.append(StageSpec(item))
        elif isinstance(item, Mapping):
            entry = stage_entry(item, keys=ESTIMATOR_KEYS, where="a stage")
            specs.extend([entry.spec] * entry.repeat)
        else:
            raise TypeError(f"a stage must be a dict, a kind name or a StageSpec, not {type(item).__name__}")
    if not specs:
        raise ValueError("stages is empty; a chain needs at least one stage")
    return specs


def resolve_seed(random_state: Any) -> int:
    """Return the chain seed for ``random_state``: an int as given, else one drawn from it.

    None draws from numpy's global stream (a different chain on every fit), following
    scikit-learn; a ``RandomState`` is drawn from, so it advances.
    """
    if isinstance(random_state, Integral) and not isinstance(random_state, bool):
        seed = int(random_state)
        if not 0 <= seed < SEED_LIMIT:
            raise ValueError(f"random_state must be between 0 and 2**32 - 1, not {seed}")
        return seed
    return int(check_random_state(random_state).randint(np.iinfo(np.int32).max))


def _target_name(columns: Sequence[str]) -> str:
    """Return a target column name that is not a feature name: ``y`` unless a feature has it."""
    name = "y"
    while name in columns:
        name = f"_{name}"
    return name


class _ChainEstimator(BaseEstimator):
    """What both estimators share: input checks, the chain fit, and the fitted attributes."""

    _task = "regression"
    _first_kind = "linear"

    def __sklearn_tags__(self):
        """Return scikit-learn's tags: NaN is allowed in X."""
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        return tags

    def _column_names(self) -> list[str]:
        if hasattr(self, "feature_names_in_"):
            return [str(name) for name in self.feature_names_in_]
        return [f"x{i}" for i in range(self.n_features_in_)]

    def _as_frame(self, X: Any, checked: np.ndarray) -> pd.DataFrame:
        """Return the rows as a DataFrame with the fit-time column names (a DataFrame keeps its dtypes)."""
        names = self._column_names()
        if isinstance(X, pd.DataFrame):
            return X.set_axis(names, axis=1).reset_index(drop=True)
        return pd.DataFrame(checked, columns=names)

    def _check_fit_data(self, X: Any, y: Any) -> tuple[pd.DataFrame, np.ndarray]:
        dtype = None if isinstance(X, pd.DataFrame) else "numeric"
        checked, y = validate_data(
            self, X, y, dtype=dtype, ensure_all_finite="allow-nan", ensure_min_samples=2,
            y_numeric=self._task == "regression",
        )
        return self._as_frame(X, checked), y

    def _check_predict_data(self, X: Any) -> pd.DataFrame:
        check_is_fitted(self, "chain_")
        dtype = None if isinstance(X, pd.DataFrame) else "numeric"
        checked = validate_data(self, X, reset=False, dtype=dtype, ensure_all_finite="allow-nan")
        return self._as_frame(X, checked)

    def _fit_chain(self, frame: pd.DataFrame, y: np.ndarray, task: str | None = None, **chain_options: Any) -> None:
        """Fit the chain on ``frame`` and ``y`` (for ``task``, by default the estimator's); set ``chain_`` and ``table_``."""
        validation = AllRows() if self.validation is None else self.validation
        used = set(getattr(validation, "columns_used", ()))
        target = _target_name(list(frame.columns))
        data = frame.copy()
        data[target] = y
        try:
            specs = stage_specs(self.stages, self._first_kind)
            chain = Chain(
                data, target, validation, self.loss, seed=resolve_seed(self.random_state),
                features=[c for c in frame.columns if c not in used], task=task or self._task,
                source=type(self).__name__, **chain_options,
            )
            chain.add_specs(specs)
        except RemnantError as err:
            raise ValueError(str(err)) from err
        self.chain_ = chain.fitted()
        self.table_ = chain.table()


def _weights(sample_weight: Any, frame: pd.DataFrame) -> dict[str, Any]:
    """Return the chain's ``weight`` option for ``sample_weight`` (nothing when it is None), checked by
    scikit-learn's own sample-weight check."""
    if sample_weight is None:
        return {}
    from sklearn.utils.validation import _check_sample_weight

    return {"weight": _check_sample_weight(sample_weight, frame, dtype=np.float64)}


class ChainRegressor(RegressorMixin, _ChainEstimator):
    """A residual chain as a scikit-learn regressor.

    Parameters
    ----------
    stages : list or None
        Stage specs in order: dicts such as ``{"kind": "tree", "shrinkage": 0.1,
        "params": {"max_depth": 3}, "repeat": 10}``, kind names, or ``StageSpec`` objects.
        None means a ``linear`` stage then a small ``lightgbm`` stage (``default_stages``).
    loss : str
        squared, absolute or huber.
    validation : ValidationSpec or None
        A scheme used inside ``fit`` to score each stage (the scores land in ``table_``).
        None fits on every row (``AllRows``).
    random_state : int, RandomState or None
        An int is the chain's seed; None (or a RandomState) draws a seed at each fit.

    Attributes
    ----------
    chain_ : FittedChain
        The fitted chain.
    table_ : pandas.DataFrame
        The stage table of the fit: one row per stage, the start value first.
    n_features_in_ : int
        The number of columns seen in ``fit``.
    feature_names_in_ : ndarray
        The column names seen in ``fit``, when X was a DataFrame with text column names.

    Examples
    --------
    >>> from sklearn.datasets import load_diabetes
    >>> X, y = load_diabetes(return_X_y=True)
    >>> model = ChainRegressor(random_state=0).fit(X, y)
    >>> model.predict(X[:2]).shape
    (2,)
    """

    def __init__(self, stages=None, loss="squared", validation=None, random_state=None) -> None:
        self.stages = stages
        self.loss = loss
        self.validation = validation
        self.random_state = random_state

    def fit(self, X: Any, y: Any, sample_weight: Any = None) -> ChainRegressor:
        """Fit the chain to ``X`` and ``y`` (rows weighted by ``sample_weight`` when given) and return ``self``."""
        frame, y = self._check_fit_data(X, y)
        self._fit_chain(frame, np.asarray(y, dtype=np.float64), **_weights(sample_weight, frame))
        return self

    def predict(self, X: Any) -> np.ndarray:
        """Return the chain's prediction for every row of ``X``, in order."""
        frame = self._check_predict_data(X)
        return self.chain_.predict(frame)


class ChainClassifier(ClassifierMixin, _ChainEstimator):
    """A residual chain as a scikit-learn classifier: binary (log loss on the log-odds scale) for two
    classes, multiclass (multinomial log loss on K raw scores, softmax) for 3 to 100.

    Parameters
    ----------
    stages : list or None
        Stage specs in order, as for ``ChainRegressor``. None means a ``logistic`` stage
        then a small ``lightgbm`` stage.
    loss : str
        logloss.
    validation : ValidationSpec or None
        A scheme used inside ``fit`` to score each stage; None fits on every row.
    random_state : int, RandomState or None
        An int is the chain's seed; None (or a RandomState) draws a seed at each fit.
    threshold : float
        With two classes, ``predict`` says ``classes_[1]`` where its probability is at least this
        (with more, it says the most probable class).

    Attributes
    ----------
    classes_ : ndarray
        The sorted labels of ``y`` in ``fit``, the columns of ``predict_proba``; with two,
        ``classes_[1]`` is the positive class.
    chain_ : FittedChain
        The fitted chain.
    table_ : pandas.DataFrame
        The stage table of the fit.
    n_features_in_ : int
        The number of columns seen in ``fit``.

    Examples
    --------
    >>> from sklearn.datasets import load_breast_cancer
    >>> X, y = load_breast_cancer(return_X_y=True)
    >>> model = ChainClassifier(random_state=0).fit(X, y)
    >>> model.predict_proba(X[:2]).shape
    (2, 2)
    """

    _task = "binary"
    _first_kind = "logistic"

    def __init__(self, stages=None, loss="logloss", validation=None, random_state=None, threshold=0.5) -> None:
        self.stages = stages
        self.loss = loss
        self.validation = validation
        self.random_state = random_state
        self.threshold = threshold

    def fit(self, X: Any, y: Any, sample_weight: Any = None) -> ChainClassifier:
        """Fit the chain to ``X`` and the labels ``y`` (two classes: binary; 3 to 100: multiclass; rows
        weighted by ``sample_weight`` when given) and return ``self``."""
        frame, y = self._check_fit_data(X, y)
        weights = _weights(sample_weight, frame)
        check_classification_targets(y)
        classes, codes = np.unique(y, return_inverse=True)
        if len(classes) < 2:
            raise ValueError(f"ChainClassifier needs two classes in y; it has one class ({classes[0]!r})")
        kind = type_of_target(y, input_name="y", raise_unknown=True)
        if kind not in ("binary", "multiclass"):
            raise ValueError(f"ChainClassifier fits one label per row; the type of the target is {kind}")
        if len(classes) == 2:
            self._fit_chain(frame, codes.astype(np.float64), positive="1", threshold=self.threshold, **weights)
        else:  # the codes 0 .. K - 1 sort by value, so the chain's class order is classes_'s
            self._fit_chain(frame, codes.astype(np.float64), task="multiclass", **weights)
        self.classes_ = classes
        return self

    def decision_function(self, X: Any) -> np.ndarray:
        """Return the chain's log-odds of ``classes_[1]`` for every row of ``X`` (two classes), or its
        (n, K) raw scores, one column per class of ``classes_``."""
        frame = self._check_predict_data(X)
        return self.chain_.predict_raw(frame)

    def predict_proba(self, X: Any) -> np.ndarray:
        """Return an (n, K) array of the probabilities of each class of ``classes_`` (K = 2 for two classes)."""
        frame = self._check_predict_data(X)
        return self.chain_.predict_proba(frame)

    def predict(self, X: Any) -> np.ndarray:
        """Return ``classes_[1]`` where its probability is at least ``threshold``, else ``classes_[0]``;
        with more than two classes, the most probable class."""
        probability = self.predict_proba(X)
        if len(self.classes_) == 2:
            return self.classes_[(probability[:, 1] >= self.threshold).astype(np.intp)]
        return self.classes_[np.argmax(probability, axis=1)]


def wrap_fitted(fitted: FittedChain) -> ChainRegressor | ChainClassifier:
    """Return a fitted ChainRegressor or ChainClassifier that predicts with ``fitted``.

    Its ``predict`` takes a DataFrame with exactly the schema's columns, in schema order
    (``frame[estimator.feature_names_in_]``), or an array in that column order. Its
    parameters describe the recipe, so ``clone(estimator).fit(X, y)`` refits it.
    """
    meta = fitted.meta or {}
    validation = meta.get("validation")
    settings: dict[str, Any] = {
        "stages": [stage.spec.to_dict() for stage in fitted.stages],
        "loss": fitted.loss.name,
        "validation": spec_from_dict(validation) if validation else None,
        "random_state": meta.get("seed"),
    }
    estimator: ChainRegressor | ChainClassifier
    if fitted.task in ("binary", "multiclass"):
        estimator = ChainClassifier(**settings, threshold=meta.get("threshold", 0.5))
        estimator.classes_ = np.array([class_label(c) for c in fitted.schema.classes])
    else:
        estimator = ChainRegressor(**settings)
    estimator.chain_ = fitted
    estimator.n_features_in_ = len(fitted.schema.columns)
    estimator.feature_names_in_ = np.array(fitted.schema.names, dtype=object)
    estimator.table_ = fitted_rows(fitted).frame()
    return estimator
