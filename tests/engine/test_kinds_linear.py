"""The linear family of stage kinds: linear, ridge, lasso, logistic, knn, spline and sklearn:<path>.

References: scikit-learn's own estimators and pipelines; numpy.linalg.lstsq; the diabetes data
(Efron et al. 2004, Least angle regression) and the Wisconsin diagnostic breast cancer data
(UCI), both shipped with scikit-learn.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest
from scipy.special import logit
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.linear_model import Lasso, LinearRegression, LogisticRegression, Ridge
from sklearn.metrics import r2_score
from sklearn.neighbors import KNeighborsRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import SplineTransformer, StandardScaler
from sklearn.svm import SVR

from stages.errors import ChainFileError, StageSpecError
from stages.kinds.base import Artifact, FitRequest
from stages.kinds.design import LinearDesign
from stages.kinds.knn import KNN
from stages.kinds.linear import LASSO, LINEAR, RIDGE
from stages.kinds.logistic import LOGISTIC
from stages.kinds.sklearn_any import SklearnKind
from stages.kinds.spline import SPLINE, SplineDesign
from stages.losses import LogLoss, SquaredLoss
from stages.schema import ColumnInfo

REGRESSION_KINDS = [LINEAR, RIDGE, LASSO, KNN, SPLINE]
ALL_KINDS = [*REGRESSION_KINDS, LOGISTIC]


def kind_id(kind) -> str:
    """Return a test id for a kind or a path."""
    return getattr(kind, "name", str(kind))


def numeric_columns(n: int) -> tuple[ColumnInfo, ...]:
    """Return ``n`` numeric column infos."""
    return tuple(ColumnInfo(f"x{j}", "numeric", "float64") for j in range(n))


def make_request(X, columns, *, residual=None, y=None, raw=None, loss=None, task="regression", seed=0) -> FitRequest:
    """Return a FitRequest built by hand: a regression on ``y`` from raw 0 unless told otherwise."""
    y = np.asarray(y if y is not None else residual, dtype=np.float64)
    raw = np.zeros(len(y)) if raw is None else np.asarray(raw, dtype=np.float64)
    loss = loss or SquaredLoss()
    residual = loss.residual(y, raw) if residual is None else np.asarray(residual, dtype=np.float64)
    return FitRequest(X, tuple(columns), residual, y, raw, loss, task, np.random.RandomState(seed))


def fit(kind, request, **params):
    """Return ``kind`` fit on ``request`` with ``params`` over its defaults."""
    return kind.fit(request, kind.resolve_params(params, request.task))


@pytest.fixture(scope="module")
def diabetes():
    """Return the diabetes features and target (442 rows, 10 features)."""
    X, y = load_diabetes(return_X_y=True)
    return X, y


@pytest.fixture(scope="module")
def cancer():
    """Return the breast cancer features and the 0/1 target (569 rows, 30 features)."""
    X, y = load_breast_cancer(return_X_y=True)
    return X, y.astype(np.float64)


@pytest.fixture(scope="module")
def mixed():
    """Return 120 rows: a numeric column with NaN, a boolean, a categorical with 3 levels, and a target."""
    rng = np.random.RandomState(1)
    n = 120
    numeric = rng.normal(size=n)
    numeric[::9] = np.nan
    boolean = (rng.rand(n) > 0.5).astype(np.float64)
    category = rng.randint(0, 3, size=n).astype(np.float64)
    category[::13] = np.nan
    X = np.c_[numeric, boolean, category]
    y = np.nan_to_num(numeric) * 2 + boolean - category_effect(category) + rng.normal(scale=0.1, size=n)
    columns = (
        ColumnInfo("size", "numeric", "float64"),
        ColumnInfo("flag", "boolean", "bool"),
        ColumnInfo("colour", "categorical", "object", ("red", "green", "blue", "violet")),
    )
    return X, y, columns


def category_effect(codes):
    """Return the synthetic effect of each colour code (0 for missing)."""
    return np.nan_to_num(np.where(codes == 1, 1.5, np.where(codes == 2, -1.0, 0.0)))


def mixed_request(kind, mixed) -> FitRequest:
    """Return a request on the mixed data: binary (y > 0) for the logistic kind, regression otherwise."""
    X, y, cols = mixed
    if kind is LOGISTIC:
        return make_request(X, cols, y=(y > 0).astype(float), loss=LogLoss(), task="binary")
    return make_request(X, cols, y=y)


def unseen_rows() -> np.ndarray:
    """Return rows with NaN everywhere, an unseen level (code 3) and values far outside the fit range."""
    return np.array([[np.nan, np.nan, np.nan], [0.5, 1.0, 3.0], [1e6, 0.0, 0.0], [-1e6, 1.0, 2.0]])


# --- LinearDesign -----------------------------------------------------------------------


def test_design_standardises_like_standard_scaler(diabetes):
    X, _ = diabetes
    design = LinearDesign.fit(X, numeric_columns(10))
    # reference: scikit-learn's StandardScaler (ddof=0)
    np.testing.assert_allclose(design.transform(X), StandardScaler().fit_transform(X), rtol=0, atol=1e-12)
    assert design.feature_groups() == list(range(10))


def test_design_imputes_median_and_adds_indicator_for_numeric_with_missing():
    X = np.array([[1.0, 1.0, np.nan], [np.nan, 0.0, np.nan], [3.0, np.nan, np.nan], [10.0, 1.0, np.nan]])
    cols = (ColumnInfo("a", "numeric", "float64"), ColumnInfo("b", "boolean", "bool"), ColumnInfo("c", "numeric", "float64"))
    design = LinearDesign.fit(X, cols)
    a, b, c = design.steps
    assert a.median == 3.0 and a.indicator
    imputed = np.array([1.0, 3.0, 3.0, 10.0])
    assert a.mean == pytest.approx(imputed.mean()) and a.std == pytest.approx(imputed.std())
    assert b.median == 1.0 and not b.indicator  # indicators are for numeric columns only
    assert c.median == 0.0 and c.std == 1.0  # all-NaN column: imputes 0, zero std becomes 1
    out = design.transform(X)
    assert design.feature_groups() == [0, 0, 1, 2, 2]
    np.testing.assert_array_equal(out[:, 1], [0, 1, 0, 0])
    np.testing.assert_array_equal(out[:, 3], 0.0)
    np.testing.assert_array_equal(out[:, 4], 1.0)
    assert np.isfinite(out).all()


def test_design_one_hot_over_seen_codes_unseen_and_missing_are_zeros():
    cols = (ColumnInfo("c", "categorical", "object", ("a", "b", "c", "d")),)
    design = LinearDesign.fit(np.array([[0.0], [2.0], [np.nan], [2.0]]), cols)
    rows = np.array([[0.0], [2.0], [1.0], [3.0], [np.nan]])
    np.testing.assert_array_equal(design.transform(rows), [[1, 0], [0, 1], [0, 0], [0, 0], [0, 0]])
    assert design.unseen_levels(rows) == 2
    assert design.feature_groups() == [0, 0]


def test_design_dict_round_trips_exactly_through_json(mixed):
    X, _, cols = mixed
    X = X.copy()
    X[:, 0] *= np.pi  # values with long binary expansions
    design = LinearDesign.fit(X, cols)
    again = LinearDesign.from_dict(json.loads(json.dumps(design.to_dict())))
    assert again.steps == design.steps
    np.testing.assert_array_equal(again.transform(X), design.transform(X))


# --- linear, ridge, lasso -----------------------------------------------------------------


def test_linear_on_diabetes_equals_least_squares(diabetes):
    X, y = diabetes
    model = fit(LINEAR, make_request(X, numeric_columns(10), y=y))
    output = model.predict(X)
    # references: scikit-learn's LinearRegression, numpy.linalg.lstsq with an intercept column
    np.testing.assert_allclose(output, LinearRegression().fit(X, y).predict(X), rtol=0, atol=1e-8)
    A = np.c_[X, np.ones(len(y))]
    np.testing.assert_allclose(output, A @ np.linalg.lstsq(A, y, rcond=None)[0], rtol=0, atol=1e-8)
    # in-sample R^2 of OLS on diabetes, computed with scikit-learn
    assert round(r2_score(y, output), 4) == 0.5177


def test_linear_folded_over_many_blocks_of_rows_equals_least_squares(diabetes, monkeypatch):
    # Blocks of 37 rows fold the 442 diabetes rows into R twelve times over; the solution must
    # not depend on the block size. References: scikit-learn's LinearRegression, numpy.linalg.lstsq.
    from stages.kinds import linear

    X, y = diabetes
    whole = fit(LINEAR, make_request(X, numeric_columns(10), y=y)).predict(X)
    monkeypatch.setattr(linear, "BLOCK_ROWS", 37)
    output = fit(LINEAR, make_request(X, numeric_columns(10), y=y)).predict(X)
    np.testing.assert_allclose(output, LinearRegression().fit(X, y).predict(X), rtol=0, atol=1e-8)
    A = np.c_[X, np.ones(len(y))]
    np.testing.assert_allclose(output, A @ np.linalg.lstsq(A, y, rcond=None)[0], rtol=0, atol=1e-8)
    np.testing.assert_allclose(output, whole, rtol=0, atol=1e-9)


@pytest.mark.parametrize(("kind", "reference"), [
    (RIDGE, Ridge(alpha=1.0)),
    (LASSO, Lasso(alpha=1.0)),
    (LASSO, Lasso(alpha=0.3, max_iter=5000, tol=1e-8)),
])
def test_penalised_kinds_equal_sklearn_on_standardised_features(diabetes, kind, reference):
    X, y = diabetes
    params = {k: v for k, v in reference.get_params().items() if k in kind.defaults}
    model = fit(kind, make_request(X, numeric_columns(10), y=y), **params)
    # reference: the scikit-learn estimator on StandardScaler output (the same design)
    expected = make_pipeline(StandardScaler(), reference).fit(X, y).predict(X)
    np.testing.assert_allclose(model.predict(X), expected, rtol=0, atol=1e-8)


def test_lasso_random_selection_draws_from_the_request_stream(diabetes):
    X, y = diabetes
    request = make_request(X, numeric_columns(10), y=y, seed=7)
    first = fit(LASSO, request, alpha=0.1, selection="random", tol=1e-3)
    assert request.random_state.randint(1 << 30) != np.random.RandomState(7).randint(1 << 30)  # drawn from
    again = fit(LASSO, make_request(X, numeric_columns(10), y=y, seed=7), alpha=0.1, selection="random", tol=1e-3)
    np.testing.assert_array_equal(first.coef, again.coef)
    # reference: scikit-learn's Lasso given the same RandomState
    ref = Lasso(alpha=0.1, selection="random", tol=1e-3, random_state=np.random.RandomState(7))
    ref.fit(StandardScaler().fit_transform(X), y)
    np.testing.assert_allclose(first.coef, ref.coef_, rtol=0, atol=1e-10)
    cyclic = make_request(X, numeric_columns(10), y=y, seed=3)
    fit(LASSO, cyclic, alpha=0.1)  # cyclic selection leaves the chain's stream untouched
    assert cyclic.random_state.randint(1 << 30) == np.random.RandomState(3).randint(1 << 30)


def test_linear_importance_is_abs_coef_summed_per_input_column(mixed):
    X, y, cols = mixed
    model = fit(LINEAR, make_request(X, cols, y=y))
    importance = LINEAR.importance(model, cols)
    groups = np.asarray(model.design.feature_groups())
    expected = [np.abs(model.coef[groups == j]).sum() for j in range(3)]
    np.testing.assert_allclose(importance, expected, rtol=1e-12)
    assert importance.shape == (3,) and (importance >= 0).all()


# --- logistic ------------------------------------------------------------------------------


@pytest.mark.parametrize(("features", "params", "C"), [
    (slice(None), {}, 1.0),
    (slice(None), {"C": 0.05}, 0.05),
    ([0, 1, 4, 8], {"penalty": None}, np.inf),
    ([0, 1, 4, 8], {"penalty": "none"}, np.inf),
])
def test_logistic_with_base_rate_offset_equals_sklearn(cancer, features, params, C):
    X, y = cancer
    X = X[:, features]
    loss = LogLoss()
    start = loss.start(y)
    assert start == pytest.approx(logit(y.mean()))
    request = make_request(X, numeric_columns(X.shape[1]), y=y, raw=np.full(len(y), start), loss=loss, task="binary")
    model = fit(LOGISTIC, request, **params)
    Z = StandardScaler().fit_transform(X)
    # reference: scikit-learn's LogisticRegression on StandardScaler output (same design, same
    # penalty; C=inf is its spelling of no penalty). Its Newton solver is used because its
    # lbfgs run stops ~3e-6 short of the optimum on these correlated features.
    ref = LogisticRegression(C=C, tol=1e-10, max_iter=10000, solver="newton-cholesky").fit(Z, y)
    np.testing.assert_allclose(start + model.predict(X), ref.decision_function(Z), rtol=0, atol=1e-6)
    lbfgs = LogisticRegression(C=C, tol=1e-10, max_iter=10000).fit(Z, y)
    np.testing.assert_allclose(start + model.predict(X), lbfgs.decision_function(Z), rtol=0, atol=1e-5)


def test_logistic_uses_the_offset_row_by_row(cancer):
    X, y = cancer
    X = X[:, :3]
    raw = np.where(np.arange(len(y)) % 2 == 0, 0.7, -0.4)
    request = make_request(X, numeric_columns(3), y=y, raw=raw, loss=LogLoss(), task="binary")
    z = fit(LOGISTIC, request).predict(X)
    # first-order optimality of the documented objective (intercept unpenalised): sum(y - p) = 0
    assert abs(np.sum(y - 1 / (1 + np.exp(-(raw + z))))) < 1e-6


def test_logistic_refuses_regression_chain_and_bad_penalty(cancer):
    X, y = cancer
    with pytest.raises(StageSpecError, match="kind 'logistic' is for binary and multiclass chains; "):
        fit(LOGISTIC, make_request(X[:, :2], numeric_columns(2), y=y))
    request = make_request(X[:, :2], numeric_columns(2), y=y, loss=LogLoss(), task="binary")
    with pytest.raises(StageSpecError, match="penalty"):
        fit(LOGISTIC, request, penalty="l1")
    with pytest.raises(StageSpecError, match="C must be"):
        fit(LOGISTIC, request, C=0)


# --- knn -----------------------------------------------------------------------------------


@pytest.mark.parametrize("params", [{}, {"n_neighbors": 5, "weights": "distance", "p": 1}])
def test_knn_equals_sklearn_pipeline(diabetes, params):
    X, y = diabetes
    model = fit(KNN, make_request(X, numeric_columns(10), y=y), **params)
    settings = {**KNN.defaults, **params}
    # reference: scikit-learn's Pipeline(StandardScaler, KNeighborsRegressor)
    expected = make_pipeline(StandardScaler(), KNeighborsRegressor(**settings)).fit(X, y).predict(X)
    np.testing.assert_allclose(model.predict(X), expected, rtol=0, atol=1e-10)


def test_knn_refuses_more_neighbours_than_rows():
    X = np.arange(6.0)[:, None]
    with pytest.raises(StageSpecError, match="n_neighbors=10 is more than the 6 train rows"):
        fit(KNN, make_request(X, numeric_columns(1), y=X[:, 0]))


def test_knn_artifact_with_object_array_is_refused(diabetes):
    X, y = diabetes
    artifact = KNN.save(fit(KNN, make_request(X[:50], numeric_columns(10), y=y[:50])))
    buffer = io.BytesIO()
    np.savez(buffer, matrix=np.array([object()], dtype=object), target=np.zeros(1))
    with pytest.raises(ChainFileError):
        KNN.load(Artifact("npz", buffer.getvalue(), artifact.meta))


# --- spline --------------------------------------------------------------------------------


@pytest.mark.parametrize(("n_knots", "degree", "knots"), [(6, 3, "quantile"), (4, 2, "uniform"), (8, 3, "uniform")])
def test_spline_basis_equals_spline_transformer(diabetes, n_knots, degree, knots):
    X, _ = diabetes
    design = SplineDesign.fit(X, numeric_columns(10), n_knots, degree, knots)
    reference = SplineTransformer(n_knots=n_knots, degree=degree, knots=knots, extrapolation="constant").fit(X)
    # reference: scikit-learn's SplineTransformer, in range and (constant) beyond it
    np.testing.assert_allclose(design.transform(X), reference.transform(X), rtol=0, atol=1e-10)
    outside = np.r_[X.min(axis=0) - 1.0, X.max(axis=0) + 1.0].reshape(2, 10)
    np.testing.assert_allclose(design.transform(outside), reference.transform(outside), rtol=0, atol=1e-10)


def test_spline_stage_equals_spline_ridge_pipeline(diabetes):
    X, y = diabetes
    model = fit(SPLINE, make_request(X, numeric_columns(10), y=y))
    # reference: scikit-learn's Pipeline(SplineTransformer, Ridge) with the same settings
    pipeline = make_pipeline(
        SplineTransformer(n_knots=6, degree=3, knots="quantile", extrapolation="constant"), Ridge(alpha=1.0)
    )
    np.testing.assert_allclose(model.predict(X), pipeline.fit(X, y).predict(X), rtol=0, atol=1e-8)


def test_spline_rejects_bad_knot_settings(diabetes):
    X, y = diabetes
    request = make_request(X, numeric_columns(10), y=y)
    for params, words in [({"n_knots": 1}, "n_knots"), ({"knots": "random"}, "knots"), ({"degree": -1}, "degree")]:
        with pytest.raises(StageSpecError, match=words):
            fit(SPLINE, request, **params)


# --- every kind ----------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ALL_KINDS, ids=kind_id)
def test_save_load_gives_bitwise_identical_predictions(mixed, kind):
    X, _, _ = mixed
    model = fit(kind, mixed_request(kind, mixed))
    artifact = kind.save(model)
    assert artifact.fmt == ("npz" if kind is KNN else "json")
    json.dumps(artifact.meta)  # meta must be JSON-ready for the manifest
    again = kind.load(Artifact(artifact.fmt, artifact.payload, json.loads(json.dumps(artifact.meta))))
    rows = np.r_[X, unseen_rows()]
    np.testing.assert_array_equal(again.predict(rows), model.predict(rows))


@pytest.mark.parametrize("kind", ALL_KINDS, ids=kind_id)
def test_unseen_levels_and_missing_values_give_finite_predictions(mixed, kind):
    X, _, cols = mixed
    model = fit(kind, mixed_request(kind, mixed))
    assert np.isfinite(model.predict(unseen_rows())).all()
    assert model.predict(X[:0]).shape == (0,)
    importance = kind.importance(model, cols)
    if importance is not None:
        assert importance.shape == (3,) and np.isfinite(importance).all()
    if kind is not KNN:  # an unseen level falls back to the base prediction (all-zero one-hot)
        unseen, missing = np.array([[0.5, 1.0, 3.0]]), np.array([[0.5, 1.0, np.nan]])
        np.testing.assert_array_equal(model.predict(unseen), model.predict(missing))


@pytest.mark.parametrize("kind", [*ALL_KINDS, "sklearn.svm.SVR"], ids=kind_id)
def test_unknown_param_names_kind_and_param(kind):
    kind = SklearnKind.for_path(kind) if isinstance(kind, str) else kind
    assert kind.summary and kind.main_params and set(kind.main_params) <= set(kind.defaults)
    with pytest.raises(StageSpecError, match=f"kind '{kind.name}' has no parameter 'n_estimatorz'"):
        kind.resolve_params({"n_estimatorz": 3}, "regression")


@pytest.mark.parametrize("kind", ALL_KINDS, ids=kind_id)
def test_zero_feature_columns_are_refused(kind):
    request = make_request(np.empty((10, 0)), (), y=np.arange(10.0) % 2, task="binary")
    with pytest.raises(StageSpecError, match="needs at least one feature column"):
        fit(kind, request)


def test_artifact_of_another_kind_is_refused(diabetes):
    X, y = diabetes
    artifact = RIDGE.save(fit(RIDGE, make_request(X, numeric_columns(10), y=y)))
    with pytest.raises(ChainFileError, match="written by kind 'ridge'"):
        LASSO.load(artifact)
    with pytest.raises(ChainFileError):
        LINEAR.load(Artifact("json", b"{not json"))


# --- sklearn:<module>.<Class> --------------------------------------------------------------


@pytest.mark.parametrize(("path", "words"), [
    ("os.system", "only scikit-learn regressors can be named by path; "),
    ("sklearn.svm.SVC", "is not a regressor"),
    ("sklearn.svm.NoSuchRegressor", "has no class 'NoSuchRegressor'"),
    ("sklearn.nowhere.SVR", "has no module 'sklearn.nowhere'"),
])
def test_sklearn_path_is_refused(path, words):
    with pytest.raises(StageSpecError, match=words):
        SklearnKind.for_path(path)


def test_sklearn_svr_equals_pipeline_and_round_trips_through_skops(diabetes):
    X, y = diabetes
    kind = SklearnKind.for_path("sklearn.svm.SVR")
    assert kind is SklearnKind.for_path("sklearn.svm.SVR")
    assert kind.name == "sklearn:sklearn.svm.SVR" and kind.summary == "any scikit-learn regressor, by import path"
    model = fit(kind, make_request(X, numeric_columns(10), y=y), C=10.0)
    # reference: scikit-learn's Pipeline(StandardScaler, SVR)
    expected = make_pipeline(StandardScaler(), SVR(C=10.0)).fit(X, y).predict(X)
    np.testing.assert_allclose(model.predict(X), expected, rtol=0, atol=1e-8)
    artifact = kind.save(model)
    assert artifact.fmt == "skops"
    again = kind.load(Artifact("skops", artifact.payload, json.loads(json.dumps(artifact.meta))))
    np.testing.assert_array_equal(again.predict(X), model.predict(X))


def test_sklearn_random_state_comes_from_the_stream(diabetes):
    X, y = diabetes
    kind = SklearnKind.for_path("sklearn.tree.ExtraTreeRegressor")
    first = fit(kind, make_request(X, numeric_columns(10), y=y, seed=5), max_depth=3)
    again = fit(kind, make_request(X, numeric_columns(10), y=y, seed=5), max_depth=3)
    other = fit(kind, make_request(X, numeric_columns(10), y=y, seed=6), max_depth=3)
    np.testing.assert_array_equal(first.predict(X), again.predict(X))
    assert not np.array_equal(first.predict(X), other.predict(X))
    assert first.estimator.random_state is None
    assert kind.importance(first, numeric_columns(10)).shape == (10,)


class Smuggled:
    """A type no trusted list names."""


def test_sklearn_payload_with_untrusted_type_is_refused_when_saved(diabetes):
    # a type outside the exact list could not be loaded back, so the file is never written
    X, y = diabetes
    kind = SklearnKind.for_path("sklearn.svm.SVR")
    model = fit(kind, make_request(X[:60], numeric_columns(10), y=y[:60]))
    model.estimator.smuggled_ = Smuggled()
    with pytest.raises(ChainFileError, match="Smuggled, a type remnant does not load"):
        kind.save(model)


def test_sklearn_payload_of_another_class_is_refused(diabetes):
    X, y = diabetes
    ridge = SklearnKind.for_path("sklearn.linear_model.Ridge")
    artifact = ridge.save(fit(ridge, make_request(X, numeric_columns(10), y=y)))
    with pytest.raises(ChainFileError, match="Ridge, a type that is not trusted"):
        SklearnKind.for_path("sklearn.svm.SVR").load(artifact)
