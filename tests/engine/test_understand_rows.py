"""The rows a chain gets most wrong, and the calibration of a binary chain (against scikit-learn)."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.calibration import calibration_curve
from understand_support import fair

import stages
from stages.errors import StageSpecError


@pytest.fixture(scope="module")
def affair_chain() -> stages.Chain:
    chain = stages.Chain(fair(), "affair", stages.Holdout(fraction=0.25, seed=2))
    chain.add("logistic")
    chain.add("tree", 0.3, params={"max_depth": 3})
    return chain


def test_the_largest_residuals_are_the_rows_furthest_from_their_prediction(diabetes_frame):
    frame = diabetes_frame.iloc[::-1].reset_index(drop=True)  # positions must come from the frame, not the order
    chain = stages.Chain(frame, "target", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 2})
    table = chain.largest_residuals(n=10)
    residuals = chain.residuals("valid")
    assert np.allclose(np.sort(np.abs(residuals))[::-1][:10], np.abs(table["residual"]))
    rows = frame.iloc[table["position"]]
    np.testing.assert_array_equal(table["actual"], rows["target"])
    np.testing.assert_allclose(table["fitted"], chain.predict(rows), rtol=0, atol=1e-9)
    np.testing.assert_allclose(table["residual"], rows["target"] - chain.predict(rows), rtol=0, atol=1e-9)
    np.testing.assert_allclose(table["residual_after_0"], rows["target"] - chain.starts[0], rtol=0, atol=1e-9)
    assert [c for c in table.columns if c.startswith("residual_after_")] == [f"residual_after_{k}" for k in range(3)]
    assert set(table["position"]) <= set(chain.split.valid)


def test_ids_name_the_rows_and_an_earlier_stage_can_be_asked_for(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", stages.Holdout(fraction=0.3, seed=0))
    chain.add("linear")
    chain.add("tree", params={"max_depth": 2})
    ids = np.array([f"P{i:03d}" for i in range(len(diabetes_frame))])
    table = chain.largest_residuals(n=5, upto=1, ids=ids, part="train")
    assert list(table["id"]) == [f"P{p:03d}" for p in table["position"]]
    assert list(table.columns[-2:]) == ["residual_after_0", "residual_after_1"]
    assert set(table["position"]) <= set(chain.split.train)


def test_a_binary_chain_shows_y_minus_p_and_a_loaded_chain_agrees_on_a_frame(affair_chain, tmp_path):
    table = affair_chain.largest_residuals(n=8)
    assert set(table["actual"]) <= {0.0, 1.0} and table["fitted"].between(0, 1).all()
    np.testing.assert_allclose(table["residual"], table["actual"] - table["fitted"], rtol=0, atol=1e-12)
    affair_chain.save(tmp_path / "a.chain")
    loaded = stages.load(tmp_path / "a.chain")
    frame = fair().iloc[affair_chain.split.valid].reset_index(drop=True)
    again = loaded.largest_residuals(frame, n=8)
    np.testing.assert_allclose(again["residual"], table["residual"], rtol=0, atol=1e-12)
    np.testing.assert_array_equal(affair_chain.split.valid[again["position"]], table["position"])


@pytest.mark.parametrize(("bins", "strategy"), [(10, "uniform"), (5, "uniform"), (8, "quantile")])
def test_calibration_equals_sklearns_calibration_curve_on_the_same_bins(affair_chain, bins, strategy):
    table = affair_chain.calibration(bins=bins, strategy=strategy)
    # reference: sklearn.calibration.calibration_curve (it leaves out empty bins)
    observed, predicted = calibration_curve(affair_chain.part_targets("valid"), affair_chain.fitted_values("valid"),
                                            n_bins=bins, strategy=strategy)
    filled = table[table["rows"] > 0]
    np.testing.assert_allclose(filled["observed"], observed, rtol=0, atol=1e-12)
    np.testing.assert_allclose(filled["predicted"], predicted, rtol=0, atol=1e-12)
    assert table["rows"].sum() == affair_chain.layout.n_valid and len(table) == bins


def test_a_loaded_chain_calibrates_on_a_frame_and_regression_chains_refuse(affair_chain, tmp_path, diabetes_frame):
    affair_chain.save(tmp_path / "a.chain")
    frame = fair().iloc[affair_chain.split.valid]
    loaded = stages.load(tmp_path / "a.chain").calibration(frame)
    np.testing.assert_allclose(loaded["observed"], affair_chain.calibration()["observed"], equal_nan=True)
    regression = stages.Chain(diabetes_frame, "target")
    with pytest.raises(StageSpecError, match="binary chains"):
        regression.calibration()
