"""`remnant predict --each-stage` (the prediction after each stage and the residual) and the
coefficients `remnant show` prints."""

from __future__ import annotations

import io
import re

import numpy as np
import pandas as pd
from cli_support import assert_one_error

import stages


def read(text: str) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(text))


def test_each_stage_writes_the_prediction_after_every_stage_and_the_residual(fitted_files, work, run):
    status, out, err = run("predict", fitted_files["regression"], "diabetes.csv", "--each-stage", "--id", "patient")
    assert status == 0, err
    result = read(out)
    assert list(result.columns) == ["patient", "prediction", "after_1", "after_2", "after_3", "residual"]
    frame = pd.read_csv(work / "diabetes.csv")
    fitted = stages.load(fitted_files["regression"])
    matrix = fitted.encode(frame)
    for k in (1, 2, 3):  # the chain's own prediction with its first k stages
        np.testing.assert_allclose(result[f"after_{k}"], fitted.raw_from_matrix(matrix, k)[:, 0], rtol=1e-15, atol=0)
    assert np.array_equal(result["after_3"], result["prediction"])
    np.testing.assert_allclose(result["residual"], frame["progression"] - result["prediction"], rtol=0, atol=1e-9)


def test_a_binary_chain_writes_probabilities_and_y_minus_p(fitted_files, work, run):
    status, out, err = run("predict", fitted_files["binary"], "cancer.csv", "--each-stage")
    assert status == 0, err
    result = read(out)
    assert list(result.columns) == ["prediction", "probability", "after_1", "after_2", "residual"]
    assert np.array_equal(result["after_2"], result["probability"])
    assert result["after_1"].between(0, 1).all()
    frame = pd.read_csv(work / "cancer.csv")
    np.testing.assert_allclose(result["residual"], frame["malignant"] - result["probability"], rtol=0, atol=1e-12)


def test_without_the_target_column_there_is_no_residual_and_chunks_change_nothing(fitted_files, work, run):
    pd.read_csv(work / "diabetes.csv").drop(columns="progression").to_csv(work / "new.csv", index=False)
    status, out, _ = run("predict", fitted_files["regression"], "new.csv", "--each-stage")
    assert status == 0 and "residual" not in read(out).columns
    _, whole, _ = run("predict", fitted_files["regression"], "diabetes.csv", "--each-stage")
    _, chunked, _ = run("predict", fitted_files["regression"], "diabetes.csv", "--each-stage", "--chunk-rows", "9")
    assert whole == chunked


def test_a_target_value_that_is_not_a_class_is_named_with_its_row(fitted_files, work, run):
    frame = pd.read_csv(work / "cancer.csv").astype({"malignant": object})
    frame.loc[123, "malignant"] = "maybe"
    frame.to_csv(work / "odd.csv", index=False)
    status, out, err = run("predict", fitted_files["binary"], "odd.csv", "--each-stage", "--chunk-rows", "100",
                           "--out", "scores.csv")
    assert_one_error(status, err, "odd.csv", "'maybe'", "row 124", "malignant")
    assert not (work / "scores.csv").exists()  # nothing half-written


def test_an_id_named_like_an_added_column_is_refused(fitted_files, work, run):
    frame = pd.read_csv(work / "diabetes.csv").rename(columns={"patient": "after_2"})
    frame.to_csv(work / "clash.csv", index=False)
    status, _, err = run("predict", fitted_files["regression"], "clash.csv", "--each-stage", "--id", "after_2")
    assert_one_error(status, err, "--id 'after_2'", "clash")


def test_show_prints_the_coefficients_of_linear_stages(fitted_files, run):
    status, out, _ = run("show", fitted_files["regression"])
    assert status == 0
    block = out[out.index("stage 1 (linear): coefficients"):]
    lines = block.splitlines()
    assert lines[1].split() == ["term", "coefficient", "against"]
    table = stages.load(fitted_files["regression"]).coefficients(1)
    cells = [re.split(r"\s{2,}", line.strip()) for line in lines[2:] if line]
    shown = {cell[0]: cell[1:] for cell in cells}
    assert list(shown) == list(table["term"])
    assert shown["band = low"][-1] == "high"  # a level's contrast names its reference level
    assert float(shown["bmi"][0]) == float(f"{table.set_index('term').loc['bmi', 'coefficient']:.4g}")
    assert "stage 2" not in block  # tree stages have no coefficients
    status, out, _ = run("show", fitted_files["binary"])
    assert "stage 1 (logistic): coefficients, per unit of each feature, in log-odds" in out
