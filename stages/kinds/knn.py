"""The ``knn`` kind: k nearest neighbours on the standardised linear design.

The residual at a row is predicted by the mean residual of its nearest fitting rows,
measured on the imputed, standardised, one-hot encoded design. Rows tied at the k-th
distance are taken in the order of their position among the fitting rows, so a row's
prediction is the same whatever rows are predicted with it (``neighbour_search.py``); the
mean matches scikit-learn's KNeighborsRegressor wherever no tie decides the neighbours. The
artifact stores the fitting rows' design matrix and residuals as ``.npz``; loading refits the
neighbour search on them, which is deterministic.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from ..errors import ChainFileError, StageSpecError
from . import register
from .base import Artifact, FitRequest, StageKind, check_has_features
from .design import LinearDesign
from .linear import fit_estimator
from .neighbour_search import average_of, nearest

#: query rows predicted at once (the design of a block, and its candidates, stay small)
PREDICT_BLOCK = 8192


@dataclass
class NeighboursModel:
    """A fitted k-NN stage: its design, the fitted neighbour search, and what it was fit on."""

    design: LinearDesign
    estimator: Any
    matrix: np.ndarray
    target: np.ndarray
    params: dict[str, Any]

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return the mean (or distance-weighted) residual of each row's nearest fitting rows."""
        out = np.empty((X.shape[0], *self.target.shape[1:]), dtype=np.float64)
        k, p = int(self.params["n_neighbors"]), float(self.params["p"])
        for start in range(0, X.shape[0], PREDICT_BLOCK):
            queries = self.design.transform(X[start:start + PREDICT_BLOCK])
            positions, distances = nearest(self.estimator, self.matrix, queries, k, p)
            out[start:start + PREDICT_BLOCK] = average_of(self.target, positions, distances, self.params["weights"])
        return out


def fit_neighbours(matrix: np.ndarray, target: np.ndarray, params: dict[str, Any], kind: str) -> Any:
    """Return a NearestNeighbors search fit on ``matrix``; raise StageSpecError when k exceeds the rows
    or a parameter has a value the stage cannot use."""
    from sklearn.neighbors import NearestNeighbors

    k, weights, p = params["n_neighbors"], params["weights"], params["p"]
    if isinstance(k, bool) or not isinstance(k, int) or k < 1:
        raise StageSpecError(f"kind {kind!r}: n_neighbors must be a whole number of at least 1, not {k!r}")
    if k > matrix.shape[0]:
        raise StageSpecError(f"kind {kind!r}: n_neighbors={k} is more than the {matrix.shape[0]} train rows")
    if weights not in ("uniform", "distance"):
        raise StageSpecError(f"kind {kind!r}: weights must be 'uniform' or 'distance', not {weights!r}")
    if isinstance(p, bool) or not isinstance(p, int | float) or not p >= 1:
        raise StageSpecError(f"kind {kind!r}: p must be a number of at least 1, not {p!r}")
    settings = {name: value for name, value in params.items() if name != "weights"}
    return fit_estimator(NearestNeighbors(**settings), matrix, target, kind)


class KnnKind(StageKind):
    """Nearest-neighbour regression of the residuals."""

    name: ClassVar[str] = "knn"
    summary: ClassVar[str] = "k nearest neighbours on standardised features: local averages of the residuals"
    defaults: ClassVar[dict[str, Any]] = {
        "n_neighbors": 10, "weights": "uniform", "p": 2, "algorithm": "auto", "leaf_size": 30,
    }
    main_params: ClassVar[tuple[str, ...]] = ("n_neighbors", "weights")
    #: a neighbour average has no row weights (its ``weights`` weigh neighbours by distance)
    takes_weights: ClassVar[bool] = False

    def fit(self, request: FitRequest, params: dict[str, Any]) -> NeighboursModel:
        """Return the k-NN model fit to the residuals on the standardised design."""
        check_has_features(request.X, self.name)
        design = LinearDesign.fit(request.X, request.columns)
        matrix = design.transform(request.X)
        if matrix.shape[1] == 0:
            raise StageSpecError(f"kind {self.name!r}: its features have no value in the train rows")
        target = np.asarray(request.residual, dtype=np.float64).copy()
        estimator = fit_neighbours(matrix, target, params, self.name)
        return NeighboursModel(design, estimator, matrix, target, dict(params))

    def save(self, learner: NeighboursModel) -> Artifact:
        """Return the fitting rows' design and residuals as npz, the design and params in ``meta``."""
        buffer = io.BytesIO()
        np.savez(buffer, matrix=learner.matrix, target=learner.target)
        meta = {"design": learner.design.to_dict(), "params": dict(learner.params)}
        return Artifact("npz", buffer.getvalue(), meta)

    def load(self, artifact: Artifact) -> NeighboursModel:
        """Return the model in ``artifact``, refitting the neighbour search on the stored rows."""
        if artifact.fmt != "npz":
            raise ChainFileError(f"knn stage artifact must be npz, not {artifact.fmt}")
        try:
            with np.load(io.BytesIO(artifact.payload), allow_pickle=False) as stored:
                matrix = np.asarray(stored["matrix"], dtype=np.float64)
                target = np.asarray(stored["target"], dtype=np.float64)
            design = LinearDesign.from_dict(artifact.meta["design"])
            params = {**self.defaults, **dict(artifact.meta["params"])}
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise ChainFileError(f"knn stage artifact is not valid ({exc!r})") from None
        wanted = (len(matrix),) if artifact.n_outputs == 1 else (len(matrix), artifact.n_outputs)
        if matrix.ndim != 2 or matrix.shape[1] != design.width or target.shape != wanted:
            raise ChainFileError("knn stage artifact: stored rows do not match its design")
        if artifact.n_features is not None and len(design.steps) != artifact.n_features:
            raise ChainFileError(f"knn stage artifact's design does not read the stage's {artifact.n_features} features")
        unknown = sorted(set(params) - set(self.defaults))
        if unknown:
            raise ChainFileError(f"knn stage artifact has an unknown parameter {unknown[0]!r}")
        try:
            estimator = fit_neighbours(matrix, target, params, self.name)
        except StageSpecError as exc:
            raise ChainFileError(f"knn stage artifact cannot be refit ({exc})") from None
        return NeighboursModel(design, estimator, matrix, target, params)


KNN = register(KnnKind())
