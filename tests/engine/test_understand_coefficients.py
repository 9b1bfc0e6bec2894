"""Coefficients of linear stages on the features' own scale, checked against statsmodels' OLS and Logit."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from sklearn.datasets import load_diabetes
from sklearn.linear_model import Ridge
from sklearn.preprocessing import StandardScaler
from understand_support import fair, grunfeld

import stages
from stages.errors import StageSpecError


def ours_for(name: str, prefix: str) -> str:
    """Return our term name for a statsmodels parameter name."""
    if name in ("Intercept", "const"):
        return "intercept"
    if name.startswith(f"C({prefix})[T."):  # formula api: C(firm)[T.IBM]
        return f"{prefix} = {name[len(prefix) + 6:-1]}"
    if name.startswith(f"{prefix}_") and name[len(prefix) + 1:].isdigit():  # get_dummies: occupation_2
        return f"{prefix} = {name[len(prefix) + 1:]}"
    return name


def test_a_linear_stage_equals_statsmodels_ols_with_its_standard_errors():
    frame = grunfeld()
    chain = stages.Chain(frame, "invest", stages.Holdout(fraction=0.2, seed=1))
    chain.add("linear")
    table = chain.coefficients(1).set_index("term")
    # reference: statsmodels OLS on the same fitting rows, firm as treatment contrasts against its
    # first level (American Steel, also our reference). The stage fits y minus the start value, a
    # constant offset: only the intercept moves, by the start value; the standard errors do not.
    result = smf.ols("invest ~ value + capital + year + C(firm)", data=frame.iloc[chain.split.train]).fit()
    assert set(table.loc[table.feature == "firm", "reference"]) == {"American Steel"}
    for name in result.params.index:
        term = ours_for(name, "firm")
        shift = chain.starts[0] if term == "intercept" else 0.0
        assert table.loc[term, "coefficient"] + shift == pytest.approx(result.params[name], rel=1e-8, abs=1e-8)
        assert table.loc[term, "std_error"] == pytest.approx(result.bse[name], rel=1e-6)
        low, high = result.conf_int(alpha=0.05).loc[name]
        assert table.loc[term, "ci_low"] + shift == pytest.approx(low, rel=1e-6)
        assert table.loc[term, "ci_high"] + shift == pytest.approx(high, rel=1e-6)
    assert "conditional on the start value" in table.attrs["note"]


def test_an_unpenalised_logistic_stage_equals_statsmodels_logit_with_its_standard_errors():
    frame = fair()
    chain = stages.Chain(frame, "affair", stages.Holdout(fraction=0.2, seed=1))
    chain.add("logistic", params={"penalty": "none"})
    table = chain.coefficients(1).set_index("term")
    train = frame.iloc[chain.split.train]
    design = pd.get_dummies(train.drop(columns="affair"), columns=["occupation"], drop_first=True, dtype=float)
    # reference: statsmodels Logit (Newton) on the same fitting rows, with the start value's
    # log-odds as the offset the stage fits on; occupation against its first level, "1"
    result = sm.Logit(train["affair"].to_numpy(), sm.add_constant(design),
                      offset=np.full(len(train), chain.starts[0])).fit(method="newton", tol=1e-12, disp=0)
    for name in result.params.index:
        term = ours_for(name, "occupation")
        assert table.loc[term, "coefficient"] == pytest.approx(result.params[name], rel=1e-8, abs=1e-8)
        assert table.loc[term, "std_error"] == pytest.approx(result.bse[name], rel=1e-6)
        low, high = result.conf_int(alpha=0.05).loc[name]
        assert table.loc[term, "ci_low"] == pytest.approx(low, rel=1e-6)
        assert table.loc[term, "ci_high"] == pytest.approx(high, rel=1e-6)


def test_a_later_stage_is_conditional_on_the_stages_before_it():
    frame = grunfeld()
    chain = stages.Chain(frame, "invest", stages.Holdout(fraction=0.2, seed=1))
    chain.add("tree", params={"max_depth": 2})
    chain.add("linear", features=["value", "capital"])
    table = chain.coefficients(2).set_index("term")
    # reference: OLS of what is left after stage 1 (its output a fixed offset)
    train = frame.iloc[chain.split.train].assign(left=chain.residuals("train", 1))
    result = smf.ols("left ~ value + capital", data=train).fit()
    np.testing.assert_allclose(table.loc[["intercept", "value", "capital"], "coefficient"], result.params, rtol=1e-8)
    np.testing.assert_allclose(table.loc[["intercept", "value", "capital"], "std_error"], result.bse, rtol=1e-6)
    assert "conditional on stage 1" in table.attrs["note"]


def test_shrinkage_scales_the_coefficients_and_their_errors():
    frame = grunfeld()
    full = stages.Chain(frame, "invest", stages.Holdout(fraction=0.2, seed=1))
    full.add("linear")
    half = stages.Chain(frame, "invest", stages.Holdout(fraction=0.2, seed=1))
    half.add("linear", shrinkage=0.5)
    a, b = full.coefficients(1), half.coefficients(1)
    np.testing.assert_allclose(b["coefficient"], 0.5 * a["coefficient"], rtol=1e-12)
    np.testing.assert_allclose(b["std_error"].dropna(), 0.5 * a["std_error"].dropna(), rtol=1e-12)


def test_a_ridge_stage_gives_sklearn_ridge_coefficients_per_unit_and_no_errors():
    data = load_diabetes(as_frame=True).frame
    chain = stages.Chain(data, "target", stages.Holdout(fraction=0.2, seed=0))
    chain.add("ridge", params={"alpha": 3.0})
    table = chain.coefficients(1).set_index("term")
    train = data.iloc[chain.split.train]
    features = [c for c in data.columns if c != "target"]
    scaler = StandardScaler().fit(train[features])
    # reference: scikit-learn's Ridge on StandardScaler output; per unit means coef / scale
    ridge = Ridge(alpha=3.0).fit(scaler.transform(train[features]), train["target"] - chain.starts[0])
    np.testing.assert_allclose(table.loc[features, "coefficient"], ridge.coef_ / scaler.scale_, rtol=1e-8)
    assert table["std_error"].isna().all() and "penalised" in table.attrs["note"]


def test_the_terms_rebuild_the_stages_contribution_row_by_row(mixed_frame):
    chain = stages.Chain(mixed_frame, "y", stages.Holdout(fraction=0.25, seed=0))
    chain.add("linear", shrinkage=0.7)
    table = chain.coefficients(1, reference={"colour": "red"}).set_index("term")
    rows = mixed_frame.iloc[chain.split.valid]
    a = rows["a"].fillna(mixed_frame.iloc[chain.split.train]["a"].median())
    rebuilt = (table.loc["intercept", "coefficient"] + table.loc["a", "coefficient"] * a
               + table.loc["a is missing", "coefficient"] * rows["a"].isna()
               + table.loc["b", "coefficient"] * rows["b"] + table.loc["flag", "coefficient"] * rows["flag"]
               + sum(table.loc[f"colour = {c}", "coefficient"] * (rows["colour"] == c) for c in ("blue", "green")))
    contribution = chain.outputs(1)[0][chain.layout.valid, 0] - chain.starts[0]
    np.testing.assert_allclose(rebuilt, contribution, rtol=0, atol=1e-9)
    assert table.loc["colour = blue", "reference"] == "red"


def test_a_loaded_chain_has_the_same_coefficients_without_errors(tmp_path):
    chain = stages.Chain(grunfeld(), "invest", stages.Holdout(fraction=0.2, seed=1))
    chain.add("linear")
    chain.save(tmp_path / "g.chain")
    loaded = stages.load(tmp_path / "g.chain").coefficients(1)
    live = chain.coefficients(1)
    np.testing.assert_allclose(loaded["coefficient"], live["coefficient"], rtol=1e-12)
    assert loaded["std_error"].isna().all() and "train rows" in loaded.attrs["note"]


def test_coefficients_are_for_linear_kinds_and_splines_have_curves(mixed_frame):
    chain = stages.Chain(mixed_frame, "y", stages.Holdout(fraction=0.25, seed=0))
    chain.add("tree", params={"max_depth": 2})
    chain.add("spline", features=["b", "colour", "flag"])
    with pytest.raises(StageSpecError, match="coefficients are for linear"):
        chain.coefficients(1)
    with pytest.raises(StageSpecError, match=r"chain.curves\(2\)"):
        chain.coefficients(2)
    linear = stages.Chain(mixed_frame, "y", stages.Holdout(fraction=0.25, seed=0))
    linear.add("linear")
    with pytest.raises(StageSpecError, match="reference level 'purple'"):
        linear.coefficients(1, reference={"colour": "purple"})
    with pytest.raises(StageSpecError, match="'a' is not a categorical feature"):
        linear.coefficients(1, reference={"a": "x"})


def test_spline_curves_follow_the_stage_relative_to_the_median(mixed_frame):
    chain = stages.Chain(mixed_frame, "y", stages.Holdout(fraction=0.25, seed=0))
    chain.add("spline", shrinkage=0.5, features=["b", "colour", "flag"])
    curves = chain.curves(1)
    b = curves[curves.feature == "b"]
    stage = chain.stages[0]
    median = float(b["relative_to"].iloc[0])
    # one feature's curve is the stage's output along it with the others held: rebuild it
    grid = np.asarray(b["value"], dtype=float)
    X = np.zeros((len(grid), 3))
    X[:, 0] = grid
    held = np.zeros((1, 3))
    held[0, 0] = median
    expected = stage.scale * (stage.learners[0].predict(X) - stage.learners[0].predict(held))
    np.testing.assert_allclose(b["contribution"], expected, rtol=0, atol=1e-12)
    assert list(curves[curves.feature == "colour"]["value"]) == ["blue", "green", "red"]
    assert curves[curves.feature == "flag"]["value"].tolist() == [False, True]
    # the sine in b: the curve rises and falls over the range
    assert b["contribution"].max() - b["contribution"].min() > 0.5
