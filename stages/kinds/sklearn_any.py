"""The ``sklearn:<module>.<Class>`` kinds: any scikit-learn regressor, named by its import path.

The regressor is fit to the residuals on the shared linear design (imputed, standardised,
one-hot); on a multiclass chain K regressors are fit, one to each class's pseudo-residuals (in
class order, on the chain's stream), and the artifact holds them as one list. Its artifact is
skops holding exactly the regressor's class and the types listed in
``sklearn_types``; the types are recorded when it is saved and checked on load before anything
is built, and the trees and support vectors inside are checked before anything predicts.
"""

from __future__ import annotations

import inspect
import sys
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from ..errors import ChainFileError, StageSpecError
from ..tree_structure import check_fitted_estimator
from . import SKLEARN_PREFIX, skops_io
from .base import Artifact, FitRequest, StageKind, check_has_features
from .design import LinearDesign, group_sum
from .linear import fit_estimator
from .sklearn_types import (
    FIT_ONLY,
    REBUILT_ON_LOAD,
    allowed_types,
    class_path,
    listed_regressor,
    listed_regressors,
)

_SCALARS = (bool, int, float, str, type(None))


@dataclass
class SklearnModel:
    """A fitted stage of any scikit-learn regressor: the linear design and the fitted estimator (a list
    of K estimators, one per class, for a multiclass chain)."""

    design: LinearDesign
    estimator: Any

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return the estimator's prediction on the design of the rows ``X`` ((n, K) for K estimators)."""
        several = isinstance(self.estimator, list)
        if X.shape[0] == 0:
            return np.zeros((0, len(self.estimator)) if several else 0)
        matrix = self.design.transform(X)
        if several:
            return np.column_stack([np.asarray(e.predict(matrix), dtype=np.float64).ravel() for e in self.estimator])
        return np.asarray(self.estimator.predict(matrix), dtype=np.float64).ravel()


def import_regressor(path: str) -> type:
    """Return the regressor class at ``path`` (``sklearn.<module>.<Class>``); raise StageSpecError otherwise.

    The class is looked up among the regressors scikit-learn lists, never imported from ``path``.
    """
    module_name, _, class_name = path.rpartition(".")
    if not module_name.startswith("sklearn.") or not class_name:
        raise StageSpecError(
            f"only scikit-learn regressors can be named by path; {path!r} is not in scikit-learn "
            f"(write {SKLEARN_PREFIX}sklearn.<module>.<Class>, e.g. {SKLEARN_PREFIX}sklearn.svm.SVR)"
        )
    cls = listed_regressor(path)
    if cls is not None:
        return cls
    listed_regressors()  # imports scikit-learn's modules, so that the checks below see them
    module = sys.modules.get(module_name)
    if module is None:
        raise StageSpecError(f"scikit-learn has no module {module_name!r} (in kind {SKLEARN_PREFIX}{path})")
    if not inspect.isclass(getattr(module, class_name, None)):
        raise StageSpecError(f"scikit-learn module {module_name!r} has no class {class_name!r}")
    raise StageSpecError(f"{path!r} is not a regressor (a stage fits residuals, so it needs one of "
                         "the regressors scikit-learn lists)")


class SklearnKind(StageKind):
    """A stage of one scikit-learn regressor class; build it with ``SklearnKind.for_path``."""

    name: ClassVar[str] = SKLEARN_PREFIX
    summary: ClassVar[str] = "any scikit-learn regressor, by import path"
    _cache: ClassVar[dict[str, SklearnKind]] = {}

    def __init__(self, path: str, cls: type) -> None:
        self.path = path
        self.cls = cls
        self.name = f"{SKLEARN_PREFIX}{path}"  # type: ignore[misc]  # one kind instance per path
        shallow = cls().get_params(deep=False)
        order = [p for p in inspect.signature(cls).parameters if p in shallow]
        # defaults the form can show; random_state is left out so an unset one comes from the stream
        self.defaults = {  # type: ignore[misc]
            k: shallow[k] for k in order if k != "random_state" and isinstance(shallow[k], _SCALARS)
        }
        self.main_params = tuple(k for k in order if k != "random_state")[:3]  # type: ignore[misc]
        self._accepted = set(cls().get_params(deep=True))

    @classmethod
    def for_path(cls, path: str) -> SklearnKind:
        """Return the kind for the regressor at ``path``, built once per path; raise StageSpecError if it is not one."""
        if path not in cls._cache:
            cls._cache[path] = cls(path, import_regressor(path))
        return cls._cache[path]

    def accepted_params(self) -> set[str] | None:
        """Return the estimator's own parameter names (nested ones included, as set_params takes them)."""
        return set(self._accepted)

    def accepts_weights(self, params: dict[str, Any]) -> bool:
        """Return True when the estimator's ``fit`` takes ``sample_weight``."""
        from sklearn.utils.validation import has_fit_parameter

        return bool(has_fit_parameter(self.cls, "sample_weight"))

    def fit(self, request: FitRequest, params: dict[str, Any]) -> SklearnModel:
        """Return the regressor fit to the residuals on the linear design."""
        check_has_features(request.X, self.name)
        design = LinearDesign.fit(request.X, request.columns)
        matrix = design.transform(request.X)
        if matrix.shape[1] == 0:
            raise StageSpecError(f"kind {self.name!r}: its features have no value in the train rows")
        if request.outputs > 1:
            estimators = [self._fit_one(request.for_output(k), params, matrix) for k in range(request.outputs)]
            return SklearnModel(design, estimators)
        return SklearnModel(design, self._fit_one(request, params, matrix))

    def _fit_one(self, request: FitRequest, params: dict[str, Any], matrix: np.ndarray) -> Any:
        request.check_cancel()
        estimator = self.cls()
        from_stream = "random_state" in self._accepted and "random_state" not in params
        settings = {**params, "random_state": request.random_state} if from_stream else dict(params)
        try:
            estimator.set_params(**settings)
        except ValueError as exc:
            raise StageSpecError(f"kind {self.name!r}: {str(exc).splitlines()[0]}") from None
        fit_estimator(estimator, matrix, np.asarray(request.residual, dtype=np.float64), self.name,
                      sample_weight=request.weight)
        if from_stream:
            estimator.set_params(random_state=None)  # the fitted model must not hold the chain's stream
        return estimator

    def save(self, learner: SklearnModel) -> Artifact:
        """Return the estimator as skops, with the design, the class path and the exact types it holds in ``meta``."""
        estimator = learner.estimator
        kept = [_for_file(e) for e in estimator] if isinstance(estimator, list) else _for_file(estimator)
        payload, types = skops_io.dump(kept, allowed_types(self.cls))
        meta = {"design": learner.design.to_dict(), "estimator": self.path, "types": types}
        return Artifact("skops", payload, meta)

    def load(self, artifact: Artifact) -> SklearnModel:
        """Return the model in ``artifact``; raise ChainFileError for an untrusted type, another class or
        a structure that does not fit its design (checked before anything is built or run)."""
        if artifact.fmt != "skops":
            raise ChainFileError(f"{self.name} stage artifact must be skops, not {artifact.fmt}")
        try:
            design = LinearDesign.from_dict(artifact.meta["design"])
        except (KeyError, TypeError, ValueError) as exc:
            raise ChainFileError(f"{self.name} stage artifact has no valid design ({exc!r})") from None
        if artifact.n_features is not None and len(design.steps) != artifact.n_features:
            raise ChainFileError(f"{self.name} stage artifact's design reads {len(design.steps)} features, "
                                 f"not the stage's {artifact.n_features}")
        several = artifact.n_outputs > 1
        found = skops_io.load(artifact.payload, allowed_types(self.cls), recorded=artifact.meta.get("types"),
                              n_features=design.width, expected=(list,) if several else ())
        estimators = found if several else [found]
        if len(estimators) != artifact.n_outputs:
            raise ChainFileError(f"{self.name} stage artifact holds {len(estimators)} estimators for "
                                 f"{artifact.n_outputs} classes")
        for estimator in estimators:
            if type(estimator) is not self.cls:
                raise ChainFileError(f"{self.name} stage artifact holds a {type(estimator).__name__}, "
                                     f"not a {self.cls.__name__}")
            check_fitted_estimator(estimator, design.width, f"{self.name} stage artifact")
        if class_path(self.cls) in REBUILT_ON_LOAD:
            estimators = [_rebuilt(e, design.width, f"{self.name} stage artifact") for e in estimators]
        return SklearnModel(design, estimators if several else estimators[0])

    def importance(self, learner: SklearnModel, columns) -> np.ndarray | None:
        """Return the estimator's feature_importances_ or |coef_| summed per input column (for K
        estimators, their mean), else None."""
        found = []
        groups = learner.design.feature_groups()
        for estimator in learner.estimator if isinstance(learner.estimator, list) else [learner.estimator]:
            values = getattr(estimator, "feature_importances_", None)
            if values is None:
                values = getattr(estimator, "coef_", None)
            if values is None:
                return None
            values = np.abs(np.asarray(values, dtype=np.float64)).ravel()
            if len(values) != len(groups):
                return None
            found.append(group_sum(values, groups, len(columns)))
        return np.mean(found, axis=0)


def _for_file(estimator: Any) -> Any:
    """Return ``estimator`` as its file keeps it: a shallow copy without the attributes only a fit
    uses (``sklearn_types.FIT_ONLY``), or the estimator itself."""
    import copy

    dropped = FIT_ONLY.get(class_path(type(estimator)), ())
    if not dropped:
        return estimator
    kept = copy.copy(estimator)
    for name in dropped:
        if name in vars(kept):
            setattr(kept, name, None)
    return kept


def _rebuilt(estimator: Any, width: int, what: str) -> Any:
    """Return a neighbour regressor fit again, by scikit-learn, on the rows and targets its file
    stores (its search tree is never read from the file); raise ChainFileError when they are unfit."""
    from sklearn.base import clone

    rows, targets = getattr(estimator, "_fit_X", None), getattr(estimator, "_y", None)
    if not (isinstance(rows, np.ndarray) and rows.dtype == np.float64 and rows.ndim == 2 and rows.shape[1] == width
            and isinstance(targets, np.ndarray) and targets.dtype == np.float64 and targets.shape == rows.shape[:1]
            and len(rows) and np.isfinite(rows).all() and np.isfinite(targets).all()):
        raise ChainFileError(f"{what} holds no finite rows of {width} inputs and targets to search among")
    fresh = clone(estimator)
    try:
        fresh.set_params(n_jobs=None)  # the chain, not a file, says how many threads run
        fresh.fit(rows, targets)
    except (ValueError, TypeError) as exc:
        raise ChainFileError(f"{what}: its neighbour search could not be built ({_one_line(exc)})") from None
    return fresh


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:300] or type(exc).__name__
