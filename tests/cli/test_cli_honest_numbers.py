"""The command line on the issue's cases: k-NN predictions whatever the chunk size, one warning for
missing values the fitting rows never had, and `remnant show` saying level orders and steps.

Data: statsmodels' `fair` data (Fair 1978, Journal of Political Economy 86:45-61), read offline;
its features are whole or half numbers, so k-NN neighbours tie often.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

import stages

fair_data = pytest.importorskip("statsmodels.datasets.fair")


@pytest.fixture(scope="module")
def fair_chain(tmp_path_factory) -> tuple[pd.DataFrame, object]:
    """Return the fair data (with an ordered and a numeric-text category) and a saved chain file."""
    frame = fair_data.load_pandas().data
    frame["occupation"] = pd.Categorical(frame["occupation"].astype(int).astype(str),
                                         categories=["6", "5", "4", "3", "2", "1"], ordered=True)
    frame["schooling"] = frame["educ"].astype(int).astype(str)  # "9" ... "20": numbers as text
    chain = stages.Chain(frame, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7)
    chain.add("linear")
    chain.add("knn", 0.5)
    path = tmp_path_factory.mktemp("fair") / "fair.chain"
    chain.save(path)
    return frame, path


def test_knn_predictions_are_the_same_for_every_chunk_size(tmp_path, run, fair_chain):
    frame, path = fair_chain
    frame.iloc[:60].to_csv(tmp_path / "rows.csv", index=False)
    outputs = []
    for size in ("1", "3", "60"):
        status, out, err = run("predict", path, tmp_path / "rows.csv", "--chunk-rows", size)
        assert status == 0, err
        outputs.append(pd.read_csv(io.StringIO(out))["prediction"].to_numpy())
    assert np.array_equal(outputs[0], outputs[1]) and np.array_equal(outputs[0], outputs[2])
    # and the same as the Python API on all rows at once
    np.testing.assert_allclose(outputs[0], stages.load(path).predict(frame.iloc[:60]), rtol=1e-15)


def test_predict_warns_once_naming_columns_whose_missing_values_the_fit_never_saw(tmp_path, run, fair_chain):
    frame, path = fair_chain
    rows = frame.iloc[:40].copy()
    rows.loc[rows.index[::4], "yrs_married"] = np.nan
    rows.loc[rows.index[1], "age"] = np.nan
    rows.to_csv(tmp_path / "gaps.csv", index=False)
    status, out, err = run("predict", path, tmp_path / "gaps.csv", "--chunk-rows", "7")
    assert status == 0
    warned = [line for line in err.splitlines() if "had none in the fitting rows" in line]
    assert len(warned) == 1
    assert "'yrs_married': 10" in warned[0] and "'age': 1" in warned[0]
    assert len(pd.read_csv(io.StringIO(out))) == 40


def test_show_says_each_categorical_order_and_each_stage_step(run, fair_chain):
    _, path = fair_chain
    status, out, _ = run("show", path)
    assert status == 0
    occupation = next(line for line in out.splitlines() if line.startswith("occupation "))
    schooling = next(line for line in out.splitlines() if line.startswith("schooling "))
    assert "as the ordered Categorical" in occupation and "by value" in schooling
    assert "takes 6 (fitting median)" in next(line for line in out.splitlines() if line.startswith("yrs_married"))
    assert "step chosen by" in out and "cross-fit 5 folds" in out and "none (least squares)" in out
