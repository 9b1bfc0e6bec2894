"""The ``linear``, ``ridge`` and ``lasso`` kinds: least squares on the shared linear design.

Each fits scikit-learn's estimator of the same name to the residuals on the imputed,
standardised, one-hot encoded design (see ``design.py``), then keeps only its coefficients:
the learner is ``design.transform(X) @ coef + intercept`` and its artifact is JSON. A multiclass
stage regresses the K classes' residuals at once on the one design (least squares of several
targets is each target's least squares): ``coef`` is then (width, K) and ``intercept`` K values.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any, ClassVar, Protocol

import numpy as np

from ..errors import ChainFileError, StageFitError, StageSpecError
from ..manifest_schema import strict_json
from . import register
from .base import Artifact, FitRequest, StageKind, check_has_features
from .design import LinearDesign, group_sum


class Design(Protocol):
    """What a linear learner needs of its preprocessing."""

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Return the design matrix of ``X``."""

    def feature_groups(self) -> list[int]:
        """Return the input column of each design column."""

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict."""


def row_products(Z: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """Return Z @ coef (coef a vector, or (width, K) for K outputs), summed column by column in a fixed order.

    A BLAS product rounds differently depending on how many rows it gets at once; this sum
    does not, so predicting in chunks gives the same bits as predicting all rows together.
    """
    out = np.zeros((Z.shape[0], *coef.shape[1:]), dtype=np.float64)
    for j, weight in enumerate(coef):
        out += (Z[:, j] if coef.ndim == 1 else Z[:, j, None]) * weight
    return out


@dataclass
class LinearModel:
    """A fitted linear stage: its preprocessing, one coefficient per design column, an intercept
    (for K outputs, a (width, K) matrix and K intercepts)."""

    design: Design
    coef: np.ndarray
    intercept: float | np.ndarray

    @property
    def outputs(self) -> int:
        """Return the number of outputs per row (1 for one coefficient per design column)."""
        return 1 if self.coef.ndim == 1 else int(self.coef.shape[1])

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return the stage's output on the rows ``X``: ``design.transform(X) @ coef + intercept``.

        Rows go through the design a block at a time (the same bits as all at once, see
        ``row_products``), so the design matrix of a million rows never exists whole.
        """
        out = np.empty((X.shape[0], *self.coef.shape[1:]), dtype=np.float64)
        for start in range(0, X.shape[0], BLOCK_ROWS):
            block = self.design.transform(X[start:start + BLOCK_ROWS])
            out[start:start + BLOCK_ROWS] = row_products(block, self.coef) + self.intercept
        return out


#: rows of the design built at once when predicting, or when fitting least squares by blocks
#: (16,384 rows x 50 columns is 6.5 MB: as quick as larger blocks, and a small share of the data)
BLOCK_ROWS = 16_384


def blocked_least_squares(design: LinearDesign, X: np.ndarray, target: np.ndarray,
                          fit_intercept: bool = True, weight: np.ndarray | None = None,
                          ) -> tuple[np.ndarray, float | np.ndarray]:
    """Return the least-squares coefficients and intercept of ``target`` on ``design.transform(X)``.

    The solution of scikit-learn's LinearRegression (the minimum-norm one; singular values below
    ``max(shape) * eps`` of the largest are cut), found without holding the design matrix: the
    columns are centred, then the rows are folded a block at a time into the triangular factor R
    of the QR decomposition of ``[design | target]`` (Householder QR, as stable as on the whole
    matrix), and the small system in R is solved by SVD at the end. A target of K columns (n, K)
    gives (width, K) coefficients and K intercepts: each column's least squares.

    With row weights, the weighted least squares (LinearRegression with ``sample_weight``): the
    weighted means are taken out, and each centred row is multiplied by the root of its weight.
    """
    from scipy import linalg

    n, width = X.shape[0], design.width
    several = target.ndim == 2
    targets = target.shape[1] if several else 1
    x_mean, y_mean = np.zeros(width), np.zeros(targets) if several else 0.0
    if fit_intercept and weight is None:
        for start in range(0, n, BLOCK_ROWS):
            x_mean += design.transform(X[start:start + BLOCK_ROWS]).sum(axis=0)
        x_mean = x_mean / n
        y_mean = np.mean(target, axis=0) if several else float(np.mean(target))
    elif fit_intercept and weight is not None:
        total = float(np.sum(weight))
        for start in range(0, n, BLOCK_ROWS):
            x_mean += weight[start:start + BLOCK_ROWS] @ design.transform(X[start:start + BLOCK_ROWS])
        x_mean = x_mean / total
        y_mean = np.average(target, axis=0, weights=weight) if several else float(np.average(target, weights=weight))
    root = None if weight is None else np.sqrt(weight)
    factor = np.zeros((0, width + targets))
    for start in range(0, n, BLOCK_ROWS):
        rows = min(BLOCK_ROWS, n - start)
        # R so far on top of the next block of rows, factored in place: one block's memory
        stacked = np.empty((len(factor) + rows, width + targets), order="F")
        stacked[: len(factor)] = factor
        block = stacked[len(factor):]
        block[:, :width] = design.transform(X[start:start + rows])
        block[:, :width] -= x_mean
        if several:
            block[:, width:] = target[start:start + rows] - y_mean
        else:
            block[:, width] = target[start:start + rows] - y_mean
        if root is not None:
            block *= root[start:start + rows, None]
        factor = linalg.qr(stacked, mode="r", overwrite_a=True, check_finite=False)[0][: width + targets]
    cond = max(n, width) * np.finfo(np.float64).eps
    right = factor[:width, width:] if several else factor[:width, width]
    coef = linalg.lstsq(factor[:width, :width], right, cond=cond, check_finite=False)[0]
    if several:
        return coef, y_mean - x_mean @ coef
    return coef, y_mean - float(x_mean @ coef)


def checked_coefficients(coef: Any, intercept: Any, kind: str, outputs: int = 1) -> tuple[np.ndarray, float | np.ndarray]:
    """Return the coefficients as a float64 vector and the intercept as a float, or for ``outputs`` > 1
    the (width, K) matrix (as given: scikit-learn's (K, width) ``coef_`` is passed transposed) and K
    intercepts; raise StageFitError if one is not finite."""
    if outputs > 1:
        matrix = np.asarray(coef, dtype=np.float64).reshape(-1, outputs)
        values = np.broadcast_to(np.asarray(intercept, dtype=np.float64), (outputs,)).copy()
        if not (np.all(np.isfinite(matrix)) and np.all(np.isfinite(values))):
            raise StageFitError(f"kind {kind!r} produced coefficients that are not finite numbers")
        return matrix, values
    coef = np.asarray(coef, dtype=np.float64).ravel()
    intercept = float(np.asarray(intercept, dtype=np.float64).ravel()[0]) if np.size(intercept) else 0.0
    if not (np.all(np.isfinite(coef)) and np.isfinite(intercept)):
        raise StageFitError(f"kind {kind!r} produced coefficients that are not finite numbers")
    return coef, intercept


def fit_estimator(estimator: Any, matrix: np.ndarray, target: np.ndarray, kind: str,
                  sample_weight: np.ndarray | None = None) -> Any:
    """Return ``estimator`` fit to ``matrix`` and ``target`` (rows weighted by ``sample_weight`` when
    given); a rejected parameter value raises StageSpecError."""
    from sklearn.utils._param_validation import InvalidParameterError

    try:
        if sample_weight is not None:
            return estimator.fit(matrix, target, sample_weight=sample_weight)
        return estimator.fit(matrix, target)
    except InvalidParameterError as exc:
        raise StageSpecError(f"kind {kind!r}: {str(exc).splitlines()[0]}") from None


def linear_importance(model: LinearModel, n_columns: int) -> np.ndarray:
    """Return |coef| per design column (summed over the outputs) summed per input column."""
    sizes = np.abs(model.coef) if model.coef.ndim == 1 else np.abs(model.coef).sum(axis=1)
    return group_sum(sizes, model.design.feature_groups(), n_columns)


def dump_linear(model: LinearModel, estimator: str) -> Artifact:
    """Return a linear learner as a JSON artifact (design, coefficients, intercept, estimator name).

    K outputs store ``coef`` as one list of K numbers per design column and ``intercept`` as K numbers.
    """
    several = model.coef.ndim == 2
    body = {
        "estimator": estimator,
        "design": model.design.to_dict(),
        "coef": [[float(c) for c in row] for row in model.coef] if several else [float(c) for c in model.coef],
        "intercept": [float(v) for v in np.ravel(model.intercept)] if several else float(model.intercept),
    }
    return Artifact("json", json.dumps(body).encode())


def _numbers(values: Any, what: str) -> list[float]:
    if not isinstance(values, list) or not all(isinstance(c, int | float) and not isinstance(c, bool) for c in values):
        raise TypeError(f"{what} must be a list of numbers")
    return values


def read_linear(artifact: Artifact, estimator: str) -> tuple[dict[str, Any], np.ndarray, float | np.ndarray]:
    """Return the design dict, coefficients and intercept of a JSON artifact written for ``estimator``
    (for ``artifact.n_outputs`` K > 1: (width, K) coefficients and K intercepts).

    Raise ChainFileError when the artifact is not JSON, was written by another kind, or is
    incomplete.
    """
    if artifact.fmt != "json":
        raise ChainFileError(f"{estimator} stage artifact must be json, not {artifact.fmt}")
    outputs = artifact.n_outputs
    try:
        body = strict_json(artifact.payload)
        found = body["estimator"]
        design, values, intercept = body["design"], body["coef"], body["intercept"]
        if outputs > 1:
            if not isinstance(values, list) or not all(len(_numbers(row, "each coef row")) == outputs for row in values):
                raise TypeError(f"coef must be a list of rows of {outputs} numbers")
            coef = np.asarray(values, dtype=np.float64).reshape(-1, outputs)
            if len(_numbers(intercept, "intercept")) != outputs:
                raise TypeError(f"intercept must be {outputs} numbers")
            intercept = np.asarray(intercept, dtype=np.float64)
        else:
            coef = np.asarray(_numbers(values, "coef"), dtype=np.float64)
            if isinstance(intercept, bool) or not isinstance(intercept, int | float):
                raise TypeError("intercept must be a number")
            intercept = float(intercept)
    except (ValueError, KeyError, TypeError, RecursionError) as exc:
        raise ChainFileError(f"{estimator} stage artifact is not valid ({type(exc).__name__}: "
                             f"{' '.join(str(exc).split())[:200]})") from None
    if found != estimator:
        raise ChainFileError(f"{estimator} stage artifact was written by kind {str(found)[:60]!r}")
    if not np.isfinite(coef).all() or not np.isfinite(intercept).all():
        raise ChainFileError(f"{estimator} stage artifact has a coefficient that is not a finite number")
    if artifact.n_features is not None and (not isinstance(design, dict) or not isinstance(design.get("steps"), list)
                                            or len(design["steps"]) != artifact.n_features):
        raise ChainFileError(f"{estimator} stage artifact's design does not read the stage's {artifact.n_features} features")
    return design, coef, intercept


def load_linear(artifact: Artifact, estimator: str) -> LinearModel:
    """Return the LinearModel (with a LinearDesign) stored in a JSON artifact for ``estimator``."""
    design_dict, coef, intercept = read_linear(artifact, estimator)
    design = LinearDesign.from_dict(design_dict)
    if len(coef) != design.width:
        raise ChainFileError(f"{estimator} stage artifact has {len(coef)} coefficients for {design.width} design columns")
    return LinearModel(design, coef, intercept)


def constant_model(design: Design, target: np.ndarray, fit_intercept: bool) -> LinearModel:
    """Return the model of a design with no column: the mean target (of each output) as its intercept, or 0."""
    if target.ndim == 2:
        means = np.mean(target, axis=0) if fit_intercept else np.zeros(target.shape[1])
        return LinearModel(design, np.zeros((0, target.shape[1])), means)
    return LinearModel(design, np.zeros(0), float(np.mean(target)) if fit_intercept else 0.0)


class StoredAsLinearModel(StageKind):
    """The file and the importance of every kind whose learner is a ``LinearModel`` (a design,
    coefficients and an intercept): linear, ridge, lasso, logistic and glm."""

    def save(self, learner: LinearModel) -> Artifact:
        """Return the model as JSON."""
        return dump_linear(learner, self.name)

    def load(self, artifact: Artifact) -> LinearModel:
        """Return the model stored in ``artifact``."""
        return load_linear(artifact, self.name)

    def importance(self, learner: LinearModel, columns) -> np.ndarray:
        """Return |coef| on the standardised design, summed per input column."""
        return linear_importance(learner, len(columns))


class LinearFamilyKind(StoredAsLinearModel):
    """Shared fitting for the least-squares kinds: build the design, fit the estimator, keep coefficients."""

    def step_source(self, params: dict[str, Any]) -> str:
        """Return in-sample: a linear fit cannot interpolate its fitting rows (no step at all on squared loss)."""
        from .. import steps

        return steps.IN_SAMPLE

    def make_estimator(self, params: dict[str, Any], request: FitRequest) -> Any:
        """Return the unfitted scikit-learn estimator for ``params``."""
        raise NotImplementedError

    def fit(self, request: FitRequest, params: dict[str, Any]) -> LinearModel:
        """Return the linear model fit to the residuals on the shared design."""
        check_has_features(request.X, self.name)
        design = LinearDesign.fit(request.X, request.columns)
        matrix = design.transform(request.X)
        target = np.asarray(request.residual, dtype=np.float64)
        if matrix.shape[1] == 0:  # e.g. a categorical column with no value in the fitting rows
            return constant_model(design, target, bool(params.get("fit_intercept", True)))
        estimator = self.make_estimator(params, request)
        fit_estimator(estimator, matrix, target, self.name, sample_weight=request.weight)
        coef = estimator.coef_.T if target.ndim == 2 else estimator.coef_
        coef, intercept = checked_coefficients(coef, estimator.intercept_, self.name, request.outputs)
        return LinearModel(design, coef, intercept)



class LinearKind(LinearFamilyKind):
    """Ordinary least squares (scikit-learn's LinearRegression)."""

    name: ClassVar[str] = "linear"
    summary: ClassVar[str] = "least squares on all features (imputed, standardised, one-hot)"
    defaults: ClassVar[dict[str, Any]] = {"fit_intercept": True}
    main_params: ClassVar[tuple[str, ...]] = ("fit_intercept",)

    def make_estimator(self, params: dict[str, Any], request: FitRequest) -> Any:
        """Return a LinearRegression."""
        from sklearn.linear_model import LinearRegression

        return LinearRegression(**params)

    def fit(self, request: FitRequest, params: dict[str, Any]) -> LinearModel:
        """Return the least-squares model of the residuals, solved by blocks of rows
        (``blocked_least_squares``): LinearRegression's solution in a fraction of its memory."""
        check_has_features(request.X, self.name)
        fit_intercept = params.get("fit_intercept", True)
        if not isinstance(fit_intercept, bool | np.bool_):
            raise StageSpecError(f"kind {self.name!r}: fit_intercept must be true or false, not {fit_intercept!r}")
        design = LinearDesign.fit(request.X, request.columns)
        target = np.asarray(request.residual, dtype=np.float64)
        if design.width == 0:  # e.g. a categorical column with no value in the fitting rows
            return constant_model(design, target, bool(fit_intercept))
        coef, intercept = blocked_least_squares(design, request.X, target, bool(fit_intercept), request.weight)
        coef, intercept = checked_coefficients(coef, intercept, self.name, request.outputs)
        return LinearModel(design, coef, intercept)


class RidgeKind(LinearFamilyKind):
    """Least squares with an L2 penalty (scikit-learn's Ridge)."""

    name: ClassVar[str] = "ridge"
    summary: ClassVar[str] = "least squares with an L2 penalty (alpha) on standardised features"
    defaults: ClassVar[dict[str, Any]] = {"alpha": 1.0, "fit_intercept": True, "solver": "auto"}
    main_params: ClassVar[tuple[str, ...]] = ("alpha",)

    def make_estimator(self, params: dict[str, Any], request: FitRequest) -> Any:
        """Return a Ridge."""
        from sklearn.linear_model import Ridge

        return Ridge(**params)


class LassoKind(LinearFamilyKind):
    """Least squares with an L1 penalty (scikit-learn's Lasso): some coefficients become exactly zero."""

    name: ClassVar[str] = "lasso"
    summary: ClassVar[str] = "least squares with an L1 penalty (alpha): drops weak features"
    defaults: ClassVar[dict[str, Any]] = {
        "alpha": 1.0, "max_iter": 1000, "tol": 1e-4, "fit_intercept": True, "selection": "cyclic",
    }
    main_params: ClassVar[tuple[str, ...]] = ("alpha", "selection")

    def make_estimator(self, params: dict[str, Any], request: FitRequest) -> Any:
        """Return a Lasso; with ``selection="random"`` it draws from the chain's stream."""
        from sklearn.linear_model import Lasso

        # only random selection uses the stream, so a cyclic lasso leaves it untouched
        stream = request.random_state if params.get("selection") == "random" else None
        return Lasso(random_state=stream, **params)


LINEAR = register(LinearKind())
RIDGE = register(RidgeKind())
LASSO = register(LassoKind())
