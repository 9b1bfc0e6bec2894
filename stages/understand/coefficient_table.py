"""Coefficients of linear stages (linear, ridge, lasso, logistic) on the features' own scale.

A linear stage fits on a standardised design (``kinds/design.py``): z = (x - mean) / std, with
missing values imputed by the median and flagged, and one 0/1 column per category level. Its
terms are given back per unit of each feature:

- ``intercept``: the stage's output when every numeric feature is 0 and every category is at
  its reference level;
- one slope per numeric or boolean feature (per unit; a boolean's slope is true against false);
  a missing value counts as the median, plus the ``<feature> is missing`` term when the fitting
  rows had missing values;
- for a categorical feature, one contrast per level against a reference level (the first level
  seen, unless ``reference`` names another; the ``reference`` column says which), and
  ``<feature> missing or unseen``: what a missing value or a level never seen adds against the
  reference.

Every coefficient is the stage's contribution, i.e. multiplied by its scale (shrinkage times
step). For an unpenalised stage (``linear`` with squared loss, ``logistic`` with
``penalty = "none"``) a standard error and a 95 % confidence interval come from the fitting
rows: for ``linear`` the ordinary least squares ones (sigma^2 (X'X)^-1, sigma^2 = RSS / (n - p),
a t interval); for ``logistic`` the inverse Fisher information at the fit (a normal interval).
Both are conditional on the earlier stages: their output is taken as a fixed offset, as if it
were known, so they leave out the uncertainty of those stages' own fits.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from scipy import stats
from scipy.special import expit

from ..errors import StageSpecError
from ..schema import CATEGORICAL, ColumnInfo
from .cache import remembered
from .rows import check_stage, one_output

if TYPE_CHECKING:
    from ..chain import Chain
    from ..predictor import FittedChain

LINEAR_KINDS = ("linear", "ridge", "lasso", "logistic", "glm")
BLOCK_ROWS = 65_536
CONFIDENCE = 0.95
COLUMNS = ["term", "feature", "coefficient", "std_error", "ci_low", "ci_high", "reference"]


@dataclass
class Terms:
    """The terms of a stage as a linear map of its reduced parameters theta (the design columns
    left after each categorical's reference level is dropped, one missing-or-unseen column per
    categorical, the intercept): ``values = matrix() @ theta``."""

    names: list[str] = field(default_factory=list)
    features: list[str] = field(default_factory=list)
    references: list[str] = field(default_factory=list)
    rows: list[dict[int, float]] = field(default_factory=list)  # term -> {parameter: weight}
    #: where each parameter's design column comes from: ("column", a) is column a of the stage's
    #: design; ("none of", a, b) is 1 where a categorical's one-hot block a:b is all zero; ("ones",)
    sources: list[tuple] = field(default_factory=list)
    theta: list[float] = field(default_factory=list)

    def add(self, name: str, feature: str, weights: dict[int, float], reference: str = "") -> None:
        """Append one term."""
        self.names.append(name)
        self.features.append(feature)
        self.references.append(reference)
        self.rows.append(weights)

    def matrix(self) -> np.ndarray:
        """Return the terms-by-parameters matrix."""
        out = np.zeros((len(self.rows), len(self.theta)))
        for i, weights in enumerate(self.rows):
            for p, w in weights.items():
                out[i, p] = w
        return out


def coefficients(chain: Chain, stage: int, *, reference: dict[str, str] | None = None) -> pd.DataFrame:
    """Return one row per term of stage ``stage``: ``term``, ``feature``, ``coefficient``, ``std_error``,
    ``ci_low``, ``ci_high`` (NaN where they do not apply) and ``reference``; ``attrs["note"]`` says
    what the standard errors are conditional on, or why there are none."""
    one_output(chain.task, "the coefficient table")
    k = check_stage(len(chain.stages), stage)
    fitted_stage = chain.stages[k - 1]
    columns = chain.schema.subset(list(fitted_stage.feature_index))
    _check_kind(fitted_stage.kind, k)
    key = ("coefficients", tuple(sorted((reference or {}).items())))

    def compute() -> pd.DataFrame:
        terms = stage_terms(fitted_stage.learners[0], columns, reference)
        values = fitted_stage.scale * (terms.matrix() @ np.asarray(terms.theta))
        errors, note = _standard_errors(chain, k, terms, columns)
        return _frame(terms, values, errors, note)

    return remembered(chain, list(chain.stages[:k]), key, compute)


def fitted_coefficients(fitted: FittedChain, stage: int, *, reference: dict[str, str] | None = None) -> pd.DataFrame:
    """Return the terms of stage ``stage`` of a loaded chain (as ``coefficients``, without standard
    errors: they need the train rows, which a chain file does not hold)."""
    one_output(fitted.task, "the coefficient table")
    k = check_stage(len(fitted.stages), stage)
    fitted_stage = fitted.stages[k - 1]
    _check_kind(fitted_stage.kind, k)
    terms = stage_terms(fitted_stage.learner, fitted.schema.subset(list(fitted_stage.feature_index)), reference)
    values = fitted_stage.scale * (terms.matrix() @ np.asarray(terms.theta))
    note = "no standard errors: they need the train rows, and a chain file holds none"
    return _frame(terms, values, None, note)


def _check_kind(kind: str, k: int) -> None:
    if kind == "spline":
        raise StageSpecError(f"stage {k} is a spline stage: its fitted curves are chain.curves({k})")
    if kind not in LINEAR_KINDS:
        raise StageSpecError(f"stage {k} is a {kind} stage; coefficients are for linear, ridge, lasso, "
                             "logistic and glm stages")


def _frame(terms: Terms, values: np.ndarray, errors: tuple[np.ndarray, float] | None, note: str) -> pd.DataFrame:
    """Return the coefficient table; ``errors`` holds the standard errors and the quantile of the
    95 % interval, or is None when the stage has none."""
    table = pd.DataFrame({"term": terms.names, "feature": terms.features, "coefficient": values,
                          "std_error": np.nan, "ci_low": np.nan, "ci_high": np.nan,
                          "reference": terms.references})
    if errors is not None:
        std, quantile = errors
        table["std_error"] = std
        table["ci_low"] = values - quantile * std
        table["ci_high"] = values + quantile * std
    table.attrs["note"] = note
    return table[COLUMNS]


# ----------------------------------------------------------------------------- terms


def stage_terms(learner: Any, columns: tuple[ColumnInfo, ...], reference: dict[str, str] | None) -> Terms:
    """Return the terms of a linear learner (a LinearModel over a LinearDesign) on the features' own scale."""
    design, coef = learner.design, np.asarray(learner.coef, dtype=np.float64)
    reference = dict(reference or {})
    unknown = sorted(set(reference) - {c.name for c in columns if c.is_categorical})
    if unknown:
        raise StageSpecError(f"reference: {unknown[0]!r} is not a categorical feature of this stage")
    terms = Terms()
    terms.add("intercept", "", {})  # its weights are filled in below
    intercept_weights: dict[int, float] = {}
    intercept_shift = 0.0  # reference levels' coefficients move into the intercept
    at = 0
    for column, step in zip(columns, design.steps, strict=True):
        if step.role == CATEGORICAL:
            intercept_shift += _categorical_terms(terms, column, step.codes, coef[at:at + step.width], at,
                                                  reference.get(column.name))
        else:
            p = _parameter(terms, ("column", at), coef[at])
            terms.add(column.name, column.name, {p: 1.0 / step.std})
            intercept_weights[p] = -step.mean / step.std
            if step.indicator:
                q = _parameter(terms, ("column", at + 1), coef[at + 1])
                terms.add(f"{column.name} is missing", column.name, {q: 1.0})
        at += step.width
    p = _parameter(terms, ("ones",), float(learner.intercept) + intercept_shift)
    terms.rows[0] = {**intercept_weights, p: 1.0}
    return terms


def _parameter(terms: Terms, source: tuple, value: float) -> int:
    terms.sources.append(source)
    terms.theta.append(float(value))
    return len(terms.theta) - 1


def _categorical_terms(terms: Terms, column: ColumnInfo, codes: tuple[int, ...], coef: np.ndarray, at: int,
                       chosen: str | None) -> float:
    """Add a categorical feature's contrasts and missing term; return the reference level's coefficient."""
    if not codes:
        return 0.0
    levels = column.levels
    if chosen is None:
        ref = 0
    else:
        seen = [levels[c] for c in codes]
        if str(chosen) not in seen:
            raise StageSpecError(f"reference level {chosen!r} of {column.name!r} does not occur in the stage's "
                                 f"train rows (levels: {', '.join(seen)})")
        ref = seen.index(str(chosen))
    ref_name, ref_coef = levels[codes[ref]], float(coef[ref])
    for i, code in enumerate(codes):
        if i != ref:
            p = _parameter(terms, ("column", at + i), coef[i] - ref_coef)
            terms.add(f"{column.name} = {levels[code]}", column.name, {p: 1.0}, ref_name)
    p = _parameter(terms, ("none of", at, at + len(codes)), -ref_coef)
    terms.add(f"{column.name} missing or unseen", column.name, {p: 1.0}, ref_name)
    return ref_coef


# ----------------------------------------------------------------------------- standard errors


def _standard_errors(chain: Chain, k: int, terms: Terms,
                     columns: tuple[ColumnInfo, ...]) -> tuple[tuple[np.ndarray, float] | None, str]:
    stage = chain.stages[k - 1]
    before = "the start value" if k == 1 else f"stages 1 to {k - 1}" if k > 2 else "stage 1"
    condition = f"standard errors and 95 % intervals are conditional on {before}: their output is taken as fixed"
    penalty = stage.params.get("penalty")
    if stage.kind == "logistic" and not (penalty is None or str(penalty).lower() == "none"):
        return None, "no standard errors: the stage is penalised (set penalty = \"none\" for them)"
    if stage.kind in ("ridge", "lasso"):
        return None, f"no standard errors: a {stage.kind} stage is penalised"
    if stage.kind == "glm":
        return None, "no standard errors: not computed for glm stages"
    if chain.weight is not None:
        return None, "no standard errors: not computed for chains with row weights"
    if stage.kind == "linear" and chain.loss.name != "squared":
        return None, f"no standard errors: a linear stage regresses the {chain.loss.name} loss's residuals"
    if stage.kind == "linear" and not stage.params.get("fit_intercept", True):
        return None, "no standard errors: the stage has no intercept"
    fit = chain.layout.tracks[0].fit_positions()
    X = chain.matrix[fit][:, list(stage.feature_index)]
    raw = chain.outputs(k - 1)[0][fit, 0]
    y = chain.y[fit]
    learner = stage.learners[0]
    if stage.kind == "logistic":
        gram, n = _gram(learner, terms, X, lambda h, rows: _logistic_weight(raw[rows] + h))
        cov, rank = _inverse(gram)
        scale2, quantile = 1.0, float(stats.norm.ppf(0.5 + CONFIDENCE / 2))
    else:
        target = chain.loss.residual(y, raw)
        gram, n, rss = _gram_and_rss(learner, terms, X, target)
        cov, rank = _inverse(gram)
        if cov is None or n <= rank:
            return None, "no standard errors: the stage has as many terms as train rows"
        scale2, quantile = rss / (n - rank), float(stats.t.ppf(0.5 + CONFIDENCE / 2, n - rank))
    if cov is None:
        return None, "no standard errors: the stage's design is rank-deficient on its train rows"
    T = terms.matrix()
    active = cov[1]
    errors = np.full(len(terms.names), np.nan)
    usable = ~np.any(T[:, ~active] != 0, axis=1)
    Ta = T[:, active]
    variance = scale2 * np.einsum("ij,jk,ik->i", Ta, cov[0], Ta)
    errors[usable] = abs(stage.scale) * np.sqrt(np.maximum(variance[usable], 0.0))
    return (errors, quantile), condition


def reduced_design(learner: Any, terms: Terms, X: np.ndarray) -> np.ndarray:
    """Return the design of the reduced parameters for rows ``X``, in their order: standardised
    columns of the stage's design, one missing-or-unseen column per categorical, a column of ones."""
    full = learner.design.transform(X)
    out = np.empty((X.shape[0], len(terms.sources)))
    for p, source in enumerate(terms.sources):
        if source[0] == "ones":
            out[:, p] = 1.0
        elif source[0] == "column":
            out[:, p] = full[:, source[1]]
        else:
            out[:, p] = full[:, source[1]:source[2]].sum(axis=1) == 0
    return out


def _gram_and_rss(learner: Any, terms: Terms, X: np.ndarray, target: np.ndarray) -> tuple[np.ndarray, int, float]:
    width = len(terms.theta)
    gram, rss = np.zeros((width, width)), 0.0
    for start in range(0, X.shape[0], BLOCK_ROWS):
        block = X[start:start + BLOCK_ROWS]
        Z = reduced_design(learner, terms, block)
        gram += Z.T @ Z
        rss += float(np.sum((target[start:start + BLOCK_ROWS] - learner.predict(block)) ** 2))
    return gram, X.shape[0], rss


def _gram(learner: Any, terms: Terms, X: np.ndarray, weight) -> tuple[np.ndarray, int]:
    width = len(terms.theta)
    gram = np.zeros((width, width))
    for start in range(0, X.shape[0], BLOCK_ROWS):
        block = X[start:start + BLOCK_ROWS]
        Z = reduced_design(learner, terms, block)
        w = weight(learner.predict(block), slice(start, start + BLOCK_ROWS))
        gram += (Z * w[:, None]).T @ Z
    return gram, X.shape[0]


def _logistic_weight(logit: np.ndarray) -> np.ndarray:
    p = expit(logit)
    return p * (1.0 - p)


def _inverse(gram: np.ndarray) -> tuple[tuple[np.ndarray, np.ndarray] | None, int]:
    """Return (inverse over the columns that are not all zero, which columns those are) and the rank;
    None when those columns are still rank-deficient."""
    active = np.diag(gram) > 0
    sub = gram[np.ix_(active, active)]
    scaling = 1.0 / np.sqrt(np.diag(sub))
    scaled = sub * scaling[:, None] * scaling[None, :]  # unit diagonal: the check below is scale-free
    eigen = np.linalg.eigvalsh(scaled)
    rank = int(np.sum(eigen > eigen.max() * 1e-12))
    if rank < len(sub):
        return None, rank
    inverse = np.linalg.inv(scaled) * scaling[:, None] * scaling[None, :]
    return (inverse, active), rank
