"""Row weights, exposure and the count losses inside the chain: bad inputs, refusals, and the glm's special cases."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.linear_model import LinearRegression, LogisticRegression

import stages
from stages.errors import DataError, StageSpecError


def _counts(n: int = 300, seed: int = 0) -> pd.DataFrame:
    rng = np.random.RandomState(seed)
    frame = pd.DataFrame(rng.normal(size=(n, 3)), columns=["a", "b", "c"])
    frame["months"] = rng.uniform(0.5, 3.0, size=n)
    frame["alarms"] = rng.poisson(frame["months"] * np.exp(0.4 * frame["a"]))
    frame["w"] = rng.uniform(0.5, 2.0, size=n)
    return frame


@pytest.mark.parametrize(("value", "words"), [
    (-1.0, "weight column 'w' is negative in row 5"),
    (np.nan, "weight column 'w' is missing or not a finite number in 1 row (first: row 5)"),
])
def test_a_bad_weight_is_an_error_naming_the_column_and_the_row(value, words):
    frame = _counts()
    frame.loc[4, "w"] = value
    with pytest.raises(DataError, match=words.replace("(", r"\(").replace(")", r"\)")):
        stages.Chain(frame, "alarms", loss="poisson", weight="w")


def test_weights_that_are_all_zero_are_an_error():
    frame = _counts()
    frame["w"] = 0.0
    with pytest.raises(DataError, match="weight column 'w' is zero in every row"):
        stages.Chain(frame, "alarms", loss="poisson", weight="w")


@pytest.mark.parametrize("value", [0.0, -2.0, np.nan])
def test_an_exposure_that_is_not_positive_is_an_error_naming_the_column_and_the_row(value):
    frame = _counts()
    frame.loc[9, "months"] = value
    with pytest.raises(DataError, match=r"exposure column 'months' must be a positive number; 1 row is not \(first: row 10"):
        stages.Chain(frame, "alarms", loss="poisson", exposure="months")


def test_an_exposure_needs_a_log_link_loss():
    with pytest.raises(StageSpecError, match="an exposure is for the log-link losses"):
        stages.Chain(_counts(), "alarms", loss="squared", exposure="months")


@pytest.mark.parametrize(("loss", "words"), [("poisson", "2 rows are negative"), ("tweedie", "2 rows are negative"),
                                             ("gamma", "3 rows are zero or negative")])
def test_a_target_the_loss_cannot_take_is_an_error_with_the_count_of_rows(loss, words):
    frame = _counts()
    frame["alarms"] = frame["alarms"].astype(float) + 0.5
    frame.loc[[1, 2], "alarms"] = -1.0
    if loss == "gamma":
        frame.loc[3, "alarms"] = 0.0
    with pytest.raises(DataError, match=f"target 'alarms': {words}"):
        stages.Chain(frame, "alarms", loss=loss)


@pytest.mark.parametrize("power", [1.0, 2.0, 0.5, "x"])
def test_a_tweedie_power_outside_one_to_two_is_refused(power):
    with pytest.raises(StageSpecError, match="power must be a number strictly between 1 and 2"):
        stages.Chain(_counts(), "alarms", loss="tweedie", power=power)


def test_a_kind_that_cannot_take_weights_is_refused_on_a_weighted_chain():
    chain = stages.Chain(_counts(), "alarms", loss="poisson", weight="w")
    with pytest.raises(StageSpecError, match="kind 'knn' cannot count rows by their weights"):
        chain.add("knn")
    assert len(chain) == 0
    chain.add("sklearn:sklearn.linear_model.Ridge")  # Ridge.fit takes sample_weight
    assert len(chain) == 1


def test_weight_and_exposure_columns_are_not_features():
    chain = stages.Chain(_counts(), "alarms", loss="poisson", weight="w", exposure="months")
    assert [c.name for c in chain.schema.columns] == ["a", "b", "c"]
    assert chain.describe()["weight"] == "w" and chain.describe()["exposure"] == "months"


def test_unit_weights_give_the_numbers_of_no_weights():
    frame = _counts()
    frame["one"] = 1.0
    plain = stages.Chain(frame.drop(columns="one"), "alarms", loss="poisson", exposure="months")
    weighted = stages.Chain(frame, "alarms", loss="poisson", exposure="months", weight="one")
    for chain in (plain, weighted):
        chain.add("glm")
        chain.add("tree", 0.1, repeat=5)
        chain.add("hist_tree", 0.1, params={"min_child_samples": 5})
    np.testing.assert_allclose(weighted.outputs()[0], plain.outputs()[0], rtol=1e-9, atol=1e-12)


def test_the_start_value_with_an_exposure_is_the_log_of_the_total_over_the_total_exposure():
    frame = _counts()
    chain = stages.Chain(frame, "alarms", loss="poisson", exposure="months", weight="w")
    train = chain.split.train
    w = frame["w"].to_numpy()[train]
    expected = np.log(np.sum(w * frame["alarms"].to_numpy()[train]) / np.sum(w * frame["months"].to_numpy()[train]))
    assert chain.starts[0][0] == pytest.approx(expected, rel=1e-12)


def test_a_squared_loss_glm_is_least_squares_with_weights():
    # Reference: sklearn.linear_model.LinearRegression with sample_weight, on the diabetes data
    # shipped with scikit-learn (Efron et al. 2004).
    X, y = load_diabetes(return_X_y=True)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(10)])
    frame["y"], frame["w"] = y, np.random.RandomState(0).uniform(0.2, 3, size=len(y))
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), weight="w")
    chain.add("glm")
    linear = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), weight="w")
    linear.add("linear")
    train = chain.split.train
    reference = LinearRegression().fit(X[train], y[train], sample_weight=frame["w"].to_numpy()[train])
    np.testing.assert_allclose(chain.predict(frame), reference.predict(X), rtol=1e-9)
    np.testing.assert_allclose(linear.predict(frame), reference.predict(X), rtol=1e-9)


def test_a_log_loss_glm_is_an_unpenalised_logistic_regression():
    # Reference: sklearn.linear_model.LogisticRegression(C=inf), unpenalised, breast cancer data shipped
    # with scikit-learn, on five of its features.
    data = load_breast_cancer()
    X, y = data.data[:, :5], data.target
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(5)])
    frame["y"] = y
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0))
    chain.add("glm")
    train = chain.split.train
    reference = LogisticRegression(C=np.inf, tol=1e-12, max_iter=10_000).fit(X[train], y[train])
    np.testing.assert_allclose(chain.fitted().predict_proba(frame)[:, 1], reference.predict_proba(X)[:, 1], atol=1e-6)


def test_a_glm_refuses_a_loss_it_does_not_take():
    frame = _counts()
    chain = stages.Chain(frame, "alarms", loss="absolute")
    with pytest.raises(StageSpecError, match="kind 'glm' takes the losses"):
        chain.add("glm")


def test_a_poisson_chain_of_every_kind_that_takes_weights_fits_and_predicts_rates():
    frame = _counts()
    chain = stages.Chain(frame, "alarms", loss="poisson", exposure="months", weight="w")
    chain.add("glm")
    for kind in ("mean", "linear", "ridge", "tree", "hist_tree", "lightgbm", "forest", "spline"):
        chain.add(kind, 0.5, params={"n_estimators": 10} if kind in ("lightgbm", "forest") else None)
    assert np.all(np.isfinite(chain.outputs()[0]))
    rate = chain.predict(frame)
    assert np.all(rate > 0)
    np.testing.assert_allclose(chain.fitted().predict(frame, exposure="months"), rate * frame["months"], rtol=1e-12)
    table = chain.table()
    assert "deviance" in chain.scores()[-1].valid and np.isfinite(chain.scores()[-1].valid["deviance"])
    assert len(table) == 10


def test_the_residual_histogram_of_a_weighted_chain_counts_weights():
    frame = _counts()
    chain = stages.Chain(frame, "alarms", loss="poisson", weight="w")
    chain.add("glm")
    counts, edges = chain.histogram()
    assert counts["train"].sum() == pytest.approx(frame["w"].to_numpy()[chain.split.train].sum(), rel=1e-12)
    assert counts["valid"].sum() == pytest.approx(frame["w"].to_numpy()[chain.split.valid].sum(), rel=1e-12)


def test_the_residuals_of_a_count_chain_are_deviance_residuals():
    # deviance residual: sign(y - mu) * sqrt(unit deviance) (McCullagh & Nelder 1989, section 2.4)
    frame = _counts()
    chain = stages.Chain(frame, "alarms", loss="poisson", exposure="months")
    chain.add("glm")
    y, mu = chain.part_targets("valid"), chain.fitted_values("valid")
    deviance = 2 * (np.where(y > 0, y * np.log(np.where(y > 0, y, 1) / mu), 0.0) - y + mu)
    np.testing.assert_allclose(chain.residuals("valid"), np.sign(y - mu) * np.sqrt(deviance), rtol=1e-10, atol=1e-12)
    assert chain.loss.residual_name == "deviance residual"


def test_the_scan_and_partial_dependence_of_a_count_chain_are_on_the_response_scale():
    frame = _counts(600)
    chain = stages.Chain(frame, "alarms", loss="poisson", exposure="months")
    chain.add("glm")
    binned = chain.binned_residuals("a")
    binned = binned[binned["rows"] > 0]
    y, mu = chain.part_targets("valid"), chain.fitted_values("valid")
    # the bins' mean residuals are y - mu: their row-weighted mean is the part's mean of y - mu
    assert np.average(binned["mean_residual"], weights=binned["rows"]) == pytest.approx(np.mean(y - mu), rel=1e-9)
    assert list(chain.residual_scan()["feature"])  # the scan runs on the response residuals
    # partial dependence averages the prediction, the mean per unit of exposure
    dependence = chain.partial_dependence("a", grid=[0.0, 1.0])
    train = frame.iloc[chain.split.train]
    for value, average in zip([0.0, 1.0], dependence["average"], strict=True):
        assert average == pytest.approx(np.mean(chain.predict(train.assign(a=value))), rel=1e-9)


def test_the_references_of_a_count_chain_take_its_exposure_and_weights():
    frame = _counts(600)
    chain = stages.Chain(frame, "alarms", loss="poisson", exposure="months", weight="w")
    references = chain.references(rounds=50).set_index("model")
    chain.add("glm")  # "linear alone" on the log link is the glm
    assert references.loc["linear alone", "valid_deviance"] == pytest.approx(chain.scores()[1].valid["deviance"], rel=1e-12)
    # reference: lightgbm.train(objective="poisson") from init_score = log(exposure), with the weights
    import lightgbm

    train, valid = chain.split.train, chain.split.valid
    X = frame[["a", "b", "c"]].to_numpy()
    offset = np.log(frame["months"].to_numpy())
    data = lightgbm.Dataset(X[train], frame["alarms"].to_numpy()[train], weight=frame["w"].to_numpy()[train],
                            init_score=offset[train])
    stop = lightgbm.Dataset(X[valid], frame["alarms"].to_numpy()[valid], weight=frame["w"].to_numpy()[valid],
                            init_score=offset[valid], reference=data)
    booster = lightgbm.train({"objective": "poisson", "seed": 0, "verbosity": -1, "deterministic": True,
                              "force_row_wise": True}, data, num_boost_round=50, valid_sets=[stop],
                             callbacks=[lightgbm.early_stopping(50, first_metric_only=True, verbose=False)])
    mu = np.exp(offset[valid] + booster.predict(X[valid], num_iteration=booster.best_iteration, raw_score=True))
    from sklearn.metrics import mean_poisson_deviance

    expected = mean_poisson_deviance(frame["alarms"].to_numpy()[valid], mu, sample_weight=frame["w"].to_numpy()[valid])
    assert references.loc["LightGBM, default parameters", "valid_deviance"] == pytest.approx(expected, rel=1e-9)


def test_weighted_logistic_stages_equal_logistic_regression_with_sample_weight():
    # Reference: sklearn.linear_model.LogisticRegression(C=inf).fit(sample_weight=...), unpenalised, on
    # five features of the breast cancer data and on two of the wine data (three cultivars, not
    # separable on alcohol and malic acid alone), both shipped with scikit-learn. The chain's
    # constant start is absorbed by the intercept.
    from sklearn.datasets import load_wine

    wine = load_wine()
    for X, y in ((load_breast_cancer().data[:, :5], load_breast_cancer().target), (wine.data[:, :2], wine.target)):
        frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
        frame["y"] = y if len(set(y)) == 2 else np.array(["a", "b", "c"])[y]
        w = np.random.RandomState(3).uniform(0.2, 3.0, size=len(y))
        frame["w"] = w
        chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), weight="w")
        chain.add("logistic", params={"penalty": "none"})
        train = chain.split.train
        reference = LogisticRegression(C=np.inf, tol=1e-12, max_iter=10_000).fit(X[train], y[train], sample_weight=w[train])
        ours = chain.fitted().predict_proba(frame)
        np.testing.assert_allclose(ours, reference.predict_proba(X), atol=1e-6)


def test_hist_tree_leaves_on_a_poisson_chain_are_newton_steps():
    # each leaf of a one-round LightGBM tree is -sum(w g) / sum(w h) over its rows (no damping, no
    # penalty): g = mu - y and h = mu of the half Poisson deviance (scikit-learn's HalfPoissonLoss)
    frame = _counts(500)
    chain = stages.Chain(frame, "alarms", loss="poisson", exposure="months", weight="w")
    chain.add("hist_tree", params={"min_child_samples": 20})
    learner = chain.stages[0].learners[0]
    fit = chain.layout.tracks[0].fit_positions()
    X, y, w = chain.matrix[fit], chain.y[fit], chain.weight[fit]
    mu = np.exp(chain.outputs(0)[0][fit, 0])
    leaves = learner.booster.predict(X, pred_leaf=True).ravel()
    values = learner.booster.predict(X, raw_score=True)
    for leaf in np.unique(leaves):
        rows = leaves == leaf
        newton = np.sum(w[rows] * (y[rows] - mu[rows])) / np.sum(w[rows] * mu[rows])
        assert values[rows][0] == pytest.approx(newton, rel=1e-6)
