"""The residual scan: features ranked by the residual signal left in them, scored on rows it did not fit on."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import mean_squared_error

import stages
from stages.errors import StageSpecError


def one_signal_frame(n: int = 3000, seed: int = 0) -> pd.DataFrame:
    """Return numeric features x0..x5 and a category; only x3 carries anything a line cannot draw."""
    rng = np.random.RandomState(seed)
    frame = pd.DataFrame({f"x{i}": rng.uniform(0, 1, n) for i in range(6)})
    frame["colour"] = rng.choice(["red", "green", "blue", "grey"], n)
    frame["y"] = (2 * frame.x0 + frame.x1 - frame.x2 + 3 * np.sin(2 * np.pi * frame.x3)
                  + (frame.colour == "red") * 1.5 + rng.normal(0, 0.5, n))
    return frame


def test_after_a_linear_stage_the_one_feature_that_carries_the_residual_ranks_first():
    chain = stages.Chain(one_signal_frame(), "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear")
    scan = chain.residual_scan()
    assert scan.loc[0, "feature"] == "x3" and bool(scan.loc[0, "stands_out"])
    assert not scan.loc[1:, "stands_out"].any()
    assert scan.loc[0, "share"] > 0.5  # most of what is left is the sine the line could not draw
    assert list(scan["score"]) == sorted(scan["score"], reverse=True)


def test_a_category_the_chain_has_not_used_ranks_first_with_one_bin_per_level():
    frame = one_signal_frame()
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear", features=["x0", "x1", "x2"])
    chain.add("spline", features=["x3"])
    scan = chain.residual_scan()
    assert scan.loc[0, "feature"] == "colour" and bool(scan.loc[0, "stands_out"])
    row = scan.loc[0]
    assert row["bin_labels"] == ("blue", "green", "grey", "red", "missing")
    assert row["bin_rows"][-1] == 0 and sum(row["bin_rows"]) == row["scored_rows"] == chain.layout.n_valid


def test_on_pure_noise_no_feature_stands_out_beyond_its_noise_band():
    rng = np.random.RandomState(3)
    n = 2000
    frame = pd.DataFrame({f"x{i}": rng.normal(size=n) for i in range(6)})
    frame["k"] = rng.randint(0, 12, n)
    frame["c"] = rng.choice(list("abcde"), n)
    frame["y"] = frame.x0 + rng.normal(size=n)  # after the linear stage, only noise is left
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.3, seed=3), seed=3)
    chain.add("linear")
    scan = chain.residual_scan()
    assert not scan["stands_out"].any() and not scan["spread_stands_out"].any()
    assert (scan["score"] <= scan["band"]).all()


def test_the_score_is_the_fall_in_validation_mse_of_a_binned_mean_fit_on_the_fitting_rows():
    frame = one_signal_frame()
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear", features=["x0"])
    scan = chain.residual_scan().set_index("feature")
    # reference: pandas group means of the fitting rows' residuals per colour, scored with
    # scikit-learn's mean_squared_error on the validation rows
    fit_rows, valid_rows = frame.iloc[chain.split.train], frame.iloc[chain.split.valid]
    fit_residual = chain.residuals("train", 1)
    valid_residual = chain.residuals("valid", 1)
    means = pd.Series(fit_residual, index=fit_rows.index).groupby(fit_rows.colour).mean()
    binned = valid_rows.colour.map(means).to_numpy()
    expected = mean_squared_error(valid_residual, np.zeros_like(valid_residual)) - mean_squared_error(valid_residual, binned)
    assert scan.loc["colour", "score"] == pytest.approx(expected, rel=1e-10)


def test_noise_that_widens_along_a_feature_shows_in_the_spread_score():
    rng = np.random.RandomState(5)
    n = 4000
    frame = pd.DataFrame({f"x{i}": rng.uniform(0, 10, n) for i in range(4)})
    frame["y"] = frame.x0 + rng.normal(size=n) * (0.2 + 0.3 * frame.x2)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear")
    scan = chain.residual_scan().sort_values("spread_score", ascending=False).reset_index(drop=True)
    assert scan.loc[0, "feature"] == "x2" and bool(scan.loc[0, "spread_stands_out"])
    assert not scan.loc[1:, "spread_stands_out"].any()


def test_a_kfold_chain_is_scanned_out_of_fold():
    chain = stages.Chain(one_signal_frame(n=1500), "y", stages.KFold(folds=3, seed=0))
    chain.add("linear")
    scan = chain.residual_scan()
    assert scan.loc[0, "feature"] == "x3" and bool(scan.loc[0, "stands_out"])
    assert scan.loc[0, "scored_rows"] == chain.layout.n_train  # every row, each out of its fold
    assert scan.loc[0, "fit_rows"] == 2 * chain.layout.n_train  # each row fits two of the three folds


def test_a_binary_chain_is_scanned_on_y_minus_p():
    frame = one_signal_frame(n=3000)
    frame["y"] = (frame["y"] > frame["y"].median()).astype(int)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("logistic")
    scan = chain.residual_scan()
    assert scan.loc[0, "feature"] == "x3" and bool(scan.loc[0, "stands_out"])


def test_the_scan_never_scores_the_rows_it_fit_on_and_the_test_part_waits_for_a_reveal():
    chain = stages.Chain(one_signal_frame(n=600), "y", stages.Holdout(fraction=0.3, seed=0, test_fraction=0.2))
    chain.add("linear")
    with pytest.raises(StageSpecError, match="did not fit on"):
        chain.residual_scan(part="train")
    with pytest.raises(StageSpecError, match="locked"):
        chain.residual_scan(part="test")
    chain.reveal_test()
    assert chain.residual_scan(part="test").loc[0, "scored_rows"] == chain.layout.n_test
    every_row = stages.Chain(one_signal_frame(n=300), "y", stages.AllRows())
    with pytest.raises(StageSpecError, match="no validation part"):
        every_row.residual_scan()


def test_a_sample_bounds_the_rows_and_says_how_many_were_used():
    chain = stages.Chain(one_signal_frame(), "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear")
    scan = chain.residual_scan(sample=500)
    assert (scan["fit_rows"] == 500).all() and (scan["scored_rows"] == 500).all()
    assert scan.loc[0, "feature"] == "x3"


def test_the_scan_is_cached_per_chain_state_and_follows_the_chain():
    chain = stages.Chain(one_signal_frame(n=800), "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear")
    first = chain.residual_scan()
    first.loc[0, "score"] = -1.0  # a caller's edit does not reach the cache
    again = chain.residual_scan()
    assert again.loc[0, "score"] > 0 and again.equals(chain.residual_scan())
    chain.add("spline", features=["x3"])
    after_spline = chain.residual_scan().set_index("feature")
    assert after_spline.loc["x3", "score"] < 0.5 * again.set_index("feature").loc["x3", "score"]
    assert chain.residual_scan(upto=1).equals(again)  # the earlier state is still asked for by row
    chain.step_back()
    assert chain.residual_scan().equals(again)


def test_binned_residuals_share_the_scans_bins_and_show_any_part():
    chain = stages.Chain(one_signal_frame(), "y", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear")
    scan = chain.residual_scan().set_index("feature")
    table = chain.binned_residuals("x3")
    assert tuple(table["bin"]) == scan.loc["x3", "bin_labels"]
    assert tuple(table["rows"]) == scan.loc["x3", "bin_rows"]
    np.testing.assert_allclose(table["mean_residual"].fillna(0), scan.loc["x3", "bin_mean"], atol=1e-12)
    train = chain.binned_residuals("x3", part="train")
    assert train["rows"].sum() == chain.layout.n_train
    # the fitting rows' residuals are the train part's: their bin means agree
    np.testing.assert_allclose(train["mean_residual"].dropna(), train["fit_mean"].dropna(), atol=1e-12)
    # the sine's shape: positive residuals near x = 0.25, negative near 0.75
    inside = table.dropna(subset=["value"])
    assert inside.loc[(inside.value - 0.25).abs().idxmin(), "mean_residual"] > 1
    assert inside.loc[(inside.value - 0.75).abs().idxmin(), "mean_residual"] < -1
    with pytest.raises(StageSpecError, match="not one of the chain's features"):
        chain.binned_residuals("nope")
