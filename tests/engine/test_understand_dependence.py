"""Partial dependence and individual curves, checked against scikit-learn's brute-force method."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.inspection import partial_dependence as sklearn_partial_dependence
from understand_support import fair, grunfeld

import stages
from stages.errors import StageSpecError
from stages.understand import individual_curves


@pytest.fixture(scope="module")
def investment_chain() -> stages.Chain:
    chain = stages.Chain(grunfeld(), "invest", stages.Holdout(fraction=0.2, seed=1))
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 3})
    chain.add("lightgbm", 0.5, params={"n_estimators": 20, "num_leaves": 7, "min_child_samples": 5})
    return chain


@pytest.fixture(scope="module")
def affair_chain() -> stages.Chain:
    chain = stages.Chain(fair(), "affair", stages.Holdout(fraction=0.2, seed=1))
    chain.add("logistic")
    chain.add("lightgbm", 0.5, params={"n_estimators": 20})
    return chain


def part_frame(chain: stages.Chain, frame, part: str):
    rows = chain.split.train if part == "train" else chain.split.valid
    return frame.iloc[rows][chain.schema.names].reset_index(drop=True)


@pytest.mark.parametrize("feature", ["value", "capital", "firm", "year"])
def test_one_feature_equals_sklearn_brute_partial_dependence(investment_chain, feature):
    ours = investment_chain.partial_dependence(feature)
    # reference: sklearn.inspection.partial_dependence(method="brute") on the chain as a
    # scikit-learn estimator, over the same rows (the fitting part) and the same grid
    reference = sklearn_partial_dependence(
        investment_chain.fitted().as_estimator(), part_frame(investment_chain, grunfeld(), "train"), [feature],
        method="brute", custom_values={feature: list(ours["feature"])}, kind="both")
    np.testing.assert_allclose(ours["average"], reference["average"][0], rtol=0, atol=1e-9)
    individual = reference["individual"][0]  # every row is an ICE row here (176 < 1,000)
    np.testing.assert_allclose(ours["ice_low"], np.percentile(individual, 10, axis=0), rtol=0, atol=1e-9)
    np.testing.assert_allclose(ours["ice_std"], np.std(individual, axis=0), rtol=0, atol=1e-9)
    assert (ours["rows"] == investment_chain.layout.n_train).all()


def test_two_features_equal_sklearn_on_the_product_grid(investment_chain):
    ours = investment_chain.partial_dependence(["value", "capital"])
    grids = [list(dict.fromkeys(ours["feature"])), list(dict.fromkeys(ours["feature_2"]))]
    assert len(ours) == len(grids[0]) * len(grids[1])
    # reference: sklearn's two-way brute partial dependence, rows in the same (first feature slower) order
    reference = sklearn_partial_dependence(
        investment_chain.fitted().as_estimator(), part_frame(investment_chain, grunfeld(), "train"),
        ["value", "capital"], method="brute", custom_values={"value": grids[0], "capital": grids[1]})
    np.testing.assert_allclose(ours["average"], reference["average"][0].ravel(), rtol=0, atol=1e-9)


def test_a_binary_chain_averages_probabilities_like_sklearn(affair_chain):
    ours = affair_chain.partial_dependence("age", part="valid")
    reference = sklearn_partial_dependence(
        affair_chain.fitted().as_estimator(), part_frame(affair_chain, fair(), "valid"), ["age"],
        method="brute", custom_values={"age": list(ours["feature"])})
    np.testing.assert_allclose(ours["average"], reference["average"][0], rtol=0, atol=1e-9)
    assert ours["average"].between(0, 1).all()


def test_one_stage_alone_is_the_difference_of_the_chain_before_and_after_it(investment_chain):
    # for squared loss the prediction is the sum of contributions, so averaging commutes with it
    alone = investment_chain.partial_dependence("value", stage=2)
    after = investment_chain.partial_dependence("value", upto=2)
    before = investment_chain.partial_dependence("value", upto=1)
    np.testing.assert_allclose(alone["average"], after["average"] - before["average"], rtol=0, atol=1e-9)
    assert alone.attrs["what"] == "stage" and after.attrs["what"] == "upto"


def test_the_grid_is_quantiles_or_distinct_values_or_levels(investment_chain):
    value = investment_chain.partial_dependence("value")
    train = grunfeld().iloc[investment_chain.split.train]
    expected = np.unique(np.quantile(train["value"], np.linspace(0.05, 0.95, 20)))
    np.testing.assert_allclose(value["feature"], expected)
    assert list(investment_chain.partial_dependence("firm")["feature"]) == sorted(train["firm"].unique())
    year = investment_chain.partial_dependence("year")
    assert list(year["feature"]) == sorted(train["year"].unique())  # 20 years: every one of them
    chosen = investment_chain.partial_dependence("firm", grid=["IBM", "Chrysler"])
    assert list(chosen["feature"]) == ["IBM", "Chrysler"]
    with pytest.raises(StageSpecError, match="not a level"):
        investment_chain.partial_dependence("firm", grid=["Acme"])


def test_a_sample_bounds_the_rows_averaged_and_the_ice_rows(investment_chain):
    table = investment_chain.partial_dependence("value", sample=50, ice_rows=20)
    assert (table["rows"] == 50).all() and (table["ice_rows"] == 20).all()
    curves = individual_curves(investment_chain, "value", curves=5)
    assert curves["position"].nunique() == 5 and len(curves) == 5 * len(table)


def test_a_loaded_chain_gives_the_same_dependence_over_a_frame(investment_chain, tmp_path):
    investment_chain.save(tmp_path / "g.chain")
    loaded = stages.load(tmp_path / "g.chain")
    frame = part_frame(investment_chain, grunfeld(), "train")
    np.testing.assert_allclose(loaded.partial_dependence(frame, "capital")["average"],
                               investment_chain.partial_dependence("capital")["average"], rtol=0, atol=1e-9)


def test_bad_questions_are_refused_with_a_message(investment_chain):
    with pytest.raises(StageSpecError, match="not both"):
        investment_chain.partial_dependence("value", upto=1, stage=1)
    with pytest.raises(StageSpecError, match="no stage 9"):
        investment_chain.partial_dependence("value", stage=9)
    with pytest.raises(StageSpecError, match="must differ"):
        investment_chain.partial_dependence(["value", "value"])


@pytest.mark.parametrize("feature", ["value", "firm"])
def test_a_spline_stage_on_some_features_equals_sklearn_too(feature):
    # linear and spline stages are summed per column, and only the grid feature's part is
    # recomputed per grid value: the brute method must still agree
    chain = stages.Chain(grunfeld(), "invest", stages.Holdout(fraction=0.2, seed=1))
    chain.add("spline", features=["value", "firm", "year"])
    chain.add("ridge", 0.5, features=["capital", "firm"], params={"alpha": 2.0})
    ours = chain.partial_dependence(feature)
    reference = sklearn_partial_dependence(
        chain.fitted().as_estimator(), part_frame(chain, grunfeld(), "train"), [feature], method="brute",
        custom_values={feature: list(ours["feature"])})
    np.testing.assert_allclose(ours["average"], reference["average"][0], rtol=0, atol=1e-9)
