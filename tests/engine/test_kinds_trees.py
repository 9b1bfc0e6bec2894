"""The forest, extra_trees, lightgbm and hist_tree kinds, checked against scikit-learn and LightGBM."""

from __future__ import annotations

import io
import json
import threading
import zipfile

import lightgbm
import numpy as np
import pytest
from scipy.special import expit
from sklearn.datasets import load_breast_cancer, load_diabetes, make_friedman1
from sklearn.ensemble import ExtraTreesRegressor, RandomForestRegressor
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.model_selection import train_test_split
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from stages.errors import ChainFileError, FitCancelled, StageSpecError
from stages.kinds import forest as forest_module
from stages.kinds.base import Artifact, FitRequest
from stages.kinds.forest import ExtraTreesKind, RandomForestKind
from stages.kinds.hist_tree import HistTreeKind
from stages.kinds.lightgbm_stage import REFUSED, LightGBMKind
from stages.kinds.tree import TreeKind
from stages.losses import AbsoluteLoss, HuberLoss, LogLoss, SquaredLoss
from stages.schema import ColumnInfo

# the parameters every lightgbm reference run below shares with the stage's defaults
LGB_BASE = {"verbosity": -1, "deterministic": True, "force_row_wise": True}


def numeric_columns(n: int) -> tuple[ColumnInfo, ...]:
    return tuple(ColumnInfo(f"x{i}", "numeric", "float64") for i in range(n))


def make_request(X, y, *, raw=None, loss=None, task="regression", seed=0, columns=None,
                 cancel=None, progress=None) -> FitRequest:
    """Return a FitRequest as the chain builds it: residuals of ``loss`` at ``raw`` (its start value by default)."""
    loss = loss or (LogLoss() if task == "binary" else SquaredLoss())
    raw = np.full(len(y), loss.start(y)) if raw is None else np.asarray(raw, dtype=np.float64)
    return FitRequest(
        X=np.asarray(X, dtype=np.float64), columns=columns or numeric_columns(X.shape[1]),
        residual=loss.residual(y, raw), y=y, raw=raw, loss=loss, task=task,
        random_state=np.random.RandomState(seed), cancel=cancel, progress=progress,
    )


def stage_seed(seed: int = 0) -> int:
    """Return the LightGBM seed a booster stage draws first from a stream seeded with ``seed``."""
    return int(np.random.RandomState(seed).randint(0, 2**31 - 1))


@pytest.fixture(scope="module")
def diabetes():
    return load_diabetes(return_X_y=True)


@pytest.fixture(scope="module")
def cancer():
    return load_breast_cancer(return_X_y=True)


# ---------------------------------------------------------------- forest, extra_trees


@pytest.mark.parametrize(("kind", "reference"), [(RandomForestKind(), RandomForestRegressor),
                                                 (ExtraTreesKind(), ExtraTreesRegressor)])
def test_forest_stage_equals_sklearn_forest_given_the_same_random_state(diabetes, kind, reference):
    X, y = diabetes
    request = make_request(X, y)
    learner = kind.fit(request, kind.resolve_params({"n_estimators": 15}, "regression"))
    # scikit-learn reference: the same estimator, same parameters, a RandomState(0) object as the chain passes
    expected = reference(n_estimators=15, max_features=1 / 3, min_samples_leaf=5,
                         bootstrap=kind.name == "forest", random_state=np.random.RandomState(0))
    expected.fit(X, y - y.mean())
    assert np.array_equal(learner.predict(X), expected.predict(X))


def test_forest_defaults_follow_random_forest_conventions_per_task():
    # randomForest (Liaw & Wiener 2002): mtry = p/3 and nodesize 5 for regression, sqrt(p) for classification
    regression = RandomForestKind().resolve_params({}, "regression")
    binary = RandomForestKind().resolve_params({}, "binary")
    assert (regression["max_features"], regression["min_samples_leaf"]) == (1 / 3, 5)
    assert (binary["max_features"], binary["min_samples_leaf"]) == ("sqrt", 1)
    assert regression["bootstrap"] is True
    assert ExtraTreesKind().resolve_params({}, "regression")["bootstrap"] is False
    assert regression["n_estimators"] == 100 and regression["max_depth"] is None


def test_forest_tries_floor_p_over_3_features_for_regression_and_floor_sqrt_p_for_binary():
    rng = np.random.RandomState(1)
    X = rng.normal(size=(60, 30))
    y = (X[:, 0] > 0).astype(float)
    kind = RandomForestKind()
    tried = {}
    for task in ("regression", "binary"):
        learner = kind.fit(make_request(X, y, task=task), kind.resolve_params({"n_estimators": 2}, task))
        tried[task] = learner.estimators_[0].max_features_
    # randomForest's mtry: floor(30 / 3) = 10 and floor(sqrt(30)) = 5
    assert tried == {"regression": 10, "binary": 5}


def test_forest_defaults_list_every_constructor_parameter_but_random_state():
    for kind, estimator in ((RandomForestKind(), RandomForestRegressor()), (ExtraTreesKind(), ExtraTreesRegressor())):
        assert set(kind.defaults) == set(estimator.get_params()) - {"random_state"}
        sklearn_defaults = estimator.get_params()
        for name in set(kind.defaults) - {"max_features", "min_samples_leaf", "bootstrap"}:
            assert kind.defaults[name] == sklearn_defaults[name], name


def test_forest_refuses_random_state_and_points_to_the_chain_seed():
    with pytest.raises(StageSpecError, match="kind 'forest' does not take 'random_state'.*seed"):
        RandomForestKind().resolve_params({"random_state": 3}, "regression")


@pytest.mark.parametrize("kind", [RandomForestKind(), ExtraTreesKind()])
def test_forest_fits_and_predicts_rows_with_missing_values(diabetes, kind):
    X, y = diabetes
    X = X.copy()
    X[::5, 2] = np.nan
    learner = kind.fit(make_request(X, y), kind.resolve_params({"n_estimators": 5}, "regression"))
    assert np.isfinite(learner.predict(X)).all()


@pytest.mark.parametrize(("kind", "reference"), [(RandomForestKind(), RandomForestRegressor),
                                                 (ExtraTreesKind(), ExtraTreesRegressor)])
def test_a_forest_grown_a_tree_at_a_time_is_the_forest_of_one_fit(diabetes, kind, reference, monkeypatch):
    monkeypatch.setattr(forest_module, "BATCH_SECONDS", 0.0)  # every batch one tree: the most warm starts
    X, y = diabetes
    X = X.copy()
    X[::7, 3] = np.nan
    calls = []
    request = make_request(X, y, progress=lambda f, m: calls.append((f, m)))
    learner = kind.fit(request, kind.resolve_params({"n_estimators": 12}, "regression"))
    # scikit-learn reference: one fit of the same estimator from a RandomState(0) object
    stream = np.random.RandomState(0)
    expected = reference(n_estimators=12, max_features=1 / 3, min_samples_leaf=5,
                         bootstrap=kind.name == "forest", random_state=stream)
    expected.fit(X, y - y.mean())
    assert np.array_equal(learner.predict(X), expected.predict(X))
    assert [t.random_state for t in learner.estimators_] == [t.random_state for t in expected.estimators_]
    # the chain's stream is left where the single fit leaves it, so the next stage draws the same
    assert request.random_state.randint(2**31 - 1) == stream.randint(2**31 - 1)
    assert learner.get_params()["warm_start"] is False and len(learner.estimators_) == 12
    assert [f for f, _ in calls] == [i / 12 for i in range(13)] and calls[-1][1] == "12/12 trees"


def test_a_cancel_between_batches_of_trees_stops_the_forest(diabetes, monkeypatch):
    monkeypatch.setattr(forest_module, "BATCH_SECONDS", 0.0)
    X, y = diabetes
    cancel = threading.Event()

    def progress(fraction, message):
        if fraction >= 0.25:
            cancel.set()

    kind = RandomForestKind()
    with pytest.raises(FitCancelled):
        kind.fit(make_request(X, y, cancel=cancel, progress=progress),
                 kind.resolve_params({"n_estimators": 400}, "regression"))


@pytest.mark.parametrize("kind", [RandomForestKind(), ExtraTreesKind()])
def test_forest_skops_round_trip_predicts_identically(diabetes, kind):
    X, y = diabetes
    learner = kind.fit(make_request(X, y), kind.resolve_params({"n_estimators": 5}, "regression"))
    before = learner.predict(X)
    artifact = kind.save(learner)
    assert artifact.fmt == "skops"
    loaded = kind.load(Artifact(artifact.fmt, artifact.payload, artifact.meta))
    assert np.array_equal(loaded.predict(X), before)
    # scikit-learn reference: impurity importances, which sum to 1
    assert np.array_equal(kind.importance(loaded, numeric_columns(X.shape[1])), learner.feature_importances_)
    assert kind.importance(loaded, ()).sum() == pytest.approx(1.0)


def _rewrite_schema(payload: bytes, old: str, new: str) -> bytes:
    source = zipfile.ZipFile(io.BytesIO(payload))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w") as target:
        for name in source.namelist():
            data = source.read(name)
            if name == "schema.json":
                text = json.dumps(json.loads(data))
                assert old in text
                data = text.replace(old, new, 1).encode()
            target.writestr(name, data)
    return out.getvalue()


def test_tampered_skops_payload_with_an_untrusted_type_raises_chain_file_error(diabetes):
    X, y = diabetes
    kind = RandomForestKind()
    artifact = kind.save(kind.fit(make_request(X, y), kind.resolve_params({"n_estimators": 2}, "regression")))
    tampered = _rewrite_schema(
        artifact.payload,
        '"__class__": "RandomForestRegressor", "__module__": "sklearn.ensemble._forest"',
        '"__class__": "Popen", "__module__": "subprocess"',
    )
    with pytest.raises(ChainFileError, match="not trusted: subprocess.Popen"):
        kind.load(Artifact("skops", tampered))


def test_forest_artifact_holding_another_estimator_is_refused(diabetes):
    X, y = diabetes
    tree = TreeKind()
    artifact = tree.save(tree.fit(make_request(X, y), tree.resolve_params({}, "regression")))
    with pytest.raises(ChainFileError, match="not a forest"):
        RandomForestKind().load(artifact)


@pytest.mark.parametrize("kind", [RandomForestKind(), ExtraTreesKind(), LightGBMKind(), HistTreeKind()])
def test_unknown_parameter_error_names_kind_and_parameter(kind):
    with pytest.raises(StageSpecError, match=f"kind '{kind.name}' has no parameter 'bogus_depth'"):
        kind.resolve_params({"bogus_depth": 3}, "regression")


# ---------------------------------------------------------------- lightgbm


def test_lightgbm_stage_after_linear_offset_equals_lightgbm_with_init_score(diabetes):
    X, y = diabetes
    raw = LinearRegression().fit(X, y).predict(X)
    kind = LightGBMKind()
    learner = kind.fit(make_request(X, y, raw=raw), kind.resolve_params({"n_estimators": 40}, "regression"))
    # LightGBM reference: its own defaults, started from the same init_score
    params = {"objective": "regression", "learning_rate": 0.1, "num_leaves": 31, "min_data_in_leaf": 20,
              "seed": stage_seed(), **LGB_BASE}
    booster = lightgbm.train(params, lightgbm.Dataset(X, label=y, init_score=raw), num_boost_round=40)
    np.testing.assert_allclose(raw + learner.predict(X), raw + booster.predict(X, raw_score=True), rtol=0, atol=1e-6)
    # the stage improved on its offset (it fit the target from there, not from zero)
    assert np.mean((y - raw - learner.predict(X)) ** 2) < np.mean((y - raw) ** 2)


def test_lightgbm_stage_with_log_loss_equals_lightgbm_binary_from_log_odds(cancer):
    X, y = cancer
    y = y.astype(np.float64)
    offset = make_pipeline(StandardScaler(), LogisticRegression(C=0.01)).fit(X, y).decision_function(X)
    kind = LightGBMKind()
    learner = kind.fit(make_request(X, y, raw=offset, task="binary"), kind.resolve_params({"n_estimators": 25}, "binary"))
    # LightGBM reference: binary objective from the same log-odds init_score
    params = {"objective": "binary", "seed": stage_seed(), **LGB_BASE}
    booster = lightgbm.train(params, lightgbm.Dataset(X, label=y, init_score=offset), num_boost_round=25)
    np.testing.assert_allclose(offset + learner.predict(X), offset + booster.predict(X, raw_score=True), rtol=0, atol=1e-6)
    # booster.predict without raw_score is the probability of the model without its init score
    np.testing.assert_allclose(expit(learner.predict(X)), booster.predict(X), atol=1e-9)


def test_lightgbm_stage_with_huber_loss_passes_the_current_delta_as_alpha(diabetes):
    X, y = diabetes
    loss = HuberLoss(alpha=0.8)
    request = make_request(X, y, loss=loss)
    kind = LightGBMKind()
    learner = kind.fit(request, kind.resolve_params({"n_estimators": 10}, "regression"))
    delta = loss.delta(y, request.raw)
    assert learner.params["alpha"] == delta
    # LightGBM reference: huber objective with that delta
    params = {"objective": "huber", "alpha": delta, "seed": stage_seed(), **LGB_BASE}
    booster = lightgbm.train(params, lightgbm.Dataset(X, label=y, init_score=request.raw), num_boost_round=10)
    np.testing.assert_allclose(learner.predict(X), booster.predict(X, raw_score=True), atol=1e-6)


def test_lightgbm_scikit_learn_names_fit_like_lgbm_regressor(diabetes):
    X, y = diabetes
    raw = np.full(len(y), y.mean())
    names = {"n_estimators": 15, "subsample": 0.7, "subsample_freq": 1, "colsample_bytree": 0.8,
             "reg_alpha": 0.5, "reg_lambda": 2.0, "min_child_samples": 10, "min_split_gain": 0.01}
    kind = LightGBMKind()
    learner = kind.fit(make_request(X, y, raw=raw), kind.resolve_params(names, "regression"))
    # LightGBM reference: its scikit-learn API with the same names, seed and init_score
    model = lightgbm.LGBMRegressor(**names, random_state=stage_seed(), **LGB_BASE)
    model.fit(X, y, init_score=raw)
    np.testing.assert_allclose(learner.predict(X), model.predict(X, raw_score=True), atol=1e-6)


def test_lightgbm_accepts_or_explains_every_lgbm_regressor_parameter():
    kind = LightGBMKind()
    for name in lightgbm.LGBMRegressor().get_params():
        assert name in kind.accepted_params() or name in REFUSED, name
    with pytest.raises(StageSpecError, match="kind 'lightgbm' does not take 'objective'"):
        kind.resolve_params({"objective": "l2"}, "regression")


def test_lightgbm_resolves_to_native_names_and_refuses_two_names_for_one_parameter():
    kind = LightGBMKind()
    resolved = kind.resolve_params({"n_estimators": 7, "lambda_l2": 1.5, "n_jobs": 2}, "regression")
    assert resolved["num_boost_round"] == 7 and resolved["lambda_l2"] == 1.5 and resolved["num_threads"] == 2
    assert "n_estimators" not in resolved and "reg_lambda" not in resolved
    assert resolved["min_data_in_leaf"] == 20 and resolved["early_stopping_rounds"] is None
    assert kind.resolve_params(resolved, "regression") == resolved
    with pytest.raises(StageSpecError, match="'n_estimators' and 'num_boost_round' set the same parameter"):
        kind.resolve_params({"n_estimators": 5, "num_boost_round": 6}, "regression")


@pytest.mark.parametrize("bad", [{"early_stopping_rounds": 0}, {"validation_fraction": 1.5},
                                 {"importance_type": "cover"}])
def test_lightgbm_refuses_stage_values_it_cannot_use(bad):
    with pytest.raises(StageSpecError, match=f"kind 'lightgbm': {next(iter(bad))}"):
        LightGBMKind().resolve_params(bad, "regression")


def test_lightgbm_round_trip_is_bitwise_identical(diabetes):
    X, y = diabetes
    kind = LightGBMKind()
    learner = kind.fit(make_request(X, y), kind.resolve_params({"n_estimators": 20}, "regression"))
    artifact = kind.save(learner)
    assert artifact.fmt == "lgb"
    loaded = kind.load(Artifact(artifact.fmt, artifact.payload, artifact.meta))
    assert loaded.booster.model_to_string() == learner.booster.model_to_string()
    assert np.array_equal(loaded.predict(X), learner.predict(X))
    assert np.array_equal(kind.importance(loaded, ()), kind.importance(learner, ()))


def test_lightgbm_importance_is_the_gain_share_of_each_feature(diabetes):
    X, y = diabetes
    kind = LightGBMKind()
    learner = kind.fit(make_request(X, y), kind.resolve_params({"n_estimators": 10}, "regression"))
    gain = learner.booster.feature_importance(importance_type="gain")
    np.testing.assert_allclose(kind.importance(learner, ()), gain / gain.sum())


@pytest.mark.parametrize("payload", [b"not a model", b"\xff\xfe\x00"])
def test_damaged_lgb_payload_raises_chain_file_error(payload):
    with pytest.raises(ChainFileError, match="not a LightGBM model"):
        LightGBMKind().load(Artifact("lgb", payload))


def _split_kinds(booster) -> set[str]:
    found: set[str] = set()

    def walk(node):
        if "split_index" in node:
            found.add(node["decision_type"])
            walk(node["left_child"])
            walk(node["right_child"])

    for tree in booster.dump_model()["tree_info"]:
        walk(tree["tree_structure"])
    return found


def test_lightgbm_passes_category_codes_as_categorical_features():
    rng = np.random.RandomState(3)
    codes = rng.randint(0, 8, size=400).astype(np.float64)
    codes[::37] = np.nan
    effect = np.array([5.0, -3.0, 4.0, -6.0, 1.0, 6.0, -2.0, -5.0])  # not monotone in the code
    y = np.where(np.isnan(codes), 0.0, effect[np.nan_to_num(codes).astype(int)]) + rng.normal(scale=0.3, size=400)
    X = np.column_stack([codes, rng.normal(size=400)])
    categorical = (ColumnInfo("c", "categorical", "object", tuple("abcdefgh")), ColumnInfo("x", "numeric", "float64"))
    kind = LightGBMKind()
    params = kind.resolve_params({"n_estimators": 3}, "regression")
    as_category = kind.fit(make_request(X, y, columns=categorical), params)
    as_number = kind.fit(make_request(X, y, columns=numeric_columns(2)), params)
    # LightGBM's model dump marks a categorical split with decision_type "==" (and reports num_cat > 0)
    assert "==" in _split_kinds(as_category.booster)
    assert any(tree["num_cat"] > 0 for tree in as_category.booster.dump_model()["tree_info"])
    assert "==" not in _split_kinds(as_number.booster)


def test_cancel_during_a_lightgbm_fit_raises_fit_cancelled(diabetes):
    X, y = diabetes
    cancel = threading.Event()
    seen = []

    def progress(fraction, message):
        seen.append(fraction)
        if fraction >= 0.1:
            cancel.set()

    kind = LightGBMKind()
    with pytest.raises(FitCancelled):
        kind.fit(make_request(X, y, cancel=cancel, progress=progress), kind.resolve_params({"n_estimators": 200}, "regression"))
    assert max(seen) < 0.2


def test_lightgbm_progress_reports_rounds_about_fifty_times(diabetes):
    X, y = diabetes
    messages = []
    kind = LightGBMKind()
    kind.fit(make_request(X, y, progress=lambda f, m: messages.append((f, m))), kind.resolve_params({"n_estimators": 200}, "regression"))
    assert 40 <= len(messages) <= 52
    assert messages[-1] == (1.0, "round 200/200")


def test_early_stopping_holds_out_fitting_rows_and_stops_early_on_noise():
    rng = np.random.RandomState(7)
    X, y = rng.normal(size=(300, 5)), rng.normal(size=300)
    kind = LightGBMKind()
    params = kind.resolve_params({"n_estimators": 300, "early_stopping_rounds": 5, "validation_fraction": 0.2}, "regression")
    request = make_request(X, y)
    learner = kind.fit(request, params)
    assert learner.rounds < 50
    held = learner.held_out
    assert len(held) == 60 and held.min() >= 0 and held.max() < 300 and len(np.unique(held)) == 60
    # LightGBM reference: the same early stopping, run by hand on the request's own rows only
    kept = np.setdiff1d(np.arange(300), held)
    train = lightgbm.Dataset(X[kept], label=y[kept], init_score=request.raw[kept])
    valid = lightgbm.Dataset(X[held], label=y[held], init_score=request.raw[held], reference=train)
    booster = lightgbm.train(learner.params, train, num_boost_round=300, valid_sets=[valid],
                             callbacks=[lightgbm.early_stopping(5, verbose=False)])
    assert booster.best_iteration == learner.rounds
    np.testing.assert_allclose(learner.predict(X), booster.predict(X, raw_score=True), atol=1e-12)


def test_without_early_stopping_every_fitting_row_is_used(diabetes):
    X, y = diabetes
    kind = LightGBMKind()
    learner = kind.fit(make_request(X, y), kind.resolve_params({"n_estimators": 5}, "regression"))
    assert learner.held_out is None and learner.rounds == 5


# ---------------------------------------------------------------- hist_tree


def test_hist_tree_is_one_round_at_learning_rate_one_with_two_to_the_depth_leaves(diabetes):
    X, y = diabetes
    kind = HistTreeKind()
    learner = kind.fit(make_request(X, y), kind.resolve_params({"max_depth": 4}, "regression"))
    assert learner.params["num_leaves"] == 16 and learner.params["learning_rate"] == 1.0
    assert learner.booster.num_trees() == 1
    given = kind.fit(make_request(X, y), kind.resolve_params({"max_depth": 4, "num_leaves": 5}, "regression"))
    assert given.booster.dump_model()["tree_info"][0]["num_leaves"] <= 5
    with pytest.raises(StageSpecError, match="kind 'hist_tree' has no parameter 'n_estimators'"):
        kind.resolve_params({"n_estimators": 3}, "regression")


def _leaf_groups(learner, X):
    leaves = learner.booster.predict(X, pred_leaf=True).ravel()
    return [leaves == leaf for leaf in np.unique(leaves)]


@pytest.mark.parametrize("loss", [SquaredLoss(), AbsoluteLoss(), LogLoss()])
def test_hist_tree_leaves_take_the_loss_optimal_value(loss):
    X, y = make_friedman1(n_samples=600, noise=1.0, random_state=1)
    task = "binary" if isinstance(loss, LogLoss) else "regression"
    if task == "binary":
        y = (y > np.median(y)).astype(np.float64)
    request = make_request(X, y, loss=loss, task=task)
    kind = HistTreeKind()
    learner = kind.fit(request, kind.resolve_params({"max_depth": 3}, task))
    output = learner.predict(X)
    groups = _leaf_groups(learner, X)
    assert len(groups) > 2
    for rows in groups:
        residual, raw = request.residual[rows], request.raw[rows]
        if isinstance(loss, SquaredLoss):
            expected = residual.mean()  # least squares: the leaf mean (Friedman 2001, algorithm 2)
        elif isinstance(loss, AbsoluteLoss):
            expected = np.median(y[rows] - raw)  # least absolute deviation: the leaf median (algorithm 3)
        else:
            prob = expit(raw)
            expected = residual.sum() / (prob * (1 - prob)).sum()  # one Newton step (algorithm 5)
        # LightGBM keeps gradients in float32, so the leaves agree to about 1e-6
        np.testing.assert_allclose(output[rows], expected, rtol=1e-5, atol=1e-5)


def test_hist_tree_validation_error_is_within_five_per_cent_of_an_exact_tree():
    # Friedman #1 (Friedman 1991, Multivariate adaptive regression splines); measured: validation
    # RMSE 2.733 for hist_tree against 2.713 for the exact tree, both of depth 6 (0.7% apart)
    X, y = make_friedman1(n_samples=2000, noise=1.0, random_state=0)
    X_fit, X_valid, y_fit, y_valid = train_test_split(X, y, test_size=0.25, random_state=0)
    start = float(y_fit.mean())
    request = make_request(X_fit, y_fit, raw=np.full(len(y_fit), start))
    rmse = {}
    for kind in (HistTreeKind(), TreeKind()):
        learner = kind.fit(request, kind.resolve_params({"max_depth": 6}, "regression"))
        kind.refine(learner, request)
        rmse[kind.name] = float(np.sqrt(np.mean((y_valid - start - learner.predict(X_valid)) ** 2)))
    assert rmse["hist_tree"] <= 1.05 * rmse["tree"]
    assert rmse["hist_tree"] == pytest.approx(2.733, abs=0.01) and rmse["tree"] == pytest.approx(2.713, abs=0.01)


def test_hist_tree_round_trip_is_bitwise_identical(diabetes):
    X, y = diabetes
    kind = HistTreeKind()
    learner = kind.fit(make_request(X, y), kind.resolve_params({}, "regression"))
    artifact = kind.save(learner)
    loaded = kind.load(artifact)
    assert artifact.fmt == "lgb" and np.array_equal(loaded.predict(X), learner.predict(X))
